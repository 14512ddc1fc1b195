"""Running ``wakeledger`` in-process as a user would type it, in a scratch directory with no
database settings in the environment (``run("token", "list")`` -> (exit code, stdout, stderr))."""

from __future__ import annotations

from collections.abc import Callable

import pytest

DATABASE_ENV = ("DATABASE_URL", "WAKELEDGER_DATABASE_URL")


@pytest.fixture
def run(tmp_path, monkeypatch, capsys) -> Callable[..., tuple[int, str, str]]:
    from app.cli import main

    monkeypatch.chdir(tmp_path)
    for name in DATABASE_ENV:
        monkeypatch.delenv(name, raising=False)

    def invoke(*argv: str) -> tuple[int, str, str]:
        try:
            code = main(list(argv))
        except SystemExit as exc:  # argparse: --version, --help, usage errors
            code = int(exc.code or 0)
        out, err = capsys.readouterr()
        return code, out, err

    return invoke
