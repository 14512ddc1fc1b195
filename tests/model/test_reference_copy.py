"""The repository's copy of the worked examples is the specification's own file."""

from __future__ import annotations

from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
COPY = REPO / "tests" / "data" / "reference_cases.json"
SPEC = REPO.parent / "shared" / "reference_cases.json"


@pytest.mark.skipif(not SPEC.exists(), reason="the specification folder ../shared is not beside this checkout")
def test_the_worked_examples_in_the_repository_equal_the_specification_copy():
    assert COPY.read_bytes() == SPEC.read_bytes()


SPEC_TEXT = REPO.parent / "shared" / "MODEL.md"


@pytest.mark.skipif(not SPEC_TEXT.exists(), reason="the specification folder ../shared is not beside this checkout")
def test_the_model_specification_in_the_repository_equals_the_specification_copy():
    assert (REPO / "model" / "MODEL.md").read_bytes() == SPEC_TEXT.read_bytes()
