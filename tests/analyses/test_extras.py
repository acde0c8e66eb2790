"""extra_blocks: which blocks appear, and strict JSON of the result."""

from __future__ import annotations

import json

from analyses.circuits import ALL, as_built_of
from service.engine.judge.extras import extra_blocks
from service.jsonout import dumps


def test_always_noise_and_supply_rejection_options_add_blocks():
    circuit = ALL["noninv_single_shared"]()
    ab = as_built_of(circuit)
    plain = extra_blocks(circuit, target=None, input_peak_v=0.01, as_built=ab, options={})
    assert set(plain) == {"noise", "supply_rejection"}
    full = extra_blocks(circuit, target=None, input_peak_v=0.01, as_built=ab, options={
        "temperature_k": 320.0, "supply_rejection_hz": 300.0,
        "tolerance": {"trials": 100, "seed": 2, "resistor_tolerance_pct": 1.0,
                      "capacitor_tolerance_pct": 5.0, "gbw_tolerance_pct": 0.0},
        "response": {"points": 7, "f_start_hz": None, "f_stop_hz": None}})
    assert set(full) == {"noise", "supply_rejection", "tolerance", "response"}
    assert full["noise"]["temperature_k"] == 320.0
    assert full["supply_rejection"]["frequency_hz"][-1] == 300.0
    assert full["tolerance"]["yield"] is None  # no target
    assert len(full["response"]["frequency_hz"]) == 7


def test_dual_supply_and_dc_coupling_dump_as_strict_json():
    circuit = ALL["noninv_dual_dc"]()
    ab = as_built_of(circuit)
    blocks = extra_blocks(circuit, target=None, input_peak_v=None, as_built=ab, options={
        "tolerance": {"trials": 20, "seed": 1, "resistor_tolerance_pct": 1.0,
                      "capacitor_tolerance_pct": 10.0}})
    assert blocks["supply_rejection"] is None
    text = dumps(blocks)

    def refuse(name):
        raise ValueError(name)

    parsed = json.loads(text, parse_constant=refuse)  # no NaN/Infinity literals
    assert parsed["tolerance"]["f_low_hz"]["nominal"] is None
    assert parsed["noise"]["band_hz"][0] is None
