"""Log output of ``calibrant serve``: the server's own lines and uvicorn's, as text or one JSON object a line.

``log_config(level, fmt)`` is a ``logging.config.dictConfig`` document; the CLI
hands it to uvicorn, which applies it in every worker process. Structured
lines (an alarm opening or resolving) pass their fields as ``extra=...``: the
text form already carries them in its message as ``key=value``, the JSON form
adds each as a key of its own so a log pipeline can filter on them.
"""

from __future__ import annotations

import json
import logging
from datetime import UTC, datetime
from typing import Any

FORMATS = ("text", "json")

# Attributes every LogRecord has; whatever else a record carries came from ``extra=``.
_STANDARD = frozenset(vars(logging.LogRecord("", 0, "", 0, "", None, None))) | {"message", "asctime"}
# uvicorn's access lines carry their parts as record args, not as extra fields.
_UVICORN_ACCESS = ("client_addr", "method", "full_path", "http_version", "status_code")


class JsonFormatter(logging.Formatter):
    """One JSON object per record: time (RFC 3339, UTC), level, logger, message, then the extra fields."""

    def format(self, record: logging.LogRecord) -> str:
        line: dict[str, Any] = {
            "time": datetime.fromtimestamp(record.created, UTC).isoformat(timespec="milliseconds")
            .replace("+00:00", "Z"),
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        if record.name == "uvicorn.access" and isinstance(record.args, tuple) \
                and len(record.args) == len(_UVICORN_ACCESS):
            line.update(zip(_UVICORN_ACCESS, record.args, strict=True))
        for key, value in vars(record).items():
            if key not in _STANDARD and key not in line and not key.startswith("_"):
                line[key] = value
        if record.exc_info:
            line["exception"] = self.formatException(record.exc_info)
        return json.dumps(line, default=str, ensure_ascii=False)


def log_config(level: str, fmt: str) -> dict[str, Any]:
    """The dictConfig document for ``fmt`` (``text`` or ``json``) at ``level`` (e.g. ``info``)."""
    if fmt not in FORMATS:
        raise ValueError(f"log format must be one of {', '.join(FORMATS)}")
    upper = level.upper()
    if fmt == "json":
        formatters: dict[str, Any] = {
            "default": {"()": JsonFormatter},
            "access": {"()": JsonFormatter},
            "calibrant": {"()": JsonFormatter},
        }
    else:
        formatters = {
            "default": {"()": "uvicorn.logging.DefaultFormatter", "fmt": "%(levelprefix)s %(message)s"},
            "access": {
                "()": "uvicorn.logging.AccessFormatter",
                "fmt": '%(levelprefix)s %(client_addr)s - "%(request_line)s" %(status_code)s',
            },
            "calibrant": {"format": "%(asctime)s %(levelname)s %(name)s %(message)s"},
        }
    handlers = {
        name: {"class": "logging.StreamHandler", "formatter": name, "stream": stream}
        for name, stream in (("default", "ext://sys.stderr"), ("access", "ext://sys.stdout"),
                             ("calibrant", "ext://sys.stderr"))
    }
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": formatters,
        "handlers": handlers,
        "loggers": {
            "uvicorn": {"handlers": ["default"], "level": upper, "propagate": False},
            "uvicorn.error": {"level": upper},
            "uvicorn.access": {"handlers": ["access"], "level": upper, "propagate": False},
            "calibrant": {"handlers": ["calibrant"], "level": upper, "propagate": False},
        },
    }
