"""JSON log lines (service/api/logs.py).

Reference: the standard json and logging.config modules (each line parses as JSON; the
configuration is accepted by logging.config.dictConfig); ISO 8601 UTC time stamps.
"""

from __future__ import annotations

import json
import logging
import logging.config
import re
import sys

from service.api.logs import REQUEST_ID, JsonFormatter, logging_config


def _record(msg="done %s", args=("now",), **extra):
    rec = logging.LogRecord("bestscale.test", logging.INFO, __file__, 1, msg, args, None)
    for k, v in extra.items():
        setattr(rec, k, v)
    return rec


def test_a_line_is_json_with_time_level_logger_message_and_fields():
    token = REQUEST_ID.set("req-7")
    try:
        line = JsonFormatter().format(_record(fields={"rows": 40, "route": "/v1/selections"}))
    finally:
        REQUEST_ID.reset(token)
    out = json.loads(line)  # source: the standard json module
    assert out["message"] == "done now" and out["level"] == "info"
    assert out["logger"] == "bestscale.test" and out["request_id"] == "req-7"
    assert out["rows"] == 40 and out["route"] == "/v1/selections"
    # source: ISO 8601 UTC with milliseconds, e.g. 2026-01-31T12:00:00.123Z
    assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", out["time"])


def test_an_exception_is_kept_in_the_line():
    try:
        raise RuntimeError("pipe burst")
    except RuntimeError:
        rec = _record(exc_info=sys.exc_info())
    out = json.loads(JsonFormatter().format(rec))
    assert "pipe burst" in out["error"] and "Traceback" in out["traceback"]
    assert "request_id" not in out


def test_the_configuration_is_accepted_by_dictconfig():
    cfg = logging_config("debug")
    saved = {name: logging.getLogger(name).__dict__.copy() for name in cfg["loggers"]}
    try:
        logging.config.dictConfig(cfg)  # source: the standard logging.config module
        assert logging.getLogger("bestscale").level == logging.DEBUG
        assert logging.getLogger("uvicorn.access").handlers == []
    finally:
        for name, state in saved.items():
            logging.getLogger(name).__dict__.update(state)
