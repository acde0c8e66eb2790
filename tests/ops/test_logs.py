"""Structured logs: one strict-JSON object per line on stderr (issue 5, "Operations")."""

from __future__ import annotations

import json
import logging

from .conftest import make_app


def _strict(line: str):
    def reject(name):
        raise ValueError(name)

    return json.loads(line, parse_constant=reject)


def test_every_stderr_line_is_one_json_object(capsys):
    client = make_app().test_client()
    client.get("/healthz")
    client.get("/nope")
    client.post("/_test/echo", data=b"{", content_type="application/json")
    err = capsys.readouterr().err
    lines = [line for line in err.split("\n") if line]
    assert len(lines) >= 3
    docs = [_strict(line) for line in lines]
    assert all(isinstance(doc, dict) for doc in docs)
    requests = [doc for doc in docs if doc.get("event") == "request"]
    assert [(d["method"], d["path"], d["status"]) for d in requests] == [
        ("GET", "/healthz", 200), ("GET", "/nope", 404), ("POST", "/_test/echo", 400)]
    for doc in requests:
        assert {"ts", "level", "logger", "msg", "request_id", "route", "duration_ms"} <= set(doc)
        assert doc["duration_ms"] >= 0
    assert requests[1]["route"] == "<unmatched>"


def test_route_template_not_raw_path_in_logs(capsys):
    client = make_app().test_client()
    assert client.get("/_test/item/no-such-id-123").status_code == 200
    docs = [_strict(x) for x in capsys.readouterr().err.splitlines() if x]
    req = [d for d in docs if d.get("event") == "request"][-1]
    assert req["path"] == "/_test/item/no-such-id-123"
    assert req["route"] == "/_test/item/<item_id>"


def test_exception_log_stays_on_one_line(capsys):
    app = make_app()
    with app.test_request_context("/x", headers={"X-Request-ID": "rid-exc"}):
        app.preprocess_request()
        try:
            raise ValueError("boom\nwith newline")
        except ValueError:
            logging.getLogger("gainchain").exception("failed")
    lines = [x for x in capsys.readouterr().err.splitlines() if x]
    docs = [_strict(x) for x in lines]
    failed = [d for d in docs if d["msg"] == "failed"]
    assert failed and "boom" in failed[0]["exc"] and failed[0]["request_id"] == "rid-exc"
