"""Backlog import: shots from a CSV, Parquet, JSON lines or HDF5 file into a campaign
(``wakeledger import``).

- ``readers`` — each format read into a ``SourceTable`` (column names, rows as cells);
- ``columns`` — which shot field each file column fills: our export's names (units in
  CSV headers stripped), or a ``--map`` file's renames; the export's derived columns
  are ignored; and a row's cells turned into a shot body as the API takes it;
- ``importing`` — validation with the ingest service's own checks, replays and
  conflicts, and storing in batches through ``ingest_shots`` (each batch all or nothing).
"""

DEFAULT_BATCH = 1000  # shots per ingest call (the API's batch takes at most 5,000)
