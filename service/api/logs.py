"""Structured logs: one JSON object per line, tagged with the request id of the request.

The request id lives in a context variable set by the outer middleware; the framework
copies the context into the worker thread of a ``def`` route, so log lines written by the
core while it computes carry the id of the request they belong to.
"""

from __future__ import annotations

import contextvars
import json
import logging
import time

REQUEST_ID: contextvars.ContextVar[str | None] = contextvars.ContextVar(
    "bestscale_request_id", default=None
)


class JsonFormatter(logging.Formatter):
    """``{"time", "level", "logger", "message", "request_id"?, ...fields, "traceback"?}``.

    Extra key/value pairs are passed as ``extra={"fields": {...}}``.
    """

    def format(self, record: logging.LogRecord) -> str:
        out = {
            "time": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname.lower(),
            "logger": record.name,
            "message": record.getMessage(),
        }
        rid = REQUEST_ID.get()
        if rid is not None:
            out["request_id"] = rid
        fields = getattr(record, "fields", None)
        if isinstance(fields, dict):
            out.update(fields)
        if record.exc_info:
            out["error"] = repr(record.exc_info[1])
            out["traceback"] = self.formatException(record.exc_info)
        return json.dumps(out, default=str, ensure_ascii=False)


def logging_config(level: str) -> dict:
    """A ``logging.config.dictConfig`` mapping: every line on stdout as JSON.

    Passed to the server so that each worker process applies it at start-up.
    """
    lvl = level.upper()
    handler = {"class": "logging.StreamHandler", "formatter": "json", "stream": "ext://sys.stdout"}
    return {
        "version": 1,
        "disable_existing_loggers": False,
        "formatters": {"json": {"()": f"{__name__}.JsonFormatter"}},
        "handlers": {"stdout": handler},
        "loggers": {
            "bestscale": {"handlers": ["stdout"], "level": lvl, "propagate": False},
            "uvicorn": {"handlers": ["stdout"], "level": lvl, "propagate": False},
            "uvicorn.error": {"level": lvl},
            # the service writes its own access line per request (service.api.middleware)
            "uvicorn.access": {"handlers": [], "level": "WARNING", "propagate": False},
        },
    }
