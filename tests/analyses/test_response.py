"""Response curves: grid, unwrapped phase, stage curves, and scipy.signal.freqs as reference."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from analyses.circuits import ALL, inv_dual, noninv_dual
from service.engine.judge import response
from service.engine.solver import chain


def test_grid_is_log_spaced_with_both_ends():
    f = response.log_frequencies(20.0, 2e5, 5)
    assert f[0] == 20.0 and f[-1] == 2e5
    np.testing.assert_allclose(np.diff(np.log10(f)), 1.0)


def test_default_span_is_a_decade_beyond_the_corners():
    circuit = ALL["noninv_dual"]()
    block = response.response_block(circuit, as_built={"f_low_hz": 10.0, "f_high_hz": 1e5},
                                    points=11)
    assert block["frequency_hz"][0] == pytest.approx(1.0)
    assert block["frequency_hz"][-1] == pytest.approx(1e6)
    assert len(block["gain_db"]) == len(block["phase_deg"]) == 11
    dc = response.response_block(ALL["noninv_dual_dc"](),
                                 as_built={"f_low_hz": None, "f_high_hz": 1e5}, points=3)
    assert dc["frequency_hz"][0] == pytest.approx(1e5 / 1e5)


def test_one_stage_matches_scipy_freqs():
    # Reference: scipy.signal.freqs of the stage's transfer function written out by hand
    # (dual supply, REF = GND): coupling s Cc Rb / (1 + s Cc (Rb + Rs)), gain
    # A (Rf + Zg) / (Rf + Zg + A Zg) with Zg = Rg + 1/(s Cg) and A = A0 / (1 + s tau),
    # output s Co RL / (1 + s Co RL). Polynomials multiplied with numpy.polymul.
    circuit = noninv_dual(n=1)
    st, amp = circuit.stages[0], circuit.opamp
    rb, cc, rf, rg, cg = st.r_bias_ohm, st.c_couple_f, st.r_feedback_ohm, st.r_gain_ohm, st.c_gain_f
    rs, co, rl = circuit.source_impedance_ohm, circuit.c_out_f, circuit.load_ohm
    a0, tau = amp.a0, amp.a0 / (2 * math.pi * amp.gbw_hz)
    # gain stage: A0 (1 + s Cg (Rf+Rg)) / ((1+sτ)(1 + s Cg (Rf+Rg)) + A0 (1 + s Rg Cg))
    num_g = [a0 * cg * (rf + rg), a0]
    den_g = np.polyadd(np.polymul([tau, 1], [cg * (rf + rg), 1]), [a0 * rg * cg, a0])
    num = np.polymul(np.polymul([cc * rb, 0], num_g), [co * rl, 0])
    den = np.polymul(np.polymul([cc * (rb + rs), 1], den_g), [co * rl, 1])
    block = response.response_block(circuit, as_built={"f_low_hz": 30.0, "f_high_hz": 4e5},
                                    points=300, f_start_hz=0.1, f_stop_hz=1e8)
    f = np.array(block["frequency_hz"])
    _, h = signal.freqs(num, den, worN=2 * np.pi * f)
    np.testing.assert_allclose(block["gain_db"], 20 * np.log10(np.abs(h)), atol=1e-9)
    # Phase: numpy.unwrap of the reference, anchored where the gain peaks at numpy.angle's
    # own value there (which lies in (-180, 180]).
    ref = np.degrees(np.unwrap(np.angle(h)))
    peak = int(np.argmax(np.abs(h)))
    ref += np.degrees(np.angle(h[peak])) - ref[peak]
    np.testing.assert_allclose(block["phase_deg"], ref, atol=1e-7)


@pytest.mark.parametrize("make, n, midband_deg", [(noninv_dual, 4, 0.0), (inv_dual, 3, 180.0),
                                                  (inv_dual, 2, 0.0)])
def test_midband_phase_is_wrapped_at_the_gain_peak(make, n, midband_deg):
    # Issue 10: a cascade reported -360 / -719 degrees in its passband. At the gain peak
    # the phase is in (-180, 180]: about 0 for a non-inverting chain or an even number of
    # inverting stages, 180 for an odd number (an inverting stage is -Rf/Rin: common
    # practice); every stage curve is anchored the same way.
    circuit = make(n=n)
    block = response.response_block(circuit, as_built={"f_low_hz": 5.0, "f_high_hz": 2e5},
                                    points=400, f_start_hz=0.01, f_stop_hz=1e9)
    for curve in [block] + block["stages"]:
        gain = np.array(curve["gain_db"])
        phase = np.array(curve["phase_deg"])
        peak_phase = phase[int(np.argmax(gain))]
        assert -180.0 < peak_phase <= 180.0
        assert np.max(np.abs(np.diff(phase))) < 90  # still continuous
    peak_phase = np.array(block["phase_deg"])[int(np.argmax(block["gain_db"]))]
    assert abs((peak_phase - midband_deg + 180) % 360 - 180) < 10


def test_phase_is_unwrapped_and_stages_are_cumulative():
    circuit = inv_dual(n=3)
    block = response.response_block(circuit, as_built={"f_low_hz": 5.0, "f_high_hz": 2e5},
                                    points=400)
    phase = np.array(block["phase_deg"])
    assert np.max(np.abs(np.diff(phase))) < 90  # no 360-degree jumps
    sol = chain.solve(circuit, np.array(block["frequency_hz"]))
    assert [s["stage"] for s in block["stages"]] == [1, 2, 3]
    for k, st in enumerate(block["stages"]):
        np.testing.assert_allclose(st["gain_db"], 20 * np.log10(np.abs(sol.stage_out[k])))
    np.testing.assert_allclose(block["stages"][-1]["gain_db"], block["gain_db"])
    # Unwrapped, yet the same angle modulo 360 degrees as the complex response.
    wrapped = np.degrees(np.angle(sol.vout))
    np.testing.assert_allclose(np.mod(phase - wrapped + 180, 360) - 180, 0, atol=1e-9)
    # Over a band this wide the three coupling sections and three poles turn the phase by
    # several hundred degrees, which a wrapped phase could not show.
    assert phase[0] - phase[-1] > 360
