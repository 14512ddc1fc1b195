"""The weekly export's file formats and CSV tables (light: the command line builds its options from them)."""

from __future__ import annotations

EXPORT_FORMATS = ("csv", "json", "html", "parquet")
EXPORT_TABLES = ("shots", "summary")  # a CSV's rows: one per shot, or one per figure of the summary
