"""The property-based run uses SQLite only, like the browser tests: it exercises the API's
parsing, validation and answers, which are the same on both backends; the edge cases a
backend treats differently (NUL characters, integer ranges, times) are explicit tests on
both (tests/service/test_hostile_inputs.py). Twice the run would double its time budget."""

from __future__ import annotations

import pytest


@pytest.fixture
def backend() -> str:
    return "sqlite"
