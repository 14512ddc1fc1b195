"""Ingest: payload validation, digest and diff (``payloads``), evaluation rows
(``evaluation``) and storing in one transaction (``storing``)."""

from app.services.ingest.payloads import check_shot_body, physics_problems
from app.services.ingest.storing import IngestResult, ItemOutcome, correct_shot, ingest_shots, write_back_wal

__all__ = [
    "IngestResult",
    "ItemOutcome",
    "check_shot_body",
    "correct_shot",
    "ingest_shots",
    "physics_problems",
    "write_back_wal",
]
