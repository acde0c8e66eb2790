"""POST /v1/explorations: every candidate is the design POST /v1/designs makes for that op-amp
and stage count; the Pareto set and the ranking follow their definitions.

References: the Pareto set is checked against a brute-force dominance test written here from
the textbook definition (A dominates B when A is no worse on every criterion and strictly
better on one); part counts against the references of the exported CSV BOM read with the
``csv`` module; supply currents against Ohm's law and the quiescent-current budget worked
by hand (common practice).
"""

from __future__ import annotations

import csv
import io
import math

import pytest

from service import create_app
from service.examples import README_EXAMPLE

BASE = {k: v for k, v in README_EXAMPLE.items() if k != "opamp"}


@pytest.fixture(scope="module")
def explored():
    client = create_app({"TESTING": True}).test_client()
    resp = client.post("/v1/explorations", json=BASE)
    assert resp.status_code == 200, resp.data[:400]
    return client, resp.get_json()


def _criteria(c, with_cost=False):
    out = [c["part_count"], c["input_noise_rms_v"], c["supply_current_a"]]
    if with_cost:
        out.append(c["bom_cost"]["total"])
    return [math.inf if x is None else x for x in out]


def _brute_pareto(cands, with_cost=False):
    meeting = [c for c in cands if c["status"] == "meets_target"]
    out = set()
    for b in meeting:
        dominated = False
        for a in meeting:
            if a is b:
                continue
            va, vb = _criteria(a, with_cost), _criteria(b, with_cost)
            pairs = list(zip(va, vb, strict=True))
            if all(x <= y for x, y in pairs) and any(x < y for x, y in pairs):
                dominated = True
        if not dominated:
            out.add((b["opamp_id"], b["stage_count"]))
    return out


def _check_ranking(cands):
    assert [c["rank"] for c in cands] == list(range(1, len(cands) + 1))
    keys = [(c["status"] != "meets_target", not c["pareto"], *_criteria(c)) for c in cands]
    assert keys == sorted(keys)


def test_catalog_exploration_equals_individual_designs(explored, strict_json):
    client, body = explored
    cands = body["candidates"]
    assert body["target"]["gain_db"] == 60
    catalog = {o["id"] for o in client.get("/v1/opamps").get_json()["opamps"]}
    tried = {c["opamp_id"] for c in cands} | {s["opamp_id"] for s in body["skipped"]}
    assert tried == catalog  # every catalog entry is a candidate or skipped with a reason
    for s in body["skipped"]:
        assert "supply span" in s["detail"]
    for c in cands:
        one = {**BASE, "opamp": c["opamp_id"], "stages": c["stage_count"]}
        design = strict_json(client.post("/v1/designs", json=one).data)
        assert design["design_id"] == c["design_id"]
        assert design["status"] == c["status"] and design["shortfalls"] == c["shortfalls"]
        assert design["stage_count"] == c["stage_count"]
        assert design["noise"]["input_rms_v"] == c["input_noise_rms_v"]
        assert design["noise"]["output_rms_v"]["band"] == c["output_noise_rms_v"]
        assert design["bom_cost"] == c["bom_cost"] and design.get("yield") == c["yield"]
        # "auto" tries the stage count POST /v1/designs picks by itself
        auto = strict_json(client.post("/v1/designs", json={**BASE, "opamp": c["opamp_id"]}).data)
        assert auto["design_id"] == c["design_id"]
        rows = list(csv.DictReader(io.StringIO(client.post(
            "/v1/exports/bom.csv", json=one).get_data(as_text=True))))
        assert c["part_count"] == sum(len(r["Reference"].split(",")) for r in rows)
        packages = sum(1 for r in rows for ref in r["Reference"].split(",") if ref[0] == "U")
        assert c["opamp_packages"] == packages


def test_pareto_set_and_rank_of_the_readme_scenario(explored):
    _, body = explored
    cands = body["candidates"]
    assert {(c["opamp_id"], c["stage_count"]) for c in cands if c["pareto"]} == \
        _brute_pareto(cands)
    assert any(c["pareto"] for c in cands)
    _check_ranking(cands)
    first = cands[0]
    # README scenario: the rail-to-rail CMOS dual meets the target in two stages
    assert (first["opamp_id"], first["stage_count"], first["pareto"]) == \
        ("gc-cmos-rr-10m", 2, True)


def test_supply_current_of_the_readme_candidate(explored):
    _, body = explored
    c = next(c for c in body["candidates"] if c["opamp_id"] == "gc-cmos-rr-10m")
    client = explored[0]
    design = client.post("/v1/designs", json={**BASE, "opamp": "gc-cmos-rr-10m"}).get_json()
    bias = design["circuit"]["bias"]
    # one dual package (2 units x 1.1 mA, the catalog's iq_a) + divider 5 V / (Rtop + Rbot)
    expected = 2 * 1.1e-3 + 5.0 / (bias["r_top_ohm"] + bias["r_bottom_ohm"])
    assert c["supply_current_a"] == pytest.approx(expected, rel=1e-12)


def test_listed_opamps_and_stage_counts(tmp_path):
    from pathlib import Path

    library = Path(__file__).resolve().parents[2] / "examples" / "parts-library.json"
    client = create_app({"TESTING": True, "GAINCHAIN_PARTS_LIBRARY": str(library)}).test_client()
    inline = {"id": "inline-rr-20m", "gbw_hz": 20e6, "slew_v_per_us": 10, "swing_to_pos_v": 0.1,
              "swing_to_neg_v": 0.1, "supply_min_v": 2.7, "supply_max_v": 5.5, "iq_a": 2e-3,
              "en_v_per_rthz": 6e-9, "channels_per_package": 2}
    body = {**BASE, "opamp": ["gc-cmos-rr-10m", inline, "gc-micro-1m"], "stages": [3, 1, 2]}
    resp = client.post("/v1/explorations", json=body)
    assert resp.status_code == 200
    cands = resp.get_json()["candidates"]
    assert len(cands) == 9
    assert sorted((c["opamp_id"], c["stage_count"]) for c in cands) == sorted(
        (o, n) for o in ("gc-cmos-rr-10m", "inline-rr-20m", "gc-micro-1m") for n in (1, 2, 3))
    assert all(c["bom_cost"]["currency"] == "EUR" for c in cands)
    # priced library: cost joins the criteria
    assert {(c["opamp_id"], c["stage_count"]) for c in cands if c["pareto"]} == \
        _brute_pareto(cands, with_cost=True)
    _check_ranking(cands)
    inline_design = client.post("/v1/designs", json={**BASE, "opamp": inline, "stages": 2})
    inline_cand = next(c for c in cands if c["opamp_id"] == "inline-rr-20m"
                       and c["stage_count"] == 2)
    assert inline_design.get_json()["design_id"] == inline_cand["design_id"]
    # same request, same bytes
    assert client.post("/v1/explorations", json=body).data == resp.data


@pytest.mark.parametrize("patch, field", [
    ({"opamp": []}, "opamp"),
    ({"opamp": "gc-cmos-rr-10m"}, "opamp"),
    ({"opamp": ["gc-nope"]}, "opamp"),
    ({"opamp": ["gc-cmos-rr-10m", "gc-cmos-rr-10m"]}, "opamp"),
    ({"opamp": ["gc-cmos-rr-10m"] * 201}, "opamp"),
    ({"opamp": [{"gbw_hz": 1e6}]}, "opamp"),
    ({"stages": [2, 2]}, "stages"),
    ({"stages": [0]}, "stages"),
    ({"stages": 2}, "stages"),
    ({"stages": []}, "stages"),
    ({"strict": True}, "strict"),
    ({"colour": "red"}, "colour"),
])
def test_bad_exploration_requests_are_422_naming_the_field(client, strict_json, patch, field):
    resp = client.post("/v1/explorations", json={**BASE, **patch})
    assert resp.status_code == 422
    assert field in strict_json(resp.data)["errors"]


def test_exploration_is_cost_limited(strict_json):
    from service import config

    cfg = config.from_environment({"GAINCHAIN_COMPUTE_BUDGET_S": "0.05"})
    client = create_app({**cfg, "TESTING": True}).test_client()
    resp = client.post("/v1/explorations", json={**BASE, "stages": list(range(1, 13))})
    assert resp.status_code == 503
    assert "GAINCHAIN_COMPUTE_BUDGET_S" in strict_json(resp.data)["detail"]
