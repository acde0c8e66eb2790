"""API-key authentication (issue 5, "Access"): Bearer keys, key file, exemptions, order.

RFC 6750 (Bearer tokens) section 3: a 401 carries ``WWW-Authenticate: Bearer ...`` and
``error="invalid_token"`` when a token was sent but is not valid.
"""

from __future__ import annotations

import io

import pytest

from service.config import from_environment
from service.ops import auth

from .conftest import assert_problem, make_app

KEYS = {"GAINCHAIN_API_KEYS": "alpha-key-1, beta-key-2"}


@pytest.fixture
def secured():
    return make_app(KEYS).test_client()


def test_missing_key_is_401_problem_with_challenge(secured):
    resp = secured.post("/_test/echo", json={"a": 1})
    body = assert_problem(resp, 401)
    assert resp.headers["WWW-Authenticate"].startswith("Bearer ")
    assert "Authorization: Bearer" in body["detail"]


@pytest.mark.parametrize("header", [
    "Bearer wrong-key",
    "Bearer alpha-key-1x",   # a prefix match is not a match
    "Bearer alpha-key",
    "Basic YWxwaGEta2V5LTE6",  # another scheme
    "Bearer",
    "alpha-key-1",
])
def test_wrong_key_is_401(secured, header):
    resp = secured.post("/_test/echo", json={"a": 1}, headers={"Authorization": header})
    assert_problem(resp, 401)
    assert "Bearer" in resp.headers["WWW-Authenticate"]


def test_wrong_bearer_token_says_invalid_token(secured):
    resp = secured.get("/v1/opamps", headers={"Authorization": "Bearer nope"})
    assert_problem(resp, 401)
    assert 'error="invalid_token"' in resp.headers["WWW-Authenticate"]


@pytest.mark.parametrize("key", ["alpha-key-1", "beta-key-2"])
def test_right_key_passes(secured, key):
    resp = secured.post("/_test/echo", json={"a": 1}, headers={"Authorization": f"Bearer {key}"})
    assert resp.status_code == 200
    assert resp.get_json() == {"received_bytes": 8}


def test_scheme_is_case_insensitive(secured):
    # RFC 9110 section 11.1: the auth scheme is case-insensitive.
    resp = secured.post("/_test/echo", json={}, headers={"Authorization": "bearer alpha-key-1"})
    assert resp.status_code == 200


@pytest.mark.parametrize("path", ["/healthz", "/readyz", "/metrics", "/openapi.json", "/docs"])
def test_exempt_paths_need_no_key(secured, path):
    assert secured.get(path).status_code == 200


def test_unknown_path_without_key_is_401_not_404(secured):
    # Routes are not revealed to callers without a key.
    assert_problem(secured.get("/v1/no-such-thing"), 401)


def test_auth_off_when_no_keys_configured(client):
    assert client.post("/_test/echo", json={"a": 1}).status_code == 200


class _ExplodingStream(io.RawIOBase):
    """A WSGI input that fails the test if anybody reads it."""

    def __init__(self):
        self.reads = 0

    def readable(self):
        return True

    def readinto(self, buffer):
        self.reads += 1
        raise AssertionError("the body was read before authentication")


def test_missing_key_is_401_before_the_body_is_read_even_when_oversized():
    app = make_app(KEYS, GAINCHAIN_MAX_BODY_BYTES=1024)
    stream = _ExplodingStream()
    resp = app.test_client().post(
        "/_test/echo", content_type="application/json",
        environ_overrides={"wsgi.input": stream, "CONTENT_LENGTH": str(10 * 1024 * 1024)})
    assert_problem(resp, 401)
    assert stream.reads == 0


def test_with_key_an_oversized_body_is_413_without_reading_it():
    app = make_app(KEYS, GAINCHAIN_MAX_BODY_BYTES=1024)
    stream = _ExplodingStream()
    resp = app.test_client().post(
        "/_test/echo", content_type="application/json",
        headers={"Authorization": "Bearer alpha-key-1"},
        environ_overrides={"wsgi.input": stream, "CONTENT_LENGTH": "1025"})
    assert_problem(resp, 413)
    assert stream.reads == 0


def test_keys_file_ignores_comments_and_blank_lines(tmp_path):
    keys_file = tmp_path / "keys.txt"
    keys_file.write_text("# portal keys, rotated monthly\n\n  file-key-1  \n#file-key-2\n"
                         "file-key-3\n\n", encoding="utf-8")
    client = make_app({"GAINCHAIN_API_KEYS_FILE": str(keys_file)}).test_client()

    def status(key):
        return client.post("/_test/echo", json={},
                           headers={"Authorization": f"Bearer {key}"}).status_code

    assert status("file-key-1") == 200
    assert status("file-key-3") == 200
    assert status("#file-key-2") == 401
    assert status("file-key-2") == 401
    assert status("# portal keys, rotated monthly") == 401


def test_keys_file_and_list_combine(tmp_path):
    keys_file = tmp_path / "keys.txt"
    keys_file.write_text("from-file\n", encoding="utf-8")
    client = make_app({"GAINCHAIN_API_KEYS_FILE": str(keys_file),
                       "GAINCHAIN_API_KEYS": "from-env"}).test_client()
    for key in ("from-file", "from-env"):
        assert client.post("/_test/echo", json={},
                           headers={"Authorization": f"Bearer {key}"}).status_code == 200


def test_unreadable_or_empty_keys_file_refuses_to_start(tmp_path):
    # Fail closed: a configured but unusable key file must not silently switch auth off.
    with pytest.raises(RuntimeError, match="cannot read"):
        make_app({"GAINCHAIN_API_KEYS_FILE": str(tmp_path / "missing.txt")})
    empty = tmp_path / "empty.txt"
    empty.write_text("# no keys yet\n\n", encoding="utf-8")
    with pytest.raises(RuntimeError, match="holds no key"):
        make_app({"GAINCHAIN_API_KEYS_FILE": str(empty)})


def test_key_matching_unit():
    digests = auth.load_keys(from_environment({"GAINCHAIN_API_KEYS": "k1,,k2, k1"}))
    assert len(digests) == 2
    assert auth.key_matches("k1", digests) and auth.key_matches("k2", digests)
    assert not auth.key_matches("k3", digests)
    assert not auth.key_matches("", digests)
    assert auth.bearer_token("Bearer  tok ") == "tok"
    assert auth.bearer_token("Token tok") is None
    assert auth.bearer_token(None) is None


def test_control_the_exploding_stream_does_detect_a_read():
    # Positive control for the two tests above: when the view reads, the stream notices.
    app = make_app(KEYS)
    stream = _ExplodingStream()
    resp = app.test_client().post(
        "/_test/echo", content_type="application/json",
        headers={"Authorization": "Bearer alpha-key-1"},
        environ_overrides={"wsgi.input": stream, "CONTENT_LENGTH": "10"})
    assert stream.reads >= 1
    assert resp.status_code in (400, 500)
