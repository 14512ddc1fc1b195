"""The weekly summary: building it (``summary``), the export table's files (``table``:
CSV, JSON, Parquet) and the HTML report (``report``, with its SVG charts in ``report_charts``)."""
