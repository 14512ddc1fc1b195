"""The one version string of wakeledger: the installed package's (pyproject.toml)."""

from __future__ import annotations

from importlib.metadata import PackageNotFoundError, version

try:
    VERSION = version("wakeledger")
except PackageNotFoundError:  # a source tree that was never installed
    VERSION = "0+unknown"
