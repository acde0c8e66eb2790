"""The README's worked example, in one place.

A scenario of our own: a 5 V single-supply receive chain for a 40 kHz ultrasonic ranging
transducer (about 1 mV peak from 200 ohm), 60 dB from 2 kHz to 200 kHz. ``make serve``
prints it as a curl command, the OpenAPI document offers it as the request example, and
tests/api/test_readme_example.py checks that README.md shows exactly this body.
"""

README_EXAMPLE = {
    "name": "ultrasonic-rx-40k",
    "target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000},
    "supply": {"kind": "single", "v_pos": 5},
    "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
    "opamp": "gc-cmos-rr-10m",
}
