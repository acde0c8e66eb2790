"""Noise: Johnson-Nyquist 4kTR, the op-amp voltage-noise closed form, and ngspice .noise."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.constants

from analyses import spice_deck
from analyses.circuits import ALL, as_built_of, inv_single, noninv_dual, noninv_single, opamp
from service.engine.judge import noise
from service.engine.solver import chain


def test_boltzmann_constant_is_scipy_codata():
    # Reference: scipy.constants.k (CODATA; exact since the 2019 SI redefinition).
    assert noise.BOLTZMANN_J_PER_K == scipy.constants.k


@pytest.mark.parametrize("name", sorted(ALL))
def test_source_resistor_noise_is_4ktr_times_signal_gain(name):
    # Johnson-Nyquist (handbook formula): the source impedance's noise is a voltage
    # sqrt(4 k T Rs) in series with Vs, so it reaches the output with the signal gain.
    # Reference constant: scipy.constants.k.
    circuit = ALL[name]()
    f = np.logspace(0, 7, 29)
    t_k = 290.0
    spec = noise.output_noise(circuit, f, temperature_k=t_k)
    h = chain.solve(circuit, f).vout
    expected = 4 * scipy.constants.k * t_k * circuit.source_impedance_ohm * np.abs(h) ** 2
    np.testing.assert_allclose(spec.by_source["R_source"], expected, rtol=1e-8)


def test_opamp_voltage_noise_is_en_times_noise_gain():
    # Closed form (common practice): e_n in series with the + input reaches the output as
    # e_n * |A/(1 + A beta)|, beta = Zg/(Rf + Zg), then through the output coupling
    # |s Co RL / (1 + s Co RL)|. One dual-supply non-inverting stage.
    en = 7e-9
    circuit = noninv_dual(n=1, amp=opamp(en_v_per_rthz=en))
    st = circuit.stages[0]
    f = np.logspace(-1, 8, 37)
    s = 2j * np.pi * f
    a = circuit.opamp.a0 / (1 + s * circuit.opamp.a0 / (2 * np.pi * circuit.opamp.gbw_hz))
    zg = st.r_gain_ohm + 1 / (s * st.c_gain_f)
    beta = zg / (st.r_feedback_ohm + zg)
    t_out = s * circuit.c_out_f * circuit.load_ohm
    expected = en * np.abs(a / (1 + a * beta)) * np.abs(t_out / (1 + t_out))
    spec = noise.output_noise(circuit, f)
    np.testing.assert_allclose(np.sqrt(spec.by_source["U1.en"]), expected, rtol=1e-9)
    # Midband the noise gain is 1 + Rf/Rg (textbook non-inverting noise gain).
    mid = np.argmin(np.abs(f - 1e4))
    assert np.sqrt(spec.by_source["U1.en"][mid]) == pytest.approx(
        en * (1 + st.r_feedback_ohm / st.r_gain_ohm), rel=2e-3)


def test_current_noise_into_inverting_input_sees_feedback_resistor():
    # Closed form (common practice): i_n into the - input of an inverting stage leaves
    # through Rf: output i_n * Rf at midband (large loop gain). One stage, dual supply.
    i_n = 2e-12
    circuit = noninv_dual(n=1, amp=opamp(in_a_per_rthz=i_n))
    spec = noise.output_noise(circuit, [1e4])
    st = circuit.stages[0]
    assert math.sqrt(spec.by_source["U1.in-"][0]) == pytest.approx(i_n * st.r_feedback_ohm,
                                                                  rel=2e-3)


def test_integration_of_a_white_spectrum_is_exact():
    # Simpson's rule in ln f of S*f for S = const integrates to S (f2 - f1) within the rule's
    # error on exp(x): about 5e-6 with the band edges inserted off the regular 20-per-decade
    # grid (analytic integral).
    f = noise.integration_grid((37.0, 12345.0))
    got = noise.integrate_psd(f, np.full(f.size, 2.0), 37.0, 12345.0)
    assert got == pytest.approx(2.0 * (12345.0 - 37.0), rel=2e-5)


@pytest.mark.parametrize("name", ["noninv_single_shared", "noninv_single_buffered",
                                  "inv_single_shared_no_cout", "noninv_dual_dc", "inv_dual"])
def test_integrated_noise_matches_ngspice(name):
    # Reference: ngspice `.noise` on a SPICE deck of the same circuit (test-local writer,
    # tests/analyses/spice_deck.py); its op-amp macro model is noiseless, so with op-amp
    # noise zero both count the circuit's resistors only. Issue 4 asks for 2 %.
    spice_deck.require_ngspice()
    circuit = ALL[name]()
    f1, f2 = 1.0, 1e7
    out = spice_deck.run(spice_deck.noise_deck(circuit, f1, f2))
    ngspice_rms = spice_deck.parse_onoise_total(out)
    ours = noise.rms_over(circuit, f1, f2, temperature_k=300.0)  # deck: .temp 26.85 C
    assert ours == pytest.approx(ngspice_rms, rel=0.02)


def test_block_fields_and_shares():
    circuit = noninv_single(buffered=True, amp=opamp(en_v_per_rthz=8e-9, in_a_per_rthz=1e-13))
    ab = as_built_of(circuit)
    block = noise.noise_block(circuit, as_built=ab, input_peak_v=0.001, temperature_k=300.0)
    assert block["band_hz"] == [ab["f_low_hz"], ab["f_high_hz"]]
    dens = block["output_density"]
    assert len(dens["frequency_hz"]) == len(dens["v_per_rthz"]) == 131  # 10/decade, 13 dec
    assert dens["frequency_hz"][0] == pytest.approx(1e-3)
    assert dens["frequency_hz"][-1] == pytest.approx(1e10)
    assert 0 < block["output_rms_v"]["band"] < block["output_rms_v"]["full"]
    total_share = sum(s["share"] for s in block["stages"]) + sum(
        o["share"] for o in block["other"].values())
    assert total_share == pytest.approx(1.0, rel=1e-9)
    # The first stage sets the noise floor (common practice for a cascade of equal stages).
    assert block["stages"][0]["share"] > 0.5
    assert block["input_rms_v"] == pytest.approx(block["output_rms_v"]["band"] / ab["gain"])
    signal_rms = 0.001 * ab["gain"] / math.sqrt(2)
    assert block["snr_db"] == pytest.approx(
        20 * math.log10(signal_rms / block["output_rms_v"]["band"]))


def test_block_dc_coupled_band_starts_at_the_range_bottom():
    circuit = noninv_dual(dc=True)
    ab = as_built_of(circuit)
    assert ab["f_low_hz"] is None
    block = noise.noise_block(circuit, as_built=ab, input_peak_v=None)
    assert block["band_hz"][0] is None
    assert block["snr_db"] is None
    assert block["output_rms_v"]["band"] > 0


def test_temperature_scales_thermal_noise():
    # 4kTR: noise power proportional to T (handbook formula).
    circuit = inv_single(buffered=True)
    ab = as_built_of(circuit)
    cold = noise.noise_block(circuit, as_built=ab, input_peak_v=None, temperature_k=150.0)
    warm = noise.noise_block(circuit, as_built=ab, input_peak_v=None, temperature_k=300.0)
    assert (warm["output_rms_v"]["band"] / cold["output_rms_v"]["band"]) ** 2 == \
        pytest.approx(2.0, rel=1e-12)


def test_zero_source_impedance_is_an_ideal_source():
    # An ideal source (Rs = 0) has no thermal noise and joins X1 to Vs; the MNA must not
    # stamp 1/0. Reference: the chain solver, which takes Rs = 0 in its closed forms.
    from dataclasses import replace

    circuit = replace(noninv_single(buffered=False), source_impedance_ohm=0.0)
    f = np.logspace(0, 6, 13)
    from service.engine.solver import mna

    np.testing.assert_allclose(mna.signal_gain(circuit, f), chain.solve(circuit, f).vout,
                               rtol=1e-9)
    spec = noise.output_noise(circuit, f)
    assert "R_source" not in spec.by_source
    block = noise.noise_block(circuit, as_built=as_built_of(circuit), input_peak_v=0.001)
    assert block["other"]["source"]["share"] == 0.0
