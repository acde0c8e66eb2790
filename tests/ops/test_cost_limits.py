"""Request cost and reply-size limits, and the compute budget over serialisation, plots
and exports (issue 10; OWASP API Security Top 10 2023, API4 "unrestricted resource
consumption"). Every refusal is 422 problem+json whose ``errors`` names the field that
makes the request too expensive; the cost model is in service/ops/cost.py."""

from __future__ import annotations

import time

import pytest

from service.ops import cost

from .conftest import assert_problem, make_app

README = {"name": "ultrasonic-rx-40k",
          "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
          "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m"}
TWELVE = dict(README, stages=12)


@pytest.fixture
def client():
    return make_app(test_routes=False).test_client()


def _errors_name(body: dict, path: str) -> bool:
    node = body["errors"]
    for part in path.split("."):
        if not isinstance(node, dict) or part not in node:
            return False
        node = node[part]
    return True


def test_twelve_stages_and_100000_trials_is_refused_up_front(client):
    started = time.perf_counter()
    resp = client.post("/v1/designs", json=dict(TWELVE, tolerance={"trials": 100_000}))
    body = assert_problem(resp, 422)
    assert _errors_name(body, "tolerance.trials"), body
    assert body["title"] == "Request too expensive"
    # Refused before the Monte Carlo ran: the metered units are the model's figure.
    assert cost.design_units(12, trials=100_000) > cost.DEFAULT_MAX_COST_UNITS
    assert time.perf_counter() - started < 5  # not a speed goal: the 8 s run never started


def test_a_request_within_the_limit_is_answered(client):
    resp = client.post("/v1/designs", json=dict(README, tolerance={"trials": 5000}))
    assert resp.status_code == 200
    assert resp.get_json()["tolerance"]["trials"] == 5000


def test_analysis_is_metered_with_its_circuit_stage_count(client):
    circuit = client.post("/v1/designs", json=TWELVE).get_json()["circuit"]
    resp = client.post("/v1/analyses", json={"circuit": circuit, "tolerance": {
        "trials": 60_000, "resistor_tolerance_pct": 1, "capacitor_tolerance_pct": 10}})
    assert _errors_name(assert_problem(resp, 422), "tolerance.trials")


def test_batch_of_100_items_with_2000_points_is_refused_before_any_design(client):
    # The review's case: 100 x 2000 points returned 103.8 MB. Refused on the estimate.
    item = dict(README, response={"points": 2000})
    before = _design_count(client)
    resp = client.post("/v1/designs/batch", json={"requests": [item] * 100})
    body = assert_problem(resp, 422)
    assert _errors_name(body, "requests") and body["title"] == "Reply too large"
    assert _design_count(client) == before  # no item was designed


def test_batch_whose_trials_add_up_is_refused(client):
    item = dict(README, stages=2, tolerance={"trials": 20_000})
    resp = client.post("/v1/designs/batch", json={"requests": [item] * 10})
    body = assert_problem(resp, 422)
    assert _errors_name(body, "requests") and body["title"] == "Request too expensive"


def _design_count(client) -> float:
    from prometheus_client.parser import text_string_to_metric_families

    text = client.get("/metrics").get_data(as_text=True)
    for family in text_string_to_metric_families(text):
        for sample in family.samples:
            if sample.name == "gainchain_design_compute_seconds_count":
                return sample.value
    return 0.0


def test_large_plot_with_many_trials_is_refused(client):
    # The review's case: a 4000 x 4000 PNG with 72,000 trials took 11.5 s.
    resp = client.post("/v1/plots/bode.png?width_px=4000&height_px=4000",
                       json=dict(TWELVE, tolerance={"trials": 72_000}))
    assert _errors_name(assert_problem(resp, 422), "tolerance.trials")


def test_pixels_count_against_the_limit():
    client = make_app({"GAINCHAIN_MAX_COST_UNITS": "100000"}, test_routes=False).test_client()
    resp = client.post("/v1/plots/bode.png?width_px=4000&height_px=4000", json=README)
    assert _errors_name(assert_problem(resp, 422), "query.width_px")
    assert client.post("/v1/plots/bode.png?width_px=400&height_px=300",
                       json=README).status_code == 200


def test_reply_size_is_estimated_and_refused_by_field():
    client = make_app({"GAINCHAIN_MAX_REPLY_BYTES": "200000"}, test_routes=False).test_client()
    resp = client.post("/v1/designs", json=dict(TWELVE, response={"points": 2000}))
    body = assert_problem(resp, 422)
    assert _errors_name(body, "response.points") and body["title"] == "Reply too large"
    assert client.post("/v1/designs", json=dict(README, response={"points": 100})
                       ).status_code == 200


def test_written_reply_is_capped_too():
    # The estimate can be short for a reply it does not model (the catalog listing here):
    # the written bytes are checked as well.
    client = make_app({"GAINCHAIN_MAX_REPLY_BYTES": "1024"}, test_routes=False).test_client()
    body = assert_problem(client.get("/v1/opamps"), 422)
    assert body["title"] == "Reply too large"


def _slow(seconds: float, inner):
    def wrapped(*args, **kwargs):
        time.sleep(seconds)
        return inner(*args, **kwargs)
    return wrapped


def test_budget_covers_serialisation(monkeypatch):
    import service.views as views

    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.3"}, test_routes=False).test_client()
    monkeypatch.setattr(views, "dumps", _slow(0.5, views.dumps))
    body = assert_problem(client.post("/v1/designs", json=README), 503)
    assert "budget" in body["detail"]


def test_budget_covers_plot_rendering(monkeypatch):
    import service.blueprints.plots as plots

    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.3"}, test_routes=False).test_client()
    monkeypatch.setattr(plots, "render", _slow(0.5, plots.render))
    assert_problem(client.post("/v1/plots/bode.svg", json=README), 503)


def test_budget_covers_exports(monkeypatch):
    import service.blueprints.exports as exports

    client = make_app({"GAINCHAIN_COMPUTE_BUDGET_S": "0.3"}, test_routes=False).test_client()
    monkeypatch.setattr(exports, "export", _slow(0.5, exports.export))
    assert_problem(client.post("/v1/exports/bom.xlsx", json=README), 503)


def test_repeated_batch_items_are_designed_once_and_answered_alike(client):
    # A design is a pure function of its request (same request, same bytes out), so an item
    # repeated in a batch is designed once; every slot still carries the full result.
    other = dict(README, target=dict(README["target"], gain_db=54))
    before = _design_count(client)
    resp = client.post("/v1/designs/batch", json={"requests": [README, other, README] * 5})
    assert resp.status_code == 200
    results = resp.get_json()["results"]
    assert len(results) == 15 and all(r["status"] == 200 for r in results)
    assert _design_count(client) == before + 2
    assert results[0] == results[2] == results[14]
    assert results[1] != results[0]
    single = client.post("/v1/designs", json=README).get_json()
    assert results[0]["design"] == single
