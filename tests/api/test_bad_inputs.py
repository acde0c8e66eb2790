"""A table of bad inputs: each one answered 4xx as RFC 9457 problem details
(application/problem+json with type/title/status/detail; for 422 an ``errors`` map naming
the field). Reference: RFC 9457 (problem details) and RFC 9110 (405 needs an Allow header),
from memory.
"""

from __future__ import annotations

import copy
import json

import pytest

BASE = {
    "name": "bad-input-probe",
    "target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 20000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.01, "source_impedance_ohm": 50, "load_ohm": 10000},
    "opamp": "gc-cmos-rr-10m",
}

INLINE_OPAMP = {"gbw_hz": 10e6, "slew_v_per_us": 5, "swing_to_pos_v": 0.1,
                "swing_to_neg_v": 0.1, "supply_min_v": 2.7, "supply_max_v": 12}


def with_(path, value, base=BASE):
    """A copy of ``base`` with the dotted ``path`` set to ``value`` (``...`` deletes it)."""
    body = copy.deepcopy(base)
    keys = path.split(".")
    node = body
    for k in keys[:-1]:
        node = node[k]
    if value is ...:
        del node[keys[-1]]
    else:
        node[keys[-1]] = value
    return body


_CIRCUIT_CACHE: dict = {}


def good_circuit(client):
    if "c" not in _CIRCUIT_CACHE:
        resp = client.post("/v1/designs", json=BASE)
        assert resp.status_code == 200
        _CIRCUIT_CACHE["c"] = resp.get_json()["circuit"]
    return copy.deepcopy(_CIRCUIT_CACHE["c"])


def circuit_without(key):
    def make(client):
        c = good_circuit(client)
        del c[key]
        return {"circuit": c}
    return make


def circuit_stage_without(key):
    def make(client):
        c = good_circuit(client)
        del c["stages"][0][key]
        return {"circuit": c}
    return make


def circuit_with(path, value):
    def make(client):
        return {"circuit": with_(path, value, good_circuit(client))}
    return make


# (id, method, path, body, raw bytes or None, content type, status, field path for 422)
J = "application/json"
CASES = [
    ("malformed_json", "POST", "/v1/designs", None, b'{"target": {', J, 400, None),
    ("nan_literal", "POST", "/v1/designs", None,
     json.dumps(with_("target.gain_db", float("nan"))).encode(), J, 400, None),
    ("infinity_literal", "POST", "/v1/analyses", None, b'{"circuit": {}, "input_peak_v": Infinity}',
     J, 400, None),
    ("nan_literal_analyses", "POST", "/v1/analyses", None,
     b'{"circuit": {}, "input_peak_v": NaN}', J, 400, None),
    ("minus_infinity_literal", "POST", "/v1/designs", None,
     json.dumps(BASE).replace('"f_low_hz": 20', '"f_low_hz": -Infinity').encode(), J, 400,
     None),
    ("not_utf8", "POST", "/v1/designs", None, b'{"name": "\xff"}', J, 400, None),
    ("text_plain", "POST", "/v1/designs", None, json.dumps(BASE).encode(), "text/plain", 415,
     None),
    ("form_encoded", "POST", "/v1/analyses", None, b"a=1",
     "application/x-www-form-urlencoded", 415, None),
    ("no_content_type", "POST", "/v1/designs", None, json.dumps(BASE).encode(), None, 415, None),
    ("unknown_route", "GET", "/v1/nothing-here", None, None, None, 404, None),
    ("unknown_route_post", "POST", "/v2/designs", BASE, None, J, 404, None),
    ("get_on_designs", "GET", "/v1/designs", None, None, None, 405, None),
    ("delete_on_opamps", "DELETE", "/v1/opamps", None, None, None, 405, None),
    ("put_on_analyses", "PUT", "/v1/analyses", {}, None, J, 405, None),
    ("body_is_array", "POST", "/v1/designs", [BASE], None, J, 422, "_schema"),
    ("body_is_string", "POST", "/v1/analyses", "circuit", None, J, 422, "_schema"),
    ("unknown_top_field", "POST", "/v1/designs", with_("colour", "red"), None, J, 422,
     "colour"),
    ("unknown_nested_field", "POST", "/v1/designs",
     with_("target", {"gian_db": 40, "f_low_hz": 20, "f_high_hz": 2e4}), None, J, 422,
     "target.gian_db"),
    ("unknown_supply_field", "POST", "/v1/designs", with_("supply.v_mid", 2.5), None, J, 422,
     "supply.v_mid"),
    ("unknown_opamp_field", "POST", "/v1/designs", with_("opamp", dict(INLINE_OPAMP, gbw=1)),
     None, J, 422, "opamp.gbw"),
    ("stages_float", "POST", "/v1/designs", with_("stages", 3.5), None, J, 422, "stages"),
    ("stages_13", "POST", "/v1/designs", with_("stages", 13), None, J, 422, "stages"),
    ("stages_zero", "POST", "/v1/designs", with_("stages", 0), None, J, 422, "stages"),
    ("stages_string_number", "POST", "/v1/designs", with_("stages", "3"), None, J, 422,
     "stages"),
    ("stages_bool", "POST", "/v1/designs", with_("stages", True), None, J, 422, "stages"),
    ("gain_db_string", "POST", "/v1/designs", with_("target.gain_db", "40"), None, J, 422,
     "target.gain_db"),
    ("f_high_max_not_above_f_high", "POST", "/v1/designs",
     with_("target.f_high_max_hz", 100.0), None, J, 422, "target.f_high_max_hz"),
    ("f_low_min_not_below_f_low", "POST", "/v1/designs",
     with_("target.f_low_min_hz", 1e9), None, J, 422, "target.f_low_min_hz"),
    ("min_yield_zero", "POST", "/v1/designs", with_("target.min_yield", 0), None, J, 422,
     "target.min_yield"),
    ("gain_split_unknown", "POST", "/v1/designs", with_("gain_split", "front"), None, J, 422,
     "gain_split"),
    ("impedance_string_number", "POST", "/v1/designs",
     with_("components", {"impedance_ohm": "10k"}), None, J, 422, "components.impedance_ohm"),
    ("impedance_bool", "POST", "/v1/designs", with_("components", {"impedance_ohm": True}),
     None, J, 422, "components.impedance_ohm"),
    ("min_yield_above_one", "POST", "/v1/designs", with_("target.min_yield", 1.5), None, J,
     422, "target.min_yield"),
    ("f_high_bool", "POST", "/v1/designs", with_("target.f_high_hz", True), None, J, 422,
     "target.f_high_hz"),
    ("v_pos_bool", "POST", "/v1/designs", with_("supply.v_pos", False), None, J, 422,
     "supply.v_pos"),
    ("gain_and_db_disagree", "POST", "/v1/designs", with_("target.gain", 99.0), None, J, 422,
     "target.gain"),
    ("no_gain_at_all", "POST", "/v1/designs", with_("target.gain_db", ...), None, J, 422,
     "target.gain_db"),
    ("channels_per_package_float", "POST", "/v1/designs",
     with_("opamp", dict(INLINE_OPAMP, channels_per_package=2.5)), None, J, 422,
     "opamp.channels_per_package"),
    ("inline_opamp_gbw_nan_string", "POST", "/v1/designs",
     with_("opamp", dict(INLINE_OPAMP, gbw_hz="NaN")), None, J, 422, "opamp.gbw_hz"),
    ("f_low_above_f_high", "POST", "/v1/designs", with_("target.f_low_hz", 30000), None, J,
     422, "target.f_low_hz"),
    ("f_low_equals_f_high", "POST", "/v1/designs", with_("target.f_low_hz", 20000), None, J,
     422, "target.f_low_hz"),
    ("gain_db_zero", "POST", "/v1/designs", with_("target.gain_db", 0), None, J, 422,
     "target.gain_db"),
    ("gain_db_negative", "POST", "/v1/designs", with_("target.gain_db", -6), None, J, 422,
     "target.gain_db"),
    ("gain_ratio_below_one", "POST", "/v1/designs",
     with_("target", {"gain": 0.5, "f_low_hz": 20, "f_high_hz": 2e4}), None, J, 422,
     "target.gain"),
    ("missing_f_high", "POST", "/v1/designs", with_("target.f_high_hz", ...), None, J, 422,
     "target.f_high_hz"),
    ("supply_span_too_high", "POST", "/v1/designs", with_("supply.v_pos", 12), None, J, 422,
     "supply"),
    ("supply_span_too_low_dual", "POST", "/v1/designs",
     with_("supply", {"kind": "dual", "v_pos": 1, "v_neg": -0.5}), None, J, 422, "supply"),
    ("unknown_catalog_id", "POST", "/v1/designs", with_("opamp", "gc-imaginary-9g"), None, J,
     422, "opamp"),
    ("opamp_number", "POST", "/v1/designs", with_("opamp", 741), None, J, 422, "opamp"),
    ("inline_opamp_missing_gbw", "POST", "/v1/designs",
     with_("opamp", {k: v for k, v in INLINE_OPAMP.items() if k != "gbw_hz"}), None, J, 422,
     "opamp.gbw_hz"),
    ("dc_on_single_supply", "POST", "/v1/designs", with_("target.f_low_hz", 0), None, J, 422,
     "target.f_low_hz"),
    ("dual_without_v_neg", "POST", "/v1/designs", with_("supply", {"kind": "dual", "v_pos": 2.5}),
     None, J, 422, "supply.v_neg"),
    ("supply_kind_unknown", "POST", "/v1/designs",
     with_("supply", {"kind": "split", "v_pos": 5}), None, J, 422, "supply.kind"),
    ("name_81_chars", "POST", "/v1/designs", with_("name", "x" * 81), None, J, 422, "name"),
    ("invalid_topology", "POST", "/v1/designs", with_("topology", "differential"), None, J, 422,
     "topology"),
    ("bad_resistor_series", "POST", "/v1/designs", with_("components", {"resistor_series": "E7"}),
     None, J, 422, "components.resistor_series"),
    ("capacitor_series_e96", "POST", "/v1/designs",
     with_("components", {"capacitor_series": "E96"}), None, J, 422,
     "components.capacitor_series"),
    ("strict_string", "POST", "/v1/designs", with_("strict", "yes"), None, J, 422, "strict"),
    ("target_is_array", "POST", "/v1/designs", with_("target", [40, 20, 20000]), None, J, 422,
     "target"),
    ("signal_is_array", "POST", "/v1/designs", with_("signal", [0.01]), None, J, 422, "signal"),
    ("negative_load", "POST", "/v1/designs", with_("signal.load_ohm", -1), None, J, 422,
     "signal.load_ohm"),
    ("huge_number_overflows", "POST", "/v1/designs", None,
     json.dumps(BASE).replace('"gain_db": 40', '"gain_db": 1e999').encode(), J, 422,
     "target.gain_db"),
    ("analysis_no_circuit", "POST", "/v1/analyses", {"input_peak_v": 0.01}, None, J, 422,
     "circuit"),
    ("analysis_circuit_missing_stages", "POST", "/v1/analyses", circuit_without("stages"),
     None, J, 422, "circuit.stages"),
    ("analysis_circuit_missing_c_out", "POST", "/v1/analyses", circuit_without("c_out_f"),
     None, J, 422, "circuit.c_out_f"),
    ("analysis_stage_missing_rf", "POST", "/v1/analyses",
     circuit_stage_without("r_feedback_ohm"), None, J, 422, "circuit.stages.0.r_feedback_ohm"),
    ("analysis_single_without_bias", "POST", "/v1/analyses", circuit_with("bias", None), None,
     J, 422, "circuit.bias"),
    ("analysis_bias_buffered_string", "POST", "/v1/analyses",
     circuit_with("bias.buffered", "true"), None, J, 422, "circuit.bias.buffered"),
    ("analysis_negative_capacitor", "POST", "/v1/analyses",
     circuit_with("c_out_f", -1e-6), None, J, 422, "circuit.c_out_f"),
    ("analysis_unknown_circuit_key", "POST", "/v1/analyses",
     circuit_with("ground_plane", True), None, J, 422, "circuit.ground_plane"),
    ("analysis_target_f_low_above_high", "POST", "/v1/analyses",
     lambda c: {"circuit": good_circuit(c),
                "target": {"gain_db": 40, "f_low_hz": 5e4, "f_high_hz": 2e4}},
     None, J, 422, "target.f_low_hz"),
    ("analysis_input_peak_string", "POST", "/v1/analyses",
     lambda c: {"circuit": good_circuit(c), "input_peak_v": "0.01"}, None, J, 422,
     "input_peak_v"),
    ("analysis_circuit_is_array", "POST", "/v1/analyses", {"circuit": []}, None, J, 422,
     "circuit"),
    ("schematic_malformed_json", "POST", "/v1/plots/schematic.svg", None, b'{"target": {', J,
     400, None),
    ("schematic_text_plain", "POST", "/v1/plots/schematic.png", None, json.dumps(BASE).encode(),
     "text/plain", 415, None),
    ("schematic_get", "GET", "/v1/plots/schematic.svg", None, None, None, 405, None),
    ("schematic_unknown_field", "POST", "/v1/plots/schematic.svg", with_("colour", "red"), None,
     J, 422, "colour"),
    ("schematic_circuit_missing_stages", "POST", "/v1/plots/schematic.svg",
     circuit_without("stages"), None, J, 422, "circuit.stages"),
    ("schematic_body_is_array", "POST", "/v1/plots/schematic.png", [BASE], None, J, 422,
     "_schema"),
    ("stocked_only_without_library", "POST", "/v1/designs",
     with_("components", {"stocked_only": True}), None, J, 422, "components.stocked_only"),
    ("stocked_only_string", "POST", "/v1/designs", with_("components", {"stocked_only": "yes"}),
     None, J, 422, "components.stocked_only"),
    ("exploration_unknown_opamp", "POST", "/v1/explorations",
     with_("opamp", ["gc-cmos-rr-10m", "gc-nope"]), None, J, 422, "opamp.1"),
    ("exploration_stage_counts_repeat", "POST", "/v1/explorations", with_("stages", [2, 2]),
     None, J, 422, "stages"),
    ("exploration_strict", "POST", "/v1/explorations", with_("strict", True), None, J, 422,
     "strict"),
    ("get_on_explorations", "GET", "/v1/explorations", None, None, None, 405, None),
    ("post_on_parts", "POST", "/v1/parts", {}, None, J, 405, None),
    # Issue 10: inputs that gave 500 (RecursionError, UnicodeEncodeError in the error path,
    # int() of superscript digits, spreadsheet dates before 1900).
    ("deep_nesting_100000", "POST", "/v1/designs", None, b"[" * 100000 + b"]" * 100000, J,
     400, None),
    ("deep_array_as_field_value", "POST", "/v1/designs", None,
     json.dumps(BASE).replace('"bad-input-probe"', "[" * 5000 + "]" * 5000).encode(), J, 400,
     None),
    ("deep_objects_in_analyses", "POST", "/v1/analyses", None,
     b'{"circuit": ' + b'{"a": ' * 3000 + b"1" + b"}" * 3000 + b"}", J, 400, None),
    ("lone_surrogate_in_name", "POST", "/v1/designs", with_("name", "x\ud800y"), None, J,
     400, None),
    ("lone_surrogate_in_opamp_text", "POST", "/v1/designs",
     with_("opamp", dict(INLINE_OPAMP, description="\udfff", manufacturer="\ud800")), None, J,
     400, None),
    ("lone_surrogate_in_unknown_key", "POST", "/v1/designs", with_("\ud800", 1), None, J, 400,
     None),
    ("lone_surrogate_in_export_name", "POST", "/v1/exports/bom.csv", with_("name", "\udc80"),
     None, J, 400, None),
    ("superscript_digits_width", "POST", "/v1/plots/bode.png?width_px=%C2%B2%C2%B2%C2%B2",
     BASE, None, J, 422, "query.width_px"),
    ("fullwidth_digits_height", "POST", "/v1/plots/bode.svg?height_px=%EF%BC%95%EF%BC%90%EF%BC%90",
     BASE, None, J, 422, "query.height_px"),
    ("plot_unknown_query_parameter", "POST", "/v1/plots/bode.svg?dpi=300", BASE, None, J, 422,
     "query.dpi"),
    ("xlsx_date_before_1900", "POST", "/v1/exports/bom.xlsx?date=0493-03-31", BASE, None, J,
     422, "query.date"),
    ("csv_date_1899", "POST", "/v1/exports/bom.csv?date=1899-12-31", BASE, None, J, 422,
     "query.date"),
    ("charset_utf16", "POST", "/v1/designs", None, json.dumps(BASE).encode("utf-16"),
     "application/json; charset=utf-16", 415, None),
    ("charset_latin1_ascii_body", "POST", "/v1/designs", None, json.dumps(BASE).encode(),
     "application/json; charset=iso-8859-1", 415, None),
    ("duplicate_top_key", "POST", "/v1/designs", None,
     json.dumps(BASE)[:-1].encode() + b', "name": "second"}', J, 400, None),
    ("duplicate_nested_key", "POST", "/v1/designs", None,
     json.dumps(BASE).replace('"v_pos": 5', '"v_pos": 5, "v_pos": 12').encode(), J, 400,
     None),
    ("swing_window_inverted_on_any_supply", "POST", "/v1/designs",
     with_("opamp", dict(INLINE_OPAMP, swing_to_pos_v=7, swing_to_neg_v=5)), None, J, 422,
     "opamp.swing_to_pos_v"),
    ("swing_window_inverted_on_this_supply", "POST", "/v1/designs",
     with_("opamp", dict(INLINE_OPAMP, swing_to_pos_v=2.5, swing_to_neg_v=2.5)), None, J, 422,
     "opamp.swing_to_pos_v"),
    ("analysis_swing_window_inverted", "POST", "/v1/analyses",
     circuit_with("opamp.swing_to_neg_v", 5.0), None, J, 422, "circuit.opamp.swing_to_pos_v"),
]


def _has_path(errors, path):
    node = errors
    for part in path.split("."):
        if not isinstance(node, dict):
            return False
        if part in node:
            node = node[part]
        elif part.isdigit() and int(part) in node:
            node = node[int(part)]
        else:
            return False
    return True


def test_table_is_large_enough():
    assert len(CASES) >= 30
    assert len({c[0] for c in CASES}) == len(CASES)


@pytest.mark.parametrize("case", CASES, ids=[c[0] for c in CASES])
def test_bad_input_is_problem_json(client, strict_json, case):
    _, method, path, body, raw, ctype, status, field = case
    if callable(body):
        body = body(client)
    kwargs = {}
    if raw is not None:
        kwargs["data"] = raw
        if ctype:
            kwargs["content_type"] = ctype
    elif body is not None:
        kwargs["data"] = json.dumps(body)
        kwargs["content_type"] = ctype
    resp = client.open(path, method=method, **kwargs)
    assert resp.status_code == status, resp.data[:600]
    assert resp.mimetype == "application/problem+json"
    problem = strict_json(resp.data)
    assert isinstance(problem["type"], str) and problem["type"]
    assert isinstance(problem["title"], str) and problem["title"]
    assert problem["status"] == status
    assert isinstance(problem["detail"], str) and problem["detail"]
    assert "Traceback" not in resp.get_data(as_text=True)
    if status == 405:
        allow = {m.strip() for m in resp.headers["Allow"].split(",")}
        assert method not in allow and allow
    if status == 422:
        assert _has_path(problem["errors"], field), problem["errors"]
