"""Shared fixtures: the Flask app from the real factory, its test client, and a strict
JSON parser for every reply (no NaN/Infinity literals, as the issue requires)."""

from __future__ import annotations

import json

import pytest

PROBLEM_MIME = "application/problem+json"


def _refuse_constant(name: str):
    raise ValueError(f"non-strict JSON constant {name!r} in a reply")


def parse_strict(data: bytes | str):
    """``json.loads`` that refuses NaN, Infinity and -Infinity (RFC 8259 has no such numbers)."""
    if isinstance(data, bytes):
        data = data.decode("utf-8")
    return json.loads(data, parse_constant=_refuse_constant)


@pytest.fixture
def app():
    from service import create_app

    return create_app({"TESTING": True})


@pytest.fixture
def client(app):
    return app.test_client()


@pytest.fixture
def strict_json():
    """The strict parser, as a fixture: ``strict_json(resp.data)``."""
    return parse_strict
