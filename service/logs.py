"""JSON-lines logs on stdout, one object per event, with the request id.

Fields: ts, level, logger, event, request_id, and for requests method, route, status,
duration_s. Bodies and API keys are never logged.
"""

from __future__ import annotations

import datetime as dt
import json
import logging
import sys

from .context import request_id

__all__ = ["JsonFormatter", "configure_logging"]

_FIELDS = ("method", "route", "status", "duration_s", "job_id")


class JsonFormatter(logging.Formatter):
    def format(self, record: logging.LogRecord) -> str:
        out: dict[str, object] = {
            "ts": dt.datetime.fromtimestamp(record.created, dt.UTC).isoformat(),
            "level": record.levelname.lower(),
            "logger": record.name,
            "event": record.getMessage(),
        }
        rid = getattr(record, "request_id", None) or request_id.get()
        if rid:
            out["request_id"] = rid
        for name in _FIELDS:
            if hasattr(record, name):
                out[name] = getattr(record, name)
        if record.exc_info:
            out["error"] = self.formatException(record.exc_info)
        return json.dumps(out, default=str)


def configure_logging(level: str = "INFO") -> None:
    """Send every log record to stdout as JSON lines (uvicorn's included)."""
    handler = logging.StreamHandler(sys.stdout)
    handler.setFormatter(JsonFormatter())
    root = logging.getLogger()
    root.handlers[:] = [handler]
    root.setLevel(level)
    for name in ("uvicorn", "uvicorn.error"):
        logging.getLogger(name).handlers[:] = []
        logging.getLogger(name).propagate = True
    logging.getLogger("uvicorn.access").disabled = True  # requests are logged by the app
