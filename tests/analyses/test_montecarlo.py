"""Tolerance Monte Carlo: model agreement, closed-form distribution, p50, yield, worst case,
determinism."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from analyses.circuits import ALL, as_built_of, noninv_single, one_stage_coupling
from service.engine.judge import montecarlo as mc
from service.engine.model.circuit import Target
from service.engine.solver import chain


@pytest.mark.parametrize("name", sorted(ALL))
def test_nominal_figures_agree_with_full_nodal_within_0_01_percent(name):
    # Issue 4: a faster per-trial model must agree with the full nodal solution within 0.01 %
    # at nominal values. Reference: the as-built figures (chain nodal solve over 1 mHz..10 GHz).
    circuit = ALL[name]()
    ab = as_built_of(circuit)
    grid = mc.analysis_grid(ab["f_low_hz"] or math.nan, ab["f_high_hz"])
    gain_db, f_low, f_high = mc.nominal_figures(circuit, grid)
    assert 10 ** (gain_db / 20) == pytest.approx(ab["gain"], rel=1e-4)
    assert f_high == pytest.approx(ab["f_high_hz"], rel=1e-4)
    if ab["f_low_hz"] is None:
        assert math.isnan(f_low)
    else:
        assert f_low == pytest.approx(ab["f_low_hz"], rel=1e-4)


@pytest.mark.parametrize("name", sorted(k for k, m in ALL.items() if mc.stiff_reference(m())))
def test_stage_product_equals_chain_nodal_per_trial(name):
    # The fast model against the exact nodal chain, trial by trial (random parts, +-20 %).
    circuit = ALL[name]()
    params = chain.params_from_circuit(circuit)
    tol = mc.Tolerances(20.0, 20.0, 20.0)
    parts = mc.varied_parts(params, tol)
    values = mc.draw(parts, 64, tol, np.random.default_rng(7))
    p = mc.with_values(params, parts, values)
    f = np.logspace(-2, 9, 111)[None, :]
    ref = np.abs(chain.solve_params(p, f).vout)
    np.testing.assert_allclose(mc.stage_product_mag(p, f), ref, rtol=1e-9)


@pytest.mark.parametrize("name", sorted(k for k, m in ALL.items() if not mc.stiff_reference(m())))
@pytest.mark.parametrize("stages", [1, 4, 12])
def test_fraction_free_equals_chain_nodal_per_trial(name, stages):
    # The shared-REF fast model against the exact nodal chain, trial by trial (+-20 % parts),
    # wherever |H| is within 60 dB of its maximum (further down both lose digits to
    # cancellation, the chain's closed forms included).
    from dataclasses import replace

    base = ALL[name]()
    circuit = replace(base, stages=(base.stages * 12)[:stages])
    params = chain.params_from_circuit(circuit)
    tol = mc.Tolerances(20.0, 20.0, 20.0)
    parts = mc.varied_parts(params, tol)
    p = mc.with_values(params, parts, mc.draw(parts, 32, tol, np.random.default_rng(5)))
    f = np.logspace(-2, 9, 111)[None, :]
    ref = np.abs(chain.solve_params(p, f).vout)
    got = mc.shared_ref_mag(p, f)
    big = ref > 1e-3 * ref.max(axis=1, keepdims=True)
    # 12 stages of gain ~10 carry 1e12 of dynamic range through either recursion, and each
    # loses a few digits to rounding there (we see ~3e-8; with feedback capacitors ~4e-6,
    # and the general MNA solve differs from both by ~4e-7); far inside the 1e-4 budget.
    rtol = 1e-9 if stages < 12 else (1e-5 if name.endswith("_cf") else 1e-6)
    np.testing.assert_allclose(got[big], ref[big], rtol=rtol)


def test_model_choice():
    assert mc.model_for(ALL["noninv_single_buffered"]()) == mc.STAGE_PRODUCT
    assert mc.model_for(ALL["inv_dual"]()) == mc.STAGE_PRODUCT
    assert mc.model_for(ALL["noninv_single_shared"]()) == mc.SHARED_REF


def one_stage_block(trials=20000, seed=3, target=None):
    circuit = one_stage_coupling()
    ab = as_built_of(circuit)
    block = mc.tolerance_block(circuit, target=target, as_built=ab, trials=trials, seed=seed,
                               resistor_tolerance_pct=0.0, capacitor_tolerance_pct=10.0)
    return circuit, ab, block


def test_one_stage_coupling_cap_matches_closed_form_distribution():
    # Closed form (handbook RC high-pass): f_low = 1/(2 pi R C), R = r_bias + Rs, with only C
    # varying, C = C0 (1 + 0.1 u), u ~ U(-1, 1). Then P(f_low <= f) = P(C >= 1/(2 pi R f))
    # = (C0 (1 + t) - 1/(2 pi R f)) / (2 t C0), and the q-quantile of f_low is
    # 1/(2 pi R C0 (1 + t (1 - 2 q))).
    circuit, _, block = one_stage_block()
    st = circuit.stages[0]
    r = st.r_bias_ohm + circuit.source_impedance_ohm
    c0, t = st.c_couple_f, 0.10
    assert block["model"]["varied_parts"] == 1  # only the coupling capacitor

    def quantile(q):
        return 1 / (2 * math.pi * r * c0 * (1 + t * (1 - 2 * q)))

    stats_f = block["f_low_hz"]
    for key, q in (("p1", 0.01), ("p5", 0.05), ("p50", 0.5), ("p95", 0.95), ("p99", 0.99)):
        # Sampling error of a quantile with n = 20000 is below 0.1 % of f here.
        assert stats_f[key] == pytest.approx(quantile(q), rel=2e-3), key
    assert stats_f["min"] >= quantile(0.0) * (1 - 1e-6)
    assert stats_f["max"] <= quantile(1.0) * (1 + 1e-6)

    # Kolmogorov-Smirnov test of the per-trial values against the analytic CDF (scipy.stats).
    result = mc.run(circuit, trials=5000, tol=mc.Tolerances(0.0, 10.0),
                    rng=np.random.default_rng(11),
                    grid_hz=mc.analysis_grid(1 / (2 * math.pi * r * c0), 1e9))

    def cdf(f):
        return np.clip((c0 * (1 + t) - 1 / (2 * math.pi * r * f)) / (2 * t * c0), 0, 1)

    assert stats.kstest(result.f_low_hz, cdf).pvalue > 0.01


def test_one_stage_worst_case_and_yield_closed_form():
    # Worst case of f_low = 1/(2 pi R C): C at +10 % gives the lowest, -10 % the highest.
    # Yield against a target f_low equal to the nominal corner: P(C >= C0) = 1/2.
    circuit = one_stage_coupling()
    st = circuit.stages[0]
    r = st.r_bias_ohm + circuit.source_impedance_ohm
    f0 = 1 / (2 * math.pi * r * st.c_couple_f)
    ab = as_built_of(circuit)
    target = Target.from_gain(gain=ab["gain"], f_low_hz=ab["f_low_hz"], f_high_hz=1e6)
    _, _, block = one_stage_block(trials=20000, target=target)
    assert block["f_low_hz"]["worst_case_low"] == pytest.approx(f0 / 1.1, rel=1e-6)
    assert block["f_low_hz"]["worst_case_high"] == pytest.approx(f0 / 0.9, rel=1e-6)
    # Binomial standard error sqrt(0.25/20000) = 0.0035; allow 4 sigma.
    assert block["yield"] == pytest.approx(0.5, abs=0.014)


@pytest.mark.parametrize("name", ["noninv_single_buffered", "noninv_single_shared", "inv_dual"])
def test_p50_matches_nominal(name):
    # The median of each figure sits at the nominal value within statistical error plus the
    # small shift that the non-linear corner formulas cause. Estimate of that shift (common
    # practice, first order): a cascade's corner combines its stages' corners roughly as
    # 1/f_high^2 = sum 1/f_k^2, so independent +-t uniform stage corners lower the typical
    # f_high by about t^2/6 relative (0.04 % for the 5 % GBW spread used here) and raise
    # f_low alike (~0.2 % for 10 % capacitors). 1 % covers that plus the sampling error of
    # a median over 4000 trials (~0.1 %).
    circuit = ALL[name]()
    ab = as_built_of(circuit)
    block = mc.tolerance_block(circuit, target=None, as_built=ab, trials=4000, seed=5,
                               resistor_tolerance_pct=1.0, capacitor_tolerance_pct=10.0,
                               gbw_tolerance_pct=5.0)
    assert block["gain_db"]["p50"] == pytest.approx(ab["gain_db"], abs=0.05)
    assert block["f_low_hz"]["p50"] == pytest.approx(ab["f_low_hz"], rel=0.01)
    assert block["f_high_hz"]["p50"] == pytest.approx(ab["f_high_hz"], rel=0.01)
    for name_ in ("gain_db", "f_low_hz", "f_high_hz"):
        fig = block[name_]
        assert fig["min"] <= fig["p1"] <= fig["p5"] <= fig["p50"] <= fig["p95"] <= fig["p99"] \
            <= fig["max"]
        # First-order worst case brackets the sampled range (parts at their ends).
        assert fig["worst_case_low"] <= fig["min"] + 1e-9 * abs(fig["min"])
        assert fig["worst_case_high"] >= fig["max"] - 1e-9 * abs(fig["max"])


def test_same_seed_same_figures_and_other_seed_differs():
    circuit = noninv_single(buffered=False)
    ab = as_built_of(circuit)
    kwargs = dict(target=None, as_built=ab, trials=500, resistor_tolerance_pct=1.0,
                  capacitor_tolerance_pct=10.0, gbw_tolerance_pct=10.0)
    a = mc.tolerance_block(circuit, seed=42, **kwargs)
    b = mc.tolerance_block(circuit, seed=42, **kwargs)
    c = mc.tolerance_block(circuit, seed=43, **kwargs)
    assert a == b
    assert a["f_low_hz"]["p50"] != c["f_low_hz"]["p50"]


def test_trials_cap():
    circuit = ALL["inv_dual"]()
    with pytest.raises(ValueError, match="trials"):
        mc.run(circuit, trials=mc.MAX_TRIALS + 1, tol=mc.Tolerances(1, 10),
               rng=np.random.default_rng(1), grid_hz=np.logspace(0, 7, 50))


def test_dc_coupled_has_no_low_corner_and_meets_low_target():
    circuit = ALL["noninv_dual_dc"]()
    ab = as_built_of(circuit)
    target = Target.from_gain(gain=ab["gain"], f_low_hz=0.0, f_high_hz=ab["f_high_hz"] / 2)
    block = mc.tolerance_block(circuit, target=target, as_built=ab, trials=300, seed=1,
                               resistor_tolerance_pct=0.1, capacitor_tolerance_pct=10.0)
    assert block["f_low_hz"]["p50"] is None
    assert block["f_low_hz"]["missing"] == 300
    assert block["yield"] == 1.0


def test_deadline_checker_is_called_per_chunk_and_can_stop_the_run():
    circuit = ALL["noninv_single_shared"]()
    calls = []

    class Stop(Exception):
        pass

    def check(where=None):
        calls.append(where)
        if len(calls) == 2:
            raise Stop(where)

    with pytest.raises(Stop, match="Monte Carlo"):
        mc.run(circuit, trials=3 * mc.CHUNK_TRIALS, tol=mc.Tolerances(1, 10),
               rng=np.random.default_rng(1), grid_hz=np.logspace(0, 7, 50),
               check_deadline=check)
    assert len(calls) == 2


def test_block_without_a_high_corner_does_not_fail():
    # A hand-edited circuit may have no high corner below 10 GHz (as_built f_high null).
    circuit = one_stage_coupling()
    ab = as_built_of(circuit)
    block = mc.tolerance_block(circuit, target=None, as_built=dict(ab, f_high_hz=None),
                               trials=50, seed=1, resistor_tolerance_pct=1.0,
                               capacitor_tolerance_pct=10.0)
    assert block["model"]["grid_hz"][1] == pytest.approx(1e10)
    assert block["f_low_hz"]["p50"] == pytest.approx(ab["f_low_hz"], rel=0.1)
