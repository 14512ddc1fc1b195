"""The presentation layer: how wakeledger shows things, defined once.

Numbers (``numbers``), field labels and units (``fields``), colours, shapes and glyphs
(``palette``), Plotly defaults (``charts``), JSON for pages (``json_text``), the CSV
convention (``csv_writer``) and the one Jinja environment factory (``templates``).
Pages, live feeds, CSV files and reports all take their text from here. Times are
formatted by ``app.times``. This package imports only the model, ``app.times``,
``app.plain`` and ``app.advisory``: never a service or the store.
"""
