"""The JSON API with the Flask test client: happy paths, round trip, strict, catalog, health.

Every reply is parsed with the strict parser of tests/conftest.py (RFC 8259 JSON: no NaN or
Infinity literals). Scenarios are our own inventions.
"""

from __future__ import annotations

import copy
import math

import pytest

from service.engine.model.catalog import BUILTIN_OPAMPS
from service.examples import README_EXAMPLE

README_REQUEST = README_EXAMPLE

HAPPY = {
    "readme_single_noninv": README_REQUEST,
    "single_inverting": dict(README_REQUEST, topology="inverting", name="hydrophone-preamp",
                             target={"gain": 316.2, "f_low_hz": 50, "f_high_hz": 50000}),
    "dual_noninv": dict(README_REQUEST, name="strain-bridge", opamp="gc-bjt-lownoise-8m",
                        supply={"kind": "dual", "v_pos": 12, "v_neg": -12},
                        target={"gain_db": 66, "f_low_hz": 1, "f_high_hz": 20000},
                        # a 1 Hz corner at the 10 kohm level needs a 1.5 mF ground leg
                        components={"impedance_ohm": 100_000}),
    "dual_inverting_dc": dict(README_REQUEST, name="dc-servo", topology="inverting",
                              opamp="gc-jfet-4m",
                              supply={"kind": "dual", "v_pos": 15, "v_neg": -15},
                              target={"gain_db": 40, "f_low_hz": 0, "f_high_hz": 30000}),
    "inline_opamp_explicit_stages": dict(
        README_REQUEST, stages=3, name="inline-part",
        opamp={"gbw_hz": 20e6, "slew_v_per_us": 10, "swing_to_pos_v": 0.1,
               "swing_to_neg_v": 0.1, "supply_min_v": 2.7, "supply_max_v": 6},
        components={"resistor_series": "E24", "capacitor_series": "E6"}),
}


def post(client, path, body):
    return client.post(path, json=body)


def _ok(resp, strict_json):
    assert resp.status_code == 200, resp.data[:800]
    assert resp.mimetype == "application/json"
    return strict_json(resp.data)


@pytest.mark.parametrize("name", sorted(HAPPY))
def test_design_happy_paths(client, strict_json, name):
    body = _ok(post(client, "/v1/designs", HAPPY[name]), strict_json)
    req = HAPPY[name]
    assert body["status"] == "meets_target", body["shortfalls"]
    assert body["shortfalls"] == []
    assert body["name"] == req["name"]
    circuit = body["circuit"]
    assert circuit["topology"] == req.get("topology", "non_inverting")
    assert body["stage_count"] == len(circuit["stages"])
    if "stages" in req:
        assert body["stage_count"] == req["stages"]
    keys = {"non_inverting": {"c_couple_f", "r_bias_ohm", "r_feedback_ohm", "c_feedback_f",
                              "r_gain_ohm", "c_gain_f"},
            "inverting": {"c_couple_f", "r_in_ohm", "r_feedback_ohm", "c_feedback_f"}
            }[circuit["topology"]]
    for st in circuit["stages"]:
        assert set(st) == keys  # every listed key present, absent parts null
        assert st["r_feedback_ohm"] is not None
    if req["supply"]["kind"] == "single":
        assert set(circuit["bias"]) == {"r_top_ohm", "r_bottom_ohm", "c_bypass_f", "buffered"}
        assert all(v is not None for v in circuit["bias"].values())
    else:
        assert circuit["bias"] is None
    # The embedded op-amp object is complete (defaults filled in).
    for key in ("gbw_hz", "a0_db", "cm_to_pos_v", "channels_per_package", "min_stable_gain"):
        assert circuit["opamp"][key] is not None
    ab = body["performance"]["as_built"]
    t = body["target"]
    assert ab["f_high_hz"] >= t["f_high_hz"]
    if t["f_low_hz"] == 0:
        assert ab["f_low_hz"] is None
    else:
        assert ab["f_low_hz"] <= t["f_low_hz"]
    assert abs(ab["gain_db"] - t["gain_db"]) <= t["gain_tolerance_db"]
    assert t["gain"] == pytest.approx(10 ** (t["gain_db"] / 20), rel=1e-12)
    assert ab["inverting"] == (circuit["topology"] == "inverting" and body["stage_count"] % 2 == 1)
    ideal = body["performance"]["ideal"]
    n = body["stage_count"]
    assert ideal["stage_gain"] == pytest.approx(t["gain"] ** (1 / n), rel=1e-12)
    assert ideal["f_high_hz"] == pytest.approx(
        ideal["stage_f_high_hz"] * math.sqrt(2 ** (1 / n) - 1), rel=1e-12)
    assert len(body["tradeoff"]["rows"]) == 12
    assert body["headroom"]["stages"] and "overall" in body["headroom"]
    assert body["cautions"]


@pytest.mark.parametrize("name", sorted(HAPPY))
def test_round_trip_design_to_analysis(client, strict_json, name):
    req = HAPPY[name]
    design = _ok(post(client, "/v1/designs", req), strict_json)
    analysis = _ok(post(client, "/v1/analyses", {
        "circuit": design["circuit"],
        "input_peak_v": req["signal"]["input_peak_v"],
        "target": design["target"],
    }), strict_json)
    assert analysis["performance"]["as_built"] == design["performance"]["as_built"]
    assert analysis["status"] == design["status"]
    assert analysis["shortfalls"] == design["shortfalls"]
    assert analysis["headroom"] == design["headroom"]


def test_analysis_without_target_has_no_status(client, strict_json):
    design = _ok(post(client, "/v1/designs", README_REQUEST), strict_json)
    body = _ok(post(client, "/v1/analyses", {"circuit": design["circuit"]}), strict_json)
    assert "status" not in body
    assert body["performance"]["as_built"]["gain"] > 0


def test_hand_edited_circuit_is_analysed_as_given(client, strict_json):
    design = _ok(post(client, "/v1/designs", README_REQUEST), strict_json)
    circuit = copy.deepcopy(design["circuit"])
    for st in circuit["stages"]:
        st["c_couple_f"] = st["c_couple_f"] / 10  # ten times smaller: f_low moves up
    body = _ok(post(client, "/v1/analyses", {"circuit": circuit, "target": design["target"],
                                             "input_peak_v": 0.001}), strict_json)
    assert body["performance"]["as_built"]["f_low_hz"] > 2000
    assert body["status"] == "target_not_met"
    # the nominal corner misses, and so do the builds: the predicted yield is about 0
    assert [s["quantity"] for s in body["shortfalls"]] == ["f_low_hz", "yield"]
    assert body["yield"]["predicted"] < 0.01


UNMET = dict(README_REQUEST, target={"gain_db": 80, "f_low_hz": 100, "f_high_hz": 5e6})


def test_unmet_target_is_reported_not_refused(client, strict_json):
    body = _ok(post(client, "/v1/designs", UNMET), strict_json)
    assert body["status"] == "target_not_met"
    assert any(s["quantity"] == "f_high_hz" for s in body["shortfalls"])
    assert any(w["code"] == "target_not_met" for w in body["warnings"])
    assert body["tradeoff"]["required_gbw_hz"] > 10e6


def test_strict_unmet_is_422_with_best_design(client, strict_json):
    plain = _ok(post(client, "/v1/designs", UNMET), strict_json)
    resp = post(client, "/v1/designs", dict(UNMET, strict=True))
    assert resp.status_code == 422
    assert resp.mimetype == "application/problem+json"
    body = strict_json(resp.data)
    for key in ("type", "title", "status", "detail"):
        assert key in body
    assert body["status"] == 422
    best = body["best_design"]
    assert best["status"] == "target_not_met"
    assert best["performance"]["as_built"]["f_high_hz"] == pytest.approx(
        plain["performance"]["as_built"]["f_high_hz"], rel=1e-12)


def test_strict_met_is_200(client, strict_json):
    body = _ok(post(client, "/v1/designs", dict(README_REQUEST, strict=True)), strict_json)
    assert body["status"] == "meets_target"


def test_same_request_same_bytes(client):
    a = post(client, "/v1/designs", README_REQUEST).data
    b = post(client, "/v1/designs", README_REQUEST).data
    assert a == b
    c = post(client, "/v1/designs", HAPPY["dual_inverting_dc"]).data
    d = post(client, "/v1/designs", HAPPY["dual_inverting_dc"]).data
    assert c == d


def test_normalised_target_echo_can_be_sent_back(client, strict_json):
    first = _ok(post(client, "/v1/designs", README_REQUEST), strict_json)
    again = _ok(post(client, "/v1/designs", dict(README_REQUEST, target=first["target"])),
                strict_json)
    assert again["circuit"] == first["circuit"]


def test_opamp_catalog(client, strict_json):
    body = _ok(client.get("/v1/opamps"), strict_json)
    ids = [op["id"] for op in body["opamps"]]
    for op in BUILTIN_OPAMPS:
        assert op.id in ids
    for op_id in ids:
        one = _ok(client.get(f"/v1/opamps/{op_id}"), strict_json)
        assert one["id"] == op_id
        assert one == next(op for op in body["opamps"] if op["id"] == op_id)
        assert one["mpn"] == ""  # built-in archetypes carry no part numbers


def test_fast_part_entry(client, strict_json):
    one = _ok(client.get("/v1/opamps/gc-fast-50m-g5"), strict_json)
    assert one["min_stable_gain"] == 5.0
    assert one["gbw_hz"] == 50e6


def test_unknown_opamp_is_404_problem(client, strict_json):
    resp = client.get("/v1/opamps/no-such-part")
    assert resp.status_code == 404
    assert resp.mimetype == "application/problem+json"
    body = strict_json(resp.data)
    assert body["status"] == 404 and body["title"] and body["detail"] and body["type"]


def test_healthz(client, strict_json):
    resp = client.get("/healthz")
    assert resp.status_code == 200
    assert strict_json(resp.data)["status"] == "ok"
