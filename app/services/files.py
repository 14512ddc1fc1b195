"""Writing files so that a reader never sees a half-written one."""

from __future__ import annotations

import os
import tempfile
from collections.abc import Callable
from pathlib import Path
from typing import BinaryIO


def write_atomically(path: Path | str, write: Callable[[BinaryIO], None]) -> Path:
    """Let ``write`` fill a temporary file beside ``path``, fsync it, then rename it into place.

    On any error (or interruption) the temporary file is removed and ``path`` is untouched.
    The file gets the usual permissions (0666 less the umask), not mkstemp's 0600.
    """
    path = Path(path)
    directory = path.parent if str(path.parent) else Path(".")
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=directory)
    try:
        with os.fdopen(fd, "wb") as out:
            write(out)
            out.flush()
            os.fsync(out.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp_name, 0o666 & ~umask)
        os.replace(tmp_name, path)
    except BaseException:
        try:
            os.unlink(tmp_name)
        except FileNotFoundError:
            pass
        raise
    return path
