"""Design requests (invented scenarios) covering both topologies, both supply kinds and
1 to 6 stages, with the built-in generic op-amp archetypes."""

README_SCENARIO = {  # the README's example: 5 V ultrasonic receive chain, 60 dB 2k-200k
    "name": "ultrasonic rx 40kHz",
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 50, "load_ohm": 10000},
    "opamp": "gc-cmos-rr-10m",
}

DESIGNS = {
    "readme_single_ni_auto": README_SCENARIO,
    "dual_inv_2": {
        "name": "line stage", "target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 100000},
        "supply": {"kind": "dual", "v_pos": 15, "v_neg": -15}, "opamp": "gc-jfet-4m",
        "topology": "inverting", "stages": 2},
    "single_inv_3": {
        "name": "sensor 12V", "target": {"gain_db": 40, "f_low_hz": 100, "f_high_hz": 50000},
        "supply": {"kind": "single", "v_pos": 12}, "opamp": "gc-bjt-lownoise-8m",
        "topology": "inverting", "stages": 3},
    "dual_ni_dc_4": {
        "name": "dc block-free", "target": {"gain_db": 60, "f_low_hz": 0, "f_high_hz": 200000},
        "supply": {"kind": "dual", "v_pos": 5, "v_neg": -5}, "opamp": "gc-fast-50m-g5",
        "stages": 4},
    "single_ni_1": {
        "name": "micro 1 stage", "target": {"gain_db": 20, "f_low_hz": 100, "f_high_hz": 20000},
        "supply": {"kind": "single", "v_pos": 3.3}, "opamp": "gc-micro-1m", "stages": 1},
    "dual_ni_6": {
        "name": "six stages", "target": {"gain_db": 90, "f_low_hz": 1000, "f_high_hz": 1e6},
        "supply": {"kind": "dual", "v_pos": 6, "v_neg": -6}, "opamp": "gc-fast-50m-g5",
        "stages": 6},
    "single_ni_band_limited": {
        "name": "audio band limited", "target": {"gain_db": 40, "f_low_hz": 20,
                                                 "f_high_hz": 20000, "f_high_max_hz": 40000},
        "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m"},
    "dual_inv_band_limited": {
        "name": "inverting band limited", "target": {"gain_db": 46, "f_low_hz": 20,
                                                     "f_high_hz": 15000, "f_high_max_hz": 30000},
        "supply": {"kind": "dual", "v_pos": 12, "v_neg": -12}, "opamp": "gc-bjt-lownoise-8m",
        "topology": "inverting"},
    "dual_inv_5": {
        "name": "five inverting", "target": {"gain_db": 80, "f_low_hz": 50, "f_high_hz": 200000},
        "supply": {"kind": "dual", "v_pos": 12, "v_neg": -12}, "opamp": "gc-bjt-lownoise-8m",
        "topology": "inverting", "stages": 5},
}
