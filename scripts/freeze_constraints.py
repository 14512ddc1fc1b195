"""Write constraints.txt: the exact versions, from the current virtualenv, of wakeledger's runtime
dependencies and everything they pull in (not the test extras). The Dockerfile installs with
``pip install -c constraints.txt``. Run after changing the dependencies in pyproject.toml:

    .venv/bin/python scripts/freeze_constraints.py
"""

from __future__ import annotations

import re
import sys
from importlib import metadata
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
# What builds wakeledger itself in the image (pip install --no-build-isolation): pinned here by
# hand, to versions that satisfy [build-system] requires in pyproject.toml.
BUILD_PINS = {"setuptools": "84.2.1", "wheel": "0.48.0"}
_NAME = re.compile(r"^\s*([A-Za-z0-9][A-Za-z0-9._-]*)\s*(\[[^\]]*\])?")


def _canonical(name: str) -> str:
    return re.sub(r"[-_.]+", "-", name).lower()


def _wanted(requirement: str, extras: set[str]) -> tuple[str, set[str]] | None:
    """(name, extras asked) of a requirement line that applies here, or None (its marker says no)."""
    text, _, marker = requirement.partition(";")
    match = _NAME.match(text)
    if match is None:
        return None
    if marker.strip():
        from packaging.markers import Marker

        env = {"extra": ""}
        if not any(Marker(marker).evaluate({**env, "extra": e}) for e in (extras or {""})):
            return None
    asked = {e.strip() for e in (match.group(2) or "").strip("[]").split(",") if e.strip()}
    return match.group(1), asked


def runtime_closure() -> dict[str, str]:
    """name -> installed version of every distribution the runtime dependencies need."""
    found: dict[str, str] = {}
    todo: list[tuple[str, set[str]]] = [("wakeledger", set())]
    while todo:
        name, extras = todo.pop()
        try:
            dist = metadata.distribution(name)
        except metadata.PackageNotFoundError:
            continue  # an optional dependency that is not installed here
        key = _canonical(dist.metadata["Name"])
        seen_before = key in found
        if key != "wakeledger":
            found[key] = dist.version
        if seen_before and not extras:
            continue
        for requirement in dist.requires or []:
            wanted = _wanted(requirement, extras)
            if wanted is not None:
                todo.append(wanted)
    return found


def main() -> int:
    pins = {**runtime_closure(), **BUILD_PINS}
    lines = [
        "# Exact versions of wakeledger's runtime dependencies and theirs, for the Docker image",
        "# (pip install -c constraints.txt). Regenerate: .venv/bin/python scripts/freeze_constraints.py",
        *(f"{name}=={version}" for name, version in sorted(pins.items())),
    ]
    (ROOT / "constraints.txt").write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote constraints.txt: {len(pins)} pins", file=sys.stderr)
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
