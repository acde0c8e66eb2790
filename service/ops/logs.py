"""Structured logs: one JSON object per line on stderr, each with the request id.

The ``gainchain`` logger (and its children) writes through :class:`JsonFormatter`; every
request also gets one ``"event": "request"`` line (method, route, path, status, duration).
Request ids: an incoming ``X-Request-ID`` is kept when it is a sane token (1-128 chars of
``A-Za-z0-9._:-``), otherwise a fresh UUID4 hex is made; the id is echoed back in the
``X-Request-ID`` response header.
"""

from __future__ import annotations

import json
import logging
import re
import sys
import time
import uuid

LOGGER_NAME = "gainchain"
_REQUEST_ID_RE = re.compile(r"[A-Za-z0-9._:\-]{1,128}")
_RESERVED = frozenset(vars(logging.makeLogRecord({})).keys()) | {"message", "asctime"}


def request_id_from(header_value: str | None) -> str:
    if header_value and _REQUEST_ID_RE.fullmatch(header_value):
        return header_value
    return uuid.uuid4().hex


def current_request_id() -> str | None:
    from flask import g, has_app_context

    if not has_app_context():
        return None
    return getattr(g, "request_id", None)


class JsonFormatter(logging.Formatter):
    """Format a record as one line of strict JSON (extra= fields become members)."""

    def format(self, record: logging.LogRecord) -> str:
        doc = {
            "ts": time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
            + f".{int(record.msecs):03d}Z",
            "level": record.levelname,
            "logger": record.name,
            "msg": record.getMessage(),
        }
        rid = getattr(record, "request_id", None) or current_request_id()
        if rid:
            doc["request_id"] = rid
        for key, value in vars(record).items():
            if key not in _RESERVED and key not in doc and not key.startswith("_"):
                doc[key] = value
        if record.exc_info:
            # One line still: the traceback goes in a member, never onto stdout for clients.
            doc["exc"] = self.formatException(record.exc_info)
        return json.dumps(doc, default=str, allow_nan=False, ensure_ascii=False,
                          separators=(",", ":"))


class StderrHandler(logging.StreamHandler):
    """A stream handler that looks up ``sys.stderr`` at each write (test capture friendly)."""

    def __init__(self):
        super().__init__(sys.stderr)

    @property
    def stream(self):
        return sys.stderr

    @stream.setter
    def stream(self, _value):
        pass


def configure(level: str) -> logging.Logger:
    """Install the JSON handler on the ``gainchain`` logger once per process."""
    logger = logging.getLogger(LOGGER_NAME)
    logger.setLevel(level)
    if not any(isinstance(h, StderrHandler) for h in logger.handlers):
        handler = StderrHandler()
        handler.setFormatter(JsonFormatter())
        logger.addHandler(handler)
    logger.propagate = False
    return logger


def route_flask_logger(app) -> None:
    """Flask's own records (``app.logger``: exceptions Flask logs itself) go to stderr as
    JSON lines too, not through the root logger (gunicorn points that at stdout)."""
    from flask.logging import default_handler

    flask_logger = app.logger
    flask_logger.removeHandler(default_handler)
    if not any(isinstance(h, StderrHandler) for h in flask_logger.handlers):
        handler = StderrHandler()
        handler.setFormatter(JsonFormatter())
        flask_logger.addHandler(handler)
    flask_logger.propagate = False


def log_request(logger: logging.Logger, *, method: str, path: str, endpoint: str,
                status: int, duration_s: float, request_id: str) -> None:
    logger.info("request", extra={
        "event": "request", "request_id": request_id, "method": method, "path": path,
        "route": endpoint, "status": status, "duration_ms": round(duration_s * 1e3, 3),
    })
