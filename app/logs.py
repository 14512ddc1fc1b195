"""Log lines as text or as one JSON object a line (``WAKELEDGER_LOG_FORMAT=json``).

``uvicorn_log_config(fmt, level)`` is the logging configuration that ``serve`` and ``demo``
hand to uvicorn (its server and access loggers, and the root logger for ours);
``configure_logging(fmt, level)`` sets the same up for ``wakeledger worker``.
A JSON line holds ``time`` (UTC, ISO 8601), ``level``, ``logger`` and ``message``; a request
line adds ``client``, ``method``, ``path``, ``http_version`` and ``status``; an exception
adds ``exception`` (its traceback as one string).
"""

from __future__ import annotations

import json
import logging
import logging.config
from datetime import UTC, datetime
from typing import Any

TEXT_FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"
_ACCESS_FIELDS = ("client", "method", "path", "http_version", "status")


class JsonLineFormatter(logging.Formatter):
    """One JSON object per record."""

    def format(self, record: logging.LogRecord) -> str:
        line: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC)
            .isoformat(timespec="milliseconds")
            .replace("+00:00", "Z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        # uvicorn's access records carry (client, method, path, http version, status) as their args.
        if record.name == "uvicorn.access" and isinstance(record.args, tuple) and len(record.args) == 5:
            line.update(zip(_ACCESS_FIELDS, record.args, strict=True))
        if record.exc_info:
            line["exception"] = self.formatException(record.exc_info)
        return json.dumps(line, ensure_ascii=False, default=str)


def _formatter(fmt: str) -> dict[str, Any]:
    if fmt == "json":
        return {"()": f"{__name__}.JsonLineFormatter"}
    return {"format": TEXT_FORMAT}


def uvicorn_log_config(fmt: str, level: str = "info") -> dict[str, Any]:
    """A logging.config dictionary: every logger (uvicorn's and ours) to stderr in ``fmt``."""
    level = level.upper()
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {"line": _formatter(fmt)},
        "handlers": {"stderr": {"class": "logging.StreamHandler", "formatter": "line", "stream": "ext://sys.stderr"}},
        "root": {"handlers": ["stderr"], "level": level},
        "loggers": {
            name: {"handlers": [], "level": level, "propagate": True}
            for name in ("uvicorn", "uvicorn.error", "uvicorn.access")
        },
    }


def configure_logging(fmt: str, level: str = "info") -> None:
    logging.config.dictConfig(uvicorn_log_config(fmt, level))
