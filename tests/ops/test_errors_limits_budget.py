"""Error shapes owned by the ops layer, the body-size limit and the compute budget.

RFC 9457 problem details for every error; RFC 9110 section 15.5.6 (405 must send Allow),
section 15.5.14 (413 Content Too Large). Limits from issue 5 (OWASP API4:2023,
unrestricted resource consumption).
"""

from __future__ import annotations

import pytest

from service.config import from_environment
from service.ops import budget

from .conftest import assert_problem, make_app


def test_404_is_problem(client):
    assert_problem(client.get("/no/such/path"), 404)


def test_405_is_problem_with_allow_header(client):
    resp = client.delete("/healthz")
    assert_problem(resp, 405)
    allowed = {m.strip() for m in resp.headers["Allow"].split(",")}
    assert "GET" in allowed and "DELETE" not in allowed


def test_415_is_problem(client):
    assert_problem(client.post("/_test/echo", data=b"{}", content_type="text/plain"), 415)


def test_400_is_problem(client):
    assert_problem(client.post("/_test/echo", data=b'{"a": NaN}',
                               content_type="application/json"), 400)


# --- body size (GAINCHAIN_MAX_BODY_BYTES) ---------------------------------------------

def test_default_body_limit_is_256_kib():
    cfg = from_environment({})
    assert cfg["GAINCHAIN_MAX_BODY_BYTES"] == 262144 == cfg["MAX_CONTENT_LENGTH"]
    app = make_app()
    assert app.config["MAX_CONTENT_LENGTH"] == 262144


def test_body_at_the_limit_passes_and_one_byte_more_is_413():
    limit = 4096
    client = make_app(GAINCHAIN_MAX_BODY_BYTES=limit).test_client()
    prefix, suffix = b'{"pad":"', b'"}'
    fits = prefix + b"x" * (limit - len(prefix) - len(suffix)) + suffix
    assert len(fits) == limit
    assert client.post("/_test/echo", data=fits, content_type="application/json").status_code \
        == 200
    too_big = prefix + b"x" * (limit + 1 - len(prefix) - len(suffix)) + suffix
    body = assert_problem(client.post("/_test/echo", data=too_big,
                                      content_type="application/json"), 413)
    assert "GAINCHAIN_MAX_BODY_BYTES" in body["detail"]


def test_default_limit_rejects_a_300_kib_body(client):
    data = b'{"pad":"' + b"x" * (300 * 1024) + b'"}'
    assert_problem(client.post("/_test/echo", data=data, content_type="application/json"), 413)


def test_chunked_body_without_length_is_cut_at_the_limit():
    # No Content-Length (chunked upload): Flask's MAX_CONTENT_LENGTH stops the read.
    client = make_app(GAINCHAIN_MAX_BODY_BYTES=1024).test_client()

    def chunks():
        yield b'{"pad":"'
        for _ in range(64):
            yield b"x" * 256
        yield b'"}'

    import io

    stream = io.BytesIO(b"".join(chunks()))
    resp = client.post("/_test/echo", content_type="application/json",
                       environ_overrides={"wsgi.input": stream, "wsgi.input_terminated": True},
                       headers={"Transfer-Encoding": "chunked"})
    assert_problem(resp, 413)


def test_bad_limit_setting_refuses_to_start():
    with pytest.raises(RuntimeError, match="GAINCHAIN_MAX_BODY_BYTES"):
        from_environment({"GAINCHAIN_MAX_BODY_BYTES": "lots"})
    with pytest.raises(RuntimeError, match="GAINCHAIN_MAX_BODY_BYTES"):
        from_environment({"GAINCHAIN_MAX_BODY_BYTES": "0"})


# --- compute budget (GAINCHAIN_COMPUTE_BUDGET_S) ---------------------------------------

def test_request_over_budget_is_503_problem():
    # The spin route never returns on its own: only the budget can end it.
    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.05"}).test_client()
    body = assert_problem(client.post("/_test/spin"), 503)
    assert "GAINCHAIN_COMPUTE_BUDGET_S" in body["detail"]


def test_checker_raises_only_after_the_deadline():
    app = make_app(GAINCHAIN_COMPUTE_BUDGET_S=2.0)
    clock = [100.0]
    with app.test_request_context("/"):
        budget.start(2.0, now=lambda: clock[0])
        check = budget.checker(now=lambda: clock[0])
        clock[0] = 101.9
        check("still inside")
        assert budget.remaining_s(now=lambda: clock[0]) == pytest.approx(0.1)
        clock[0] = 102.1
        with pytest.raises(budget.BudgetExceeded, match="during trial chunk"):
            check("trial chunk")


def test_checker_outside_a_request_never_raises():
    check = budget.checker()
    check("pure engine call")
    assert budget.remaining_s() == float("inf")


@pytest.mark.parametrize("raw", ["0", "-1", "nan", "inf", "soon"])
def test_bad_budget_setting_refuses_to_start(raw):
    with pytest.raises(RuntimeError, match="GAINCHAIN_COMPUTE_BUDGET_S"):
        from_environment({"GAINCHAIN_COMPUTE_BUDGET_S": raw})


def test_chunked_body_within_the_limit_is_read_whole():
    client = make_app(GAINCHAIN_MAX_BODY_BYTES=1024).test_client()
    import io

    data = b'{"pad":"' + b"y" * 900 + b'"}'
    resp = client.post("/_test/echo", content_type="application/json",
                       environ_overrides={"wsgi.input": io.BytesIO(data),
                                          "wsgi.input_terminated": True},
                       headers={"Transfer-Encoding": "chunked"})
    assert resp.status_code == 200
    assert resp.get_json() == {"received_bytes": len(data)}


def test_real_endpoint_stops_at_the_budget():
    # POST /v1/designs/batch checks the budget between items (service/blueprints/batch.py).
    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.000001"}).test_client()
    item = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},  # README
            "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m"}
    # 1 us is over long before the first item (parsing the body alone takes longer).
    assert_problem(client.post("/v1/designs/batch", json={"requests": [item] * 3}), 503)


def test_readyz_is_503_problem_without_a_catalog():
    app = make_app()
    client = app.test_client()
    assert client.get("/readyz").status_code == 200
    app.extensions["gainchain_catalog"] = {}
    assert_problem(client.get("/readyz"), 503)


@pytest.mark.slow
def test_largest_monte_carlo_is_cut_by_the_budget():
    # 12 stages x 100,000 trials (both at their schema limits) takes several seconds on this
    # machine class; with a 0.3 s budget the engine's deadline checks end it with a 503.
    # (The default cost limit refuses it up front: tests/ops/test_cost_limits.py; raised
    # here so that the budget itself is what stops it.)
    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.3",
                       "GAINCHAIN_MAX_COST_UNITS": "100000000"}).test_client()
    body = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
            "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m",
            "stages": 12, "tolerance": {"trials": 100000}}
    assert_problem(client.post("/v1/designs", json=body), 503)
