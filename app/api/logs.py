"""Structured JSON logs, one object a line, with no secrets.

Request lines carry method, route template, path, status, duration and client address; the
``Authorization`` header, tokens and query strings are never logged (a token could be pasted into
a query by mistake).
"""

from __future__ import annotations

import json
import logging
import re
import sys
import time
from typing import Any

from fastapi import Request

_BEARER = re.compile(r"(?i)(bearer\s+)\S+")
_TOKEN = re.compile(r"\bll[a-z]?_[A-Za-z0-9_\-]{8,}")
_RESERVED = set(vars(logging.LogRecord("", 0, "", 0, "", None, None))) | {
    "color_message",  # uvicorn's ANSI-coloured copy of the message
    "taskName",
}


def scrub(text: str) -> str:
    """Remove anything that looks like a bearer token."""
    return _TOKEN.sub("[redacted]", _BEARER.sub(r"\1[redacted]", text))


class JsonFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        entry: dict[str, Any] = {
            "time": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": scrub(record.getMessage()),
        }
        for key, value in vars(record).items():
            if key not in _RESERVED and not key.startswith("_") and key not in entry:
                entry[key] = value if isinstance(value, int | float | bool | None) else scrub(
                    str(value)
                )
        if record.exc_info:
            entry["exception"] = scrub(self.formatException(record.exc_info))
        return json.dumps(entry, default=str)


def configure_logging(level: str = "INFO") -> None:
    """Send the landlift and uvicorn loggers to stderr as JSON lines."""
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(JsonFormatter())
    for name in ("landlift", "uvicorn", "uvicorn.error"):
        logger = logging.getLogger(name)
        logger.handlers[:] = [handler]
        logger.setLevel(level)
        logger.propagate = False
    # the access log is replaced by our own request lines (which carry the route template)
    logging.getLogger("uvicorn.access").handlers[:] = []
    logging.getLogger("uvicorn.access").propagate = False


request_log = logging.getLogger("landlift.api.request")


def log_request(request: Request, status: int, elapsed: float, route: str) -> None:
    client = request.client.host if request.client else None
    request_log.info(
        "%s %s %d",
        request.method,
        route,
        status,
        extra={
            "method": request.method,
            "route": route,
            "path": request.url.path,
            "status": status,
            "duration_ms": round(elapsed * 1000, 2),
            "client": client,
        },
    )
