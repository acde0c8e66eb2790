"""The textbook cascade formulas of ``service.engine.synthesis.ideal`` against numerical references.

References: scipy.signal.freqs (frequency response of an s-domain transfer function) and
scipy.optimize.brentq (root bracketing) find the -3 dB points of n identical single-pole
stages built as polynomials; the closed forms must agree. Figures marked "common practice"
are facts of the trade quoted without a source.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import optimize, signal

from service.engine.model.circuit import INVERTING, NON_INVERTING
from service.engine.synthesis import ideal

HALF_POWER_DB = 20.0 * math.log10(1.0 / math.sqrt(2.0))


def _cascade(b, a, n):
    """n copies of the section b/a multiplied (numpy polynomial products)."""
    num, den = np.array([1.0]), np.array([1.0])
    for _ in range(n):
        num, den = np.polymul(num, b), np.polymul(den, a)
    return num, den


def _mag_db(num, den, f_hz):
    # scipy.signal.freqs: H(jw) of the analog filter num/den at w = 2 pi f.
    _, h = signal.freqs(num, den, worN=[2.0 * math.pi * f_hz])
    return 20.0 * math.log10(abs(h[0]))


def _minus3db(num, den, f_ref_hz, lo_hz, hi_hz):
    """The frequency in [lo, hi] where |H| is 3.0103 dB below |H(f_ref)| (scipy brentq)."""
    ref = _mag_db(num, den, f_ref_hz)
    root = optimize.brentq(lambda lf: _mag_db(num, den, 10.0 ** lf) - ref - HALF_POWER_DB,
                           math.log10(lo_hz), math.log10(hi_hz), xtol=1e-15, rtol=1e-13)
    return 10.0 ** root


@pytest.mark.parametrize("n", range(1, 9))
@pytest.mark.parametrize("topology", [NON_INVERTING, INVERTING])
def test_cascade_high_corner_matches_scipy(n, topology):
    gain, gbw = 1000.0, 10e6
    ic = ideal.ideal_cascade(gain, 20.0, gbw, n, topology)
    wp = 2.0 * math.pi * ic.stage_f_high_hz
    # n identical low-pass sections 1/(1 + s/wp), built and solved in scipy.signal.
    num, den = _cascade([1.0], [1.0 / wp, 1.0], n)
    f3 = _minus3db(num, den, ic.stage_f_high_hz * 1e-6, ic.stage_f_high_hz * 1e-3,
                   ic.stage_f_high_hz * 10.0)
    assert f3 == pytest.approx(ic.f_high_hz, rel=1e-9)
    assert ic.f_high_hz == pytest.approx(ic.stage_f_high_hz * math.sqrt(2 ** (1 / n) - 1),
                                         rel=1e-12)


@pytest.mark.parametrize("n", range(1, 9))
def test_cascade_low_corner_matches_scipy(n):
    f_low = 2000.0
    ic = ideal.ideal_cascade(100.0, f_low, 10e6, n, NON_INVERTING)
    wl = 2.0 * math.pi * ic.stage_f_low_hz
    # n identical first-order high-pass sections s/(s + wl), in scipy.signal.
    num, den = _cascade([1.0, 0.0], [1.0, wl], n)
    f3 = _minus3db(num, den, ic.stage_f_low_hz * 1e6, ic.stage_f_low_hz / 10.0,
                   ic.stage_f_low_hz * 1e3)
    assert f3 == pytest.approx(f_low, rel=1e-9)
    assert ic.stage_f_low_hz == pytest.approx(f_low * math.sqrt(2 ** (1 / n) - 1), rel=1e-12)


@pytest.mark.parametrize("topology", [NON_INVERTING, INVERTING])
@pytest.mark.parametrize("stage_gain", [2.0, 10.0, 31.6])
def test_stage_corner_is_gbw_over_noise_gain(topology, stage_gain):
    """A closed-loop stage built from the single-pole op-amp A(s) = A0 wt/(s A0 + wt) in
    scipy.signal has its -3 dB corner at GBW / noise gain (common practice: noise gain g
    non-inverting, 1 + g inverting), to within the finite-A0 correction."""
    gbw, a0 = 10e6, 10 ** (140 / 20)
    wt = 2.0 * math.pi * gbw
    na, da = np.array([a0 * wt]), np.array([a0, wt])
    if topology == NON_INVERTING:
        beta = 1.0 / stage_gain
        num, den = na, np.polyadd(da, beta * na)  # A / (1 + A beta)
    else:
        r_in, r_f = 1.0, stage_gain
        # -A Rf / (Rf + Rin + A Rin)
        num = -na * r_f
        den = np.polyadd(da * (r_f + r_in), na * r_in)
    ic = ideal.ideal_cascade(stage_gain, 1.0, gbw, 1, topology)
    f3 = _minus3db(num, den, 1.0, 10.0, 1e9)
    assert f3 == pytest.approx(ic.stage_f_high_hz, rel=1e-5)
    assert abs(_mag_db(num, den, 1.0) - 20 * math.log10(stage_gain)) < 1e-4


def _numeric_cascade_f3(gain, n):
    """-3 dB of n non-inverting stages of gain G**(1/n) (normalised GBW = 1 Hz), scipy."""
    g = gain ** (1.0 / n)
    wp = 2.0 * math.pi / g
    num, den = _cascade([1.0], [1.0 / wp, 1.0], n)
    return _minus3db(num, den, 1e-9, 1e-6 / g, 10.0 / g)


@pytest.mark.parametrize("gain", [10.0, 100.0, 1000.0])
def test_optimal_stage_count_brute_force(gain):
    """The real n maximising the ideal bandwidth brackets the best integer n found by brute
    force over scipy-solved cascades, and no integer n beats it."""
    n_opt = ideal.optimal_stage_count(gain, NON_INVERTING)
    f3 = {n: _numeric_cascade_f3(gain, n) for n in range(1, 25)}
    best_n = max(f3, key=f3.get)
    assert math.floor(n_opt) <= best_n <= math.ceil(n_opt)
    # Independent brute force over real n on a fine grid of the closed form.
    grid = np.arange(1.0, 60.0, 1e-4)
    bw = np.sqrt(2.0 ** (1.0 / grid) - 1.0) / gain ** (1.0 / grid)
    assert n_opt == pytest.approx(grid[np.argmax(bw)], abs=2e-4)


@pytest.mark.parametrize("gain", [1e4, 1e6, 1e8])
def test_optimal_stage_count_near_two_ln_g(gain):
    # Common practice: the best number of identical stages is about 2 ln G for large G.
    n_opt = ideal.optimal_stage_count(gain, NON_INVERTING)
    assert abs(n_opt / (2.0 * math.log(gain)) - 1.0) < 0.10


def test_textbook_gain_split():
    # Common practice: a gain of 1000 over 3 identical stages is 10 (20 dB) per stage.
    ic = ideal.ideal_cascade(1000.0, 20.0, 10e6, 3, NON_INVERTING)
    assert ic.stage_gain == pytest.approx(10.0, rel=1e-12)
    assert 20 * math.log10(ic.stage_gain) == pytest.approx(20.0, abs=1e-9)


@pytest.mark.parametrize("n, factor", [(2, 0.644), (3, 0.510), (4, 0.435)])
def test_textbook_shrinkage(n, factor):
    # Common practice: bandwidth-shrinkage factor sqrt(2**(1/n) - 1) of n identical poles.
    assert round(ideal.shrinkage(n), 3) == factor


def test_ideal_block_identities():
    ic = ideal.ideal_cascade(1e4, 50.0, 8e6, 4, INVERTING)
    assert ic.bandwidth_hz == pytest.approx(ic.f_high_hz - 50.0)
    assert ic.bandwidth_fraction == pytest.approx(
        (ic.f_high_hz - 50.0) / (ic.stage_f_high_hz - ic.stage_f_low_hz))
    assert ic.single_stage_f_high_hz == pytest.approx(8e6 / (1e4 + 1))


@pytest.mark.parametrize("topology", [NON_INVERTING, INVERTING])
def test_required_gbw_reaches_target_exactly(topology):
    gain, f_high = 1e5, 3e6
    gbw, n = ideal.required_gbw_hz(gain, f_high, topology)
    assert ideal.ideal_cascade(gain, 1.0, gbw, n, topology).f_high_hz == pytest.approx(f_high)
    for m in range(1, ideal.MAX_STAGES + 1):  # no other n does with less
        assert ideal.ideal_cascade(gain, 1.0, gbw, m, topology).f_high_hz <= f_high * (1 + 1e-12)


def test_no_band_gives_no_fraction():
    """One stage whose high corner equals the low target (1 MHz / 10**4 = 100 Hz): no band,
    so no bandwidth fraction (this once raised ZeroDivisionError, a 500 in the API)."""
    ic = ideal.ideal_cascade(1e4, 100.0, 1e6, 1, NON_INVERTING)
    assert ic.stage_f_high_hz == pytest.approx(ic.stage_f_low_hz)
    assert math.isnan(ic.bandwidth_fraction)
