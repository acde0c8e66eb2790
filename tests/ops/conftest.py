"""Fixtures for the operational tests: the real app factory with test configuration.

``make_app(**overrides)`` builds ``service.create_app`` from an *empty* environment plus
``overrides`` (so the developer's shell variables never leak in) and adds three test-only
routes: ``GET /_test/item/<item_id>`` echoes its parameter, ``POST /_test/echo`` reads the
JSON body like the real views do, and ``POST /_test/spin`` loops on the compute budget like
an engine caller.
"""

from __future__ import annotations

import json
import time

import pytest
from flask import request

from service import config as config_module
from service import create_app
from service.errors import get_json_body
from service.ops import budget

PROBLEM_MIME = "application/problem+json"


def make_app(env: dict | None = None, *, test_routes: bool = True, **overrides):
    cfg = config_module.from_environment(env or {})
    cfg.update(overrides)
    app = create_app(cfg)
    app.config["TESTING"] = True
    if test_routes:
        def echo():
            get_json_body()
            return {"received_bytes": len(request.get_data(cache=True))}

        def spin():
            check = budget.checker()
            while True:  # an engine loop that checks its deadline between chunks
                check("test spin loop")
                time.sleep(0.005)

        def item(item_id):
            return {"item_id": item_id}

        app.add_url_rule("/_test/echo", "test_echo", echo, methods=["POST"])
        app.add_url_rule("/_test/item/<item_id>", "test_item", item, methods=["GET"])
        app.add_url_rule("/_test/spin", "test_spin", spin, methods=["POST"])
    return app


@pytest.fixture
def app():
    return make_app()


@pytest.fixture
def client(app):
    return app.test_client()


def assert_problem(resp, status: int) -> dict:
    """The response is RFC 9457 problem+json with the given status; returns the body."""
    assert resp.status_code == status, resp.data[:500]
    assert resp.mimetype == PROBLEM_MIME
    body = json.loads(resp.data)  # strict parse of the bytes
    assert body["status"] == status
    assert isinstance(body["title"], str) and body["title"]
    assert isinstance(body["detail"], str) and body["detail"]
    assert body["type"].startswith("https://")
    assert "Traceback" not in resp.get_data(as_text=True)
    return body
