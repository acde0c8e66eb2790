"""The analyses through the Flask app: blocks in /v1/designs and /v1/analyses, request
validation of the options, the Bode plots and the batch endpoint."""

from __future__ import annotations

import copy
import io
import xml.etree.ElementTree as ET

import pytest
from PIL import Image

#: A scenario of our own: 5 V single-supply receive chain, 60 dB from 2 kHz to 200 kHz.
DESIGN = {
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 50, "load_ohm": 10000},
    "opamp": {"gbw_hz": 10e6, "slew_v_per_us": 5, "swing_to_pos_v": 0.05,
              "swing_to_neg_v": 0.05, "supply_min_v": 2.7, "supply_max_v": 6,
              "en_v_per_rthz": 10e-9, "in_a_per_rthz": 1e-13},
}
DUAL = {
    "target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 100000},
    "supply": {"kind": "dual", "v_pos": 15, "v_neg": -15},
    "opamp": "gc-jfet-4m",
}


def design(client, strict_json, body):
    resp = client.post("/v1/designs", json=body)
    assert resp.status_code == 200, resp.data[:500]
    return strict_json(resp.data)


def test_design_always_has_noise_and_supply_rejection(client, strict_json):
    d = design(client, strict_json, DESIGN)
    assert set(d["noise"]) >= {"temperature_k", "band_hz", "output_density", "output_rms_v",
                               "input_rms_v", "snr_db", "stages"}
    assert d["noise"]["temperature_k"] == 300
    assert len(d["noise"]["stages"]) == d["stage_count"]
    assert d["supply_rejection"]["frequency_hz"] == [50, 60, 100, 120]
    assert "tolerance" not in d and "response" not in d
    dual = design(client, strict_json, DUAL)
    assert dual["supply_rejection"] is None


def test_design_with_tolerance_and_response(client, strict_json):
    body = copy.deepcopy(DESIGN)
    body["tolerance"] = {"trials": 500, "seed": 9, "gbw_tolerance_pct": 10}
    body["response"] = {"points": 64}
    body["supply_rejection_hz"] = 1000
    body["temperature_k"] = 310
    d = design(client, strict_json, body)
    tol = d["tolerance"]
    # Passive tolerances default to the request's components (E96 1 %, E12 10 %).
    assert tol["resistor_tolerance_pct"] == 1 and tol["capacitor_tolerance_pct"] == 10
    assert tol["trials"] == 500 and tol["seed"] == 9
    assert "uniform" in tol["distribution"]
    assert tol["model"]["name"] in ("chain-fraction-free", "stage-product")
    assert tol["model"]["nominal_max_rel_deviation"] < 1e-4  # the 0.01 % agreement
    assert 0 <= tol["yield"] <= 1
    for fig in ("gain_db", "f_low_hz", "f_high_hz"):
        assert set(tol[fig]) >= {"min", "p1", "p5", "p50", "p95", "p99", "max",
                                 "worst_case_low", "worst_case_high"}
    assert len(d["response"]["frequency_hz"]) == 64
    assert len(d["response"]["stages"]) == d["stage_count"]
    assert d["supply_rejection"]["frequency_hz"][-1] == 1000
    assert d["noise"]["temperature_k"] == 310
    again = client.post("/v1/designs", json=body)
    assert again.data == client.post("/v1/designs", json=body).data  # same bytes


def test_analysis_takes_the_tolerances_block_and_round_trips(client, strict_json):
    # Issue 9 item 1: a design echoes its normalised tolerances; /v1/analyses accepts the
    # block (same defaults), so analysing the design's circuit reproduces its Monte Carlo
    # exactly (same seed, same per-part tolerances, same bytes of the block).
    body = dict(DESIGN, tolerance={"trials": 200},
                components={"capacitor_tolerance_pct": 5, "electrolytic_tolerance_pct": 10})
    d = design(client, strict_json, body)
    assert d["tolerances"] == {"resistor_tolerance_pct": 1.0, "c0g_tolerance_pct": 5.0,
                               "capacitor_tolerance_pct": 5.0,
                               "electrolytic_tolerance_pct": 10.0, "gbw_tolerance_pct": 0.0}
    analysis = {"circuit": d["circuit"], "input_peak_v": 0.001, "target": d["target"],
                "tolerances": d["tolerances"], "tolerance": {"trials": 200}}
    resp = client.post("/v1/analyses", json=analysis)
    assert resp.status_code == 200
    a = strict_json(resp.data)
    assert a["noise"] == d["noise"]
    assert a["supply_rejection"] == d["supply_rejection"]
    assert a["tolerance"] == d["tolerance"]
    assert a["tolerances"] == d["tolerances"]
    # Without the block the analysis takes the defaults (10 % class-2, 20 % electrolytic).
    del analysis["tolerances"]
    a = strict_json(client.post("/v1/analyses", json=analysis).data)
    assert a["tolerances"]["capacitor_tolerance_pct"] == 10.0
    assert a["tolerance"]["electrolytic_tolerance_pct"] == 20.0


@pytest.mark.parametrize("patch, field", [
    ({"tolerance": {"trials": 100001}}, "tolerance"),
    ({"tolerance": {"trials": 3.5}}, "tolerance"),
    ({"tolerance": {"trials": "10"}}, "tolerance"),
    ({"tolerance": {"seed": -1}}, "tolerance"),
    ({"tolerance": {"gbw_tolerance_pct": "5"}}, "tolerance"),
    ({"tolerance": {"trails": 10}}, "tolerance"),
    ({"response": {"points": 2001}}, "response"),
    ({"response": {"points": 1}}, "response"),
    ({"response": {"f_start_hz": 1e5, "f_stop_hz": 10}}, "response"),
    ({"response": {"f_start_hz": "10"}}, "response"),
    ({"temperature_k": "300"}, "temperature_k"),
])
def test_bad_options_are_422_naming_the_field(client, strict_json, patch, field):
    body = copy.deepcopy(DESIGN)
    body.update(patch)
    resp = client.post("/v1/designs", json=body)
    assert resp.status_code == 422
    assert resp.mimetype == "application/problem+json"
    assert field in strict_json(resp.data)["errors"]


def svg_ids(data: bytes) -> set:
    root = ET.fromstring(data)  # parses as XML (xml.etree, standard library)
    return {el.get("id") for el in root.iter() if el.get("id")}


def test_bode_svg_has_target_ids(client):
    resp = client.post("/v1/plots/bode.svg", json=DESIGN)
    assert resp.status_code == 200
    assert resp.mimetype == "image/svg+xml"
    ids = svg_ids(resp.data)
    assert {"target-band", "target-f-low", "target-f-high", "cascade-gain"} <= ids
    assert resp.data == client.post("/v1/plots/bode.svg", json=DESIGN).data


def test_bode_png_size_and_analysis_body(client, strict_json):
    resp = client.post("/v1/plots/bode.png?width_px=640&height_px=400", json=DESIGN)
    assert resp.status_code == 200 and resp.mimetype == "image/png"
    # Reference decoder: Pillow.
    assert Image.open(io.BytesIO(resp.data)).size == (640, 400)
    d = design(client, strict_json, DESIGN)
    resp = client.post("/v1/plots/bode.png", json={"circuit": d["circuit"]})
    assert resp.status_code == 200
    assert Image.open(io.BytesIO(resp.data)).size == (900, 600)
    # Without a target there is nothing to mark.
    no_target = client.post("/v1/plots/bode.svg", json={"circuit": d["circuit"]})
    assert "target-band" not in svg_ids(no_target.data)
    with_target = client.post("/v1/plots/bode.svg",
                              json={"circuit": d["circuit"], "target": d["target"]})
    assert "target-f-high" in svg_ids(with_target.data)


@pytest.mark.parametrize("query", ["width_px=10", "height_px=99999", "width_px=abc",
                                   "width_px=3.5", "width_px=%C2%B2%C2%B2%C2%B2",
                                   "width_px=%D9%A3%D9%A0%D9%A0", "colour=red"])
def test_bode_bad_query_is_422(client, strict_json, query):
    # Superscript and Arabic-Indic digits pass str.isdigit() but are no ASCII integer;
    # unknown parameters are refused as on the exports (issue 10).
    resp = client.post(f"/v1/plots/bode.png?{query}", json=DESIGN)
    assert resp.status_code == 422
    errors = strict_json(resp.data)["errors"]["query"]
    assert set(errors) == {query.split("=")[0]}


def test_bode_bad_body(client):
    assert client.post("/v1/plots/bode.svg", data="{", content_type="application/json") \
        .status_code == 400
    assert client.post("/v1/plots/bode.svg", data="x", content_type="text/plain") \
        .status_code == 415
    assert client.post("/v1/plots/bode.svg", json={"target": 1}).status_code == 422


def test_batch_mixed_results_in_order(client, strict_json):
    bad_field = copy.deepcopy(DESIGN)
    bad_field["target"]["gian_db"] = 3
    bad_supply = copy.deepcopy(DUAL)
    bad_supply["supply"] = {"kind": "dual", "v_pos": 30, "v_neg": -30}  # beyond supply_max_v
    items = [DESIGN, bad_field, DUAL, bad_supply, "not an object"]
    resp = client.post("/v1/designs/batch", json={"requests": items})
    assert resp.status_code == 200
    results = strict_json(resp.data)["results"]
    assert [r["status"] for r in results] == [200, 422, 200, 422, 422]
    assert results[0]["design"] == design(client, strict_json, DESIGN)
    assert results[2]["design"]["supply_rejection"] is None
    assert "gian_db" in results[1]["problem"]["errors"]["target"]
    assert results[3]["problem"]["status"] == 422


def test_batch_limits(client, strict_json):
    resp = client.post("/v1/designs/batch", json={"requests": [DUAL] * 101})
    assert resp.status_code == 422
    assert "requests" in strict_json(resp.data)["errors"]
    assert client.post("/v1/designs/batch", json={"requests": []}).get_json() == {"results": []}
    assert client.post("/v1/designs/batch", json={"requests": {}}).status_code == 422
    assert client.post("/v1/designs/batch", json={"requests": [], "x": 1}).status_code == 422
    assert client.post("/v1/designs/batch", json=[]).status_code == 422
