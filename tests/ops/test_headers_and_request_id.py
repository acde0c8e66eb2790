"""Security headers on every response, and X-Request-ID propagation.

Header values: OWASP Secure Headers Project recommendations (nosniff, no-referrer, DENY,
no-store for API responses).
"""

from __future__ import annotations

import json
import re

import pytest

from .conftest import make_app

EXPECTED = {
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "no-referrer",
    "X-Frame-Options": "DENY",
    "Cache-Control": "no-store",
}


def _requests():
    return [
        ("get", "/healthz", {}),                                  # 200
        ("get", "/openapi.json", {}),                             # 200 JSON
        ("get", "/metrics", {}),                                  # 200 text
        ("get", "/nope", {}),                                     # 404
        ("delete", "/healthz", {}),                               # 405
        ("post", "/_test/echo", {"data": b"{", "content_type": "application/json"}),  # 400
        ("post", "/_test/echo", {"data": b"x" * 2048, "content_type": "application/json"}),
        ("post", "/_test/echo", {"data": b"a=1", "content_type": "text/plain"}),  # 415
    ]


@pytest.mark.parametrize("method,path,kwargs", _requests())
def test_security_headers_on_every_response(method, path, kwargs):
    client = make_app(GAINCHAIN_MAX_BODY_BYTES=1024).test_client()
    resp = getattr(client, method)(path, **kwargs)
    for name, value in EXPECTED.items():
        assert resp.headers.get(name) == value, (path, resp.status_code, name)


def test_security_headers_on_401():
    resp = make_app({"GAINCHAIN_API_KEYS": "k"}).test_client().post("/_test/echo", json={})
    assert resp.status_code == 401
    for name, value in EXPECTED.items():
        assert resp.headers.get(name) == value


def test_docs_page_has_a_csp_without_scripts(client):
    resp = client.get("/docs")
    csp = resp.headers["Content-Security-Policy"]
    assert "script-src" not in csp and "default-src 'none'" in csp
    assert resp.headers["X-Frame-Options"] == "DENY"


def test_request_id_is_honoured(client):
    resp = client.get("/healthz", headers={"X-Request-ID": "portal-42.a:b_c"})
    assert resp.headers["X-Request-ID"] == "portal-42.a:b_c"


def test_request_id_is_generated_when_absent(client):
    first = client.get("/healthz").headers["X-Request-ID"]
    second = client.get("/healthz").headers["X-Request-ID"]
    assert re.fullmatch(r"[0-9a-f]{32}", first) and first != second


@pytest.mark.parametrize("bad", ["", "a" * 129, "has space", "new\tline", "<script>", "é"])
def test_unsafe_request_id_is_replaced(client, bad):
    resp = client.get("/healthz", headers={"X-Request-ID": bad})
    assert re.fullmatch(r"[0-9a-f]{32}", resp.headers["X-Request-ID"])


def test_request_id_on_error_responses(client):
    resp = client.get("/nope", headers={"X-Request-ID": "trace-404"})
    assert resp.status_code == 404 and resp.headers["X-Request-ID"] == "trace-404"


def test_request_id_is_in_the_log_line(client, capsys):
    client.get("/healthz", headers={"X-Request-ID": "trace-log-1"})
    lines = [json.loads(line) for line in capsys.readouterr().err.splitlines() if line.strip()]
    request_lines = [doc for doc in lines if doc.get("event") == "request"]
    assert request_lines and request_lines[-1]["request_id"] == "trace-log-1"
