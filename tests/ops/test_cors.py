"""CORS allow-list (Fetch standard, CORS protocol: Access-Control-* response headers)."""

from __future__ import annotations

import pytest

from .conftest import make_app

PORTAL = "https://portal.example.invalid"
ENV = {"GAINCHAIN_CORS_ORIGINS": f"{PORTAL}, https://plm.example.invalid:8443",
       "GAINCHAIN_API_KEYS": "k-1"}
AUTH = {"Authorization": "Bearer k-1"}


@pytest.fixture
def client():
    return make_app(ENV).test_client()


def test_allowed_origin_gets_cors_headers(client):
    resp = client.get("/v1/opamps", headers={"Origin": PORTAL, **AUTH})
    assert resp.headers["Access-Control-Allow-Origin"] == PORTAL
    assert "Origin" in resp.headers["Vary"]
    assert "X-Request-ID" in resp.headers["Access-Control-Expose-Headers"]
    assert "Access-Control-Allow-Credentials" not in resp.headers


def test_second_allowed_origin_with_port(client):
    origin = "https://plm.example.invalid:8443"
    resp = client.get("/healthz", headers={"Origin": origin})
    assert resp.headers["Access-Control-Allow-Origin"] == origin


@pytest.mark.parametrize("origin", [
    "https://evil.example.invalid",
    "http://portal.example.invalid",         # other scheme
    "https://portal.example.invalid:444",    # other port
    "https://portal.example.invalid.evil",   # suffix trick
    "null",
])
def test_refused_origin_gets_no_cors_headers(client, origin):
    resp = client.get("/healthz", headers={"Origin": origin})
    assert resp.status_code == 200
    assert not [h for h in resp.headers.keys() if h.startswith("Access-Control-")]


def test_preflight_from_allowed_origin(client):
    # No Authorization header: browsers never send credentials on a preflight.
    resp = client.options("/v1/designs", headers={
        "Origin": PORTAL, "Access-Control-Request-Method": "POST",
        "Access-Control-Request-Headers": "authorization, content-type, x-request-id"})
    assert resp.status_code == 204
    assert resp.headers["Access-Control-Allow-Origin"] == PORTAL
    allowed = {h.strip().lower() for h in resp.headers["Access-Control-Allow-Headers"].split(",")}
    assert {"authorization", "content-type", "x-request-id"} <= allowed
    assert "POST" in resp.headers["Access-Control-Allow-Methods"]
    assert int(resp.headers["Access-Control-Max-Age"]) > 0
    assert resp.headers["X-Content-Type-Options"] == "nosniff"


def test_preflight_from_refused_origin_needs_a_key(client):
    # Only an allowed origin's preflight skips authentication; any other OPTIONS would
    # otherwise tell a caller without a key which routes exist (Allow header).
    resp = client.options("/v1/designs", headers={
        "Origin": "https://evil.example.invalid", "Access-Control-Request-Method": "POST"})
    assert resp.status_code == 401
    assert "Allow" not in resp.headers
    assert "Access-Control-Allow-Origin" not in resp.headers


def test_no_cors_headers_at_all_when_not_configured():
    resp = make_app().test_client().get("/healthz", headers={"Origin": PORTAL})
    assert not [h for h in resp.headers.keys() if h.startswith("Access-Control-")]


def test_preflight_needs_a_key_when_cors_is_off():
    # Issue 10: with CORS off no preflight is ours to answer; without a key it is 401, and
    # an unknown route answers the same 401 (nothing tells which routes exist).
    client = make_app({"GAINCHAIN_API_KEYS": "k-1"}).test_client()
    preflight = {"Origin": PORTAL, "Access-Control-Request-Method": "POST"}
    for path in ("/v1/designs", "/v1/no-such-route"):
        resp = client.options(path, headers=preflight)
        assert resp.status_code == 401, path
        assert "Allow" not in resp.headers and "Access-Control-Allow-Origin" not in resp.headers
    # A plain OPTIONS (not a preflight) needs the key too; with it, Flask's answer.
    assert client.options("/v1/designs").status_code == 401
    assert client.options("/v1/designs", headers=dict(preflight, **AUTH)).status_code == 200
