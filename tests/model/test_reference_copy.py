"""The repository's copies of the specification are the shared ones.

tests/data/reference_cases.json equals the shared worked examples byte for byte. model/MODEL.md
is the shared text verbatim, followed only by sections the project adds; each such section's
heading ends with ADDED_SECTION_MARKER (the project readings now, more later the same way).
"""

from __future__ import annotations

import re
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[2]
COPY = REPO / "tests" / "data" / "reference_cases.json"
SPEC = REPO.parent / "shared" / "reference_cases.json"
SPEC_TEXT = REPO.parent / "shared" / "MODEL.md"
MODEL_TEXT = REPO / "model" / "MODEL.md"

# Appended sections: "## <title> (added by wakeledger; not part of the shared specification)".
ADDED_SECTION_MARKER = "(added by wakeledger; not part of the shared specification)"
READINGS_HEADING = f"## Project readings {ADDED_SECTION_MARKER}"


def added_sections(text: str) -> list[str]:
    """The level-2 headings of the text after the shared specification (which must start with one)."""
    assert text.startswith("\n## "), "the appended part must start with a level-2 heading"
    return re.findall(r"^## .*$", text, flags=re.MULTILINE)


@pytest.mark.skipif(not SPEC.exists(), reason="the specification folder ../shared is not beside this checkout")
def test_the_worked_examples_in_the_repository_equal_the_specification_copy():
    assert COPY.read_bytes() == SPEC.read_bytes()


@pytest.mark.skipif(not SPEC_TEXT.exists(), reason="the specification folder ../shared is not beside this checkout")
def test_the_model_specification_in_the_repository_is_the_shared_text_followed_by_marked_sections():
    shared, ours = SPEC_TEXT.read_bytes(), MODEL_TEXT.read_bytes()
    assert ours.startswith(shared)
    headings = added_sections(ours[len(shared) :].decode("utf-8"))
    assert headings and all(h.endswith(ADDED_SECTION_MARKER) for h in headings), headings


def test_the_project_readings_are_one_marked_section_of_model_md():
    text = MODEL_TEXT.read_text(encoding="utf-8")
    headings = re.findall(r"^## .*$", text, flags=re.MULTILINE)
    assert headings.count(READINGS_HEADING) == 1
    assert headings.index(READINGS_HEADING) > headings.index("## Versions")  # after the shared text
