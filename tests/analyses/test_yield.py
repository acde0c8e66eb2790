"""Predicted yield (issue 9, item 2) against Monte Carlo references.

References: a 20,000-trial Monte Carlo of the service's own exact per-trial solver
(``montecarlo.run``: every part drawn independently and uniformly within its tolerance, the
full band search per trial), and an ngspice Monte Carlo (a test deck whose ``.control`` block
``alter``s every part to the same draws and runs ``.ac`` per trial; corners found on
ngspice's own output). The designs are scenarios of our own covering shared and buffered
bias, both topologies, dual supplies and band-limiting feedback capacitors; each is judged
under its own tolerances and under a stressed set (wider capacitors, a 30 % gain-bandwidth
spread) that puts its yield in mid-range, where a prediction can be wrong.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pytest

from analyses import spice_deck
from service.engine.judge import montecarlo as mc
from service.engine.judge import yield_estimate as ye
from service.engine.judge.analysis import as_built
from service.engine.model import parts as parts_mod
from service.engine.model.catalog import BUILTIN_OPAMPS
from service.engine.model.circuit import Circuit
from service.engine.model.parts import Tolerances, tolerances_of
from service.engine.solver.chain import params_from_circuit
from service.engine.synthesis.design import design
from service.pipeline import load_design_request

CATALOG = {o.id: o for o in BUILTIN_OPAMPS}
S5 = {"kind": "single", "v_pos": 5}
README = {"target": {"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 200000}, "supply": S5,
          "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 200, "load_ohm": 10000},
          "opamp": "gc-cmos-rr-10m"}
DESIGNS = {
    "readme_shared_ni": README,
    "readme_gbw30_buffered": dict(README, components={"gbw_tolerance_pct": 30}),
    "inv_12v_buffered": {"target": {"gain_db": 40, "f_low_hz": 100, "f_high_hz": 50000},
                         "supply": {"kind": "single", "v_pos": 12}, "opamp": "gc-bjt-lownoise-8m",
                         "topology": "inverting", "stages": 3},
    "inv_5v_shared": {"target": {"gain_db": 40, "f_low_hz": 50, "f_high_hz": 20000},
                      "supply": S5, "opamp": "gc-cmos-rr-10m", "topology": "inverting",
                      "stages": 2},
    "audio_ni_shared_cf": {"target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 20000,
                                      "f_high_max_hz": 40000},
                           "supply": S5, "opamp": "gc-cmos-rr-10m"},
    "audio_inv_dual_cf": {"target": {"gain_db": 46, "f_low_hz": 20, "f_high_hz": 15000,
                                     "f_high_max_hz": 30000},
                          "supply": {"kind": "dual", "v_pos": 12, "v_neg": -12},
                          "opamp": "gc-bjt-lownoise-8m", "topology": "inverting",
                          "components": {"gbw_tolerance_pct": 30}},
    "bio_buffered_cf": {"target": {"gain_db": 60, "f_low_hz": 0.5, "f_high_hz": 150,
                                   "f_high_max_hz": 300},
                        "signal": {"input_peak_v": 0.001, "source_impedance_ohm": 1000},
                        # 0.5 Hz on a single supply: the in-band ripple limit is relaxed
                        # (see tests/analyses/test_band_limit.py)
                        "supply": {"kind": "single", "v_pos": 3.3, "ripple_rejection_db": 6},
                        "opamp": "gc-micro-1m"},
    "narrow_two_sided_cf": {"target": {"gain_db": 50, "f_low_hz": 300, "f_low_min_hz": 200,
                                       "f_high_hz": 3000, "f_high_max_hz": 5000},
                            "supply": S5, "opamp": "gc-cmos-rr-10m"},
    "jfet_dual_ni": {"target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 100000},
                     "supply": {"kind": "dual", "v_pos": 15, "v_neg": -15},
                     "opamp": "gc-jfet-4m"},
    "jfet_12v_ni_buffered": {"target": {"gain_db": 60, "f_low_hz": 100, "f_high_hz": 50000},
                             "supply": {"kind": "single", "v_pos": 12}, "opamp": "gc-jfet-4m",
                             "stages": 3},
}
#: Tolerances that push every design's yield into mid-range (invented stress, not defaults).
STRESSED = Tolerances(resistor_tolerance_pct=2.0, c0g_tolerance_pct=10.0,
                      capacitor_tolerance_pct=20.0, electrolytic_tolerance_pct=30.0,
                      gbw_tolerance_pct=30.0)
#: The issue's agreement between the prediction and a Monte Carlo.
AGREEMENT = 0.03

_CACHE: dict = {}


#: The stated input of the designs without their own: small enough that none of them clips
#: (issue 8's output_swing check judges every design at its stated input).
SMALL_INPUT = {"input_peak_v": 0.0005}


def designed(name):
    if name not in _CACHE:
        body = dict(DESIGNS[name])
        body.setdefault("signal", SMALL_INPUT)
        req, _ = load_design_request(body, CATALOG)
        _CACHE[name] = (req, design(req))
    return _CACHE[name]


def monte_carlo_yield(circuit, target, tol: Tolerances, trials: int, seed: int) -> float:
    """Yield of the service's exact per-trial Monte Carlo (``montecarlo.tolerance_block``)."""
    ab = as_built(circuit, per_stage=False).to_dict()
    block = mc.tolerance_block(circuit, target=target, as_built=ab, trials=trials, seed=seed,
                               **tol.to_dict())
    return block["yield"]


@pytest.mark.slow
@pytest.mark.parametrize("stressed", [False, True], ids=["own", "stressed"])
@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_predicted_yield_matches_a_20000_trial_monte_carlo(name, stressed):
    req, d = designed(name)
    circuit = d.synthesis.circuit
    tol = STRESSED if stressed else tolerances_of(req.components)
    predicted = ye.predict(circuit, req.target, tol).predicted
    # Reference: 20,000 trials of the exact per-trial solver (binomial error <= 0.0035).
    simulated = monte_carlo_yield(circuit, req.target, tol, trials=20000, seed=11)
    assert predicted == pytest.approx(simulated, abs=AGREEMENT), (predicted, simulated)
    if not stressed:
        assert d.synthesis.yield_estimate.predicted == predicted  # what the design reports


def test_the_design_set_covers_what_the_issue_asks():
    kinds = set()
    for name in DESIGNS:
        _, d = designed(name)
        c = d.synthesis.circuit
        kinds.add(c.topology)
        kinds.add("dual" if c.bias is None else ("buffered" if c.bias.buffered else "shared"))
        if any(st.c_feedback_f is not None for st in c.stages):
            kinds.add("c_feedback")
    assert len(DESIGNS) >= 8
    assert kinds >= {"inverting", "non_inverting", "shared", "buffered", "dual", "c_feedback"}


@pytest.mark.parametrize("name", sorted(DESIGNS))
def test_every_design_meets_its_min_yield_by_prediction(name):
    req, d = designed(name)
    assert d.status == "meets_target", d.shortfalls
    assert d.synthesis.yield_estimate.predicted >= req.target.min_yield


def test_readme_example_reaches_0_9_in_an_independent_monte_carlo():
    # Issue 9, "Done when": the README example's design reaches yield 0.9 at its defaults.
    # Reference: 20,000 trials of the exact per-trial solver with the tolerances its BOM
    # states (1 % resistors, 5 % C0G, 10 % X7R/X5R, 20 % electrolytics).
    req, d = designed("readme_shared_ni")
    simulated = monte_carlo_yield(d.synthesis.circuit, req.target,
                                  tolerances_of(req.components), trials=20000, seed=3)
    assert simulated >= 0.9 - AGREEMENT
    assert d.synthesis.yield_estimate.predicted >= 0.9


def test_min_yield_of_one_half_keeps_the_target_corners():
    # A lower min_yield needs less centring: the design with min_yield 0.5 keeps a low
    # corner at least as high as the one with 0.9 (smaller capacitors).
    body = dict(README, target=dict(README["target"], min_yield=0.5))
    req, _ = load_design_request(body, CATALOG)
    half = design(req)
    _, full = designed("readme_shared_ni")
    assert half.synthesis.yield_estimate.predicted >= 0.5
    assert half.synthesis.as_built.f_low_hz >= full.synthesis.as_built.f_low_hz


@pytest.mark.slow
@pytest.mark.parametrize("name", ["readme_shared_ni", "bio_buffered_cf", "audio_inv_dual_cf"])
def test_predicted_yield_matches_an_ngspice_monte_carlo(name):
    # Reference: ngspice, one .ac per trial with every part altered to the same uniform
    # draws the service's Monte Carlo would make (stressed tolerances, mid-range yield);
    # gain and -3 dB corners read from ngspice's own table (50 points per decade).
    spice_deck.require_ngspice()
    req, d = designed(name)
    circuit = d.synthesis.circuit
    ab = d.synthesis.as_built
    tol = mc.Tolerances.from_block(STRESSED)
    params = params_from_circuit(circuit)
    parts = mc.varied_parts(params, tol, parts_mod.capacitor_kinds(circuit))
    trials = 1000
    values = mc.draw(parts, trials, tol, np.random.default_rng(2026))
    grid = mc.analysis_grid(ab.f_low_hz, ab.f_high_hz)  # the service's span, two decades out
    deck = spice_deck.monte_carlo_deck(circuit, parts, values, grid[0], grid[-1],
                                       per_decade=50)
    tables = spice_deck.parse_tables(spice_deck.run(deck, timeout_s=300), 2)
    assert len(tables) == trials
    figs = np.array([spice_deck.corners_db(np.array(t)[:, 0], np.array(t)[:, 1])
                     for t in tables])
    t = req.target
    ok = (np.abs(figs[:, 0] - t.gain_db) <= t.gain_tolerance_db) & (figs[:, 1] <= t.f_low_hz) \
        & (figs[:, 2] >= t.f_high_hz)
    if t.f_high_max_hz is not None:
        ok &= figs[:, 2] <= t.f_high_max_hz
    spice_yield = float(np.mean(ok))
    predicted = ye.predict(circuit, t, STRESSED).predicted
    # 1000 trials: binomial error <= 0.016; the issue's 0.03 budget.
    assert predicted == pytest.approx(spice_yield, abs=AGREEMENT), (predicted, spice_yield)
    assert 0.05 < spice_yield < 0.98  # mid-range: the comparison can fail
    # Trial by trial the service's solver and ngspice agree on the figures.
    g, lo, hi = mc.figures(mc.with_values(params, parts, values), grid, trials,
                           mc.model_for(circuit))
    # Trials that meet the target in both agree in every figure. A stressed shared-bias
    # trial may ring instead (a low-frequency resonance a few Hz wide, which either sweep
    # can step over: we saw one of 1000 pass the service's 200-point grid and not
    # ngspice's), so the verdicts agree trial by trial for 99.5 % of the trials.
    ours = mc.meets(mc.MonteCarloResult(g, lo, hi, grid, parts, "x"), t)
    assert np.mean(ours == ok) >= 0.995
    both = ours & ok
    assert np.all(np.abs(figs[both, 0] - g[both]) < 0.01)
    assert np.all(np.abs(figs[both, 1] / lo[both] - 1) < 2e-3)
    assert np.all(np.abs(figs[both, 2] / hi[both] - 1) < 2e-3)


def test_yield_block_in_every_design_response(client, strict_json):
    d = strict_json(client.post("/v1/designs", json=README).data)
    y = d["yield"]
    assert set(y) >= {"predicted", "min_yield", "method", "figures"}
    assert y["min_yield"] == 0.9 and y["predicted"] >= 0.9
    assert set(y["figures"]) == {"gain_db", "f_low_hz", "f_high_hz"}
    assert y["figures"]["f_low_hz"]["limit"] == [None, 2000]
    assert y["figures"]["gain_db"]["limit"] == [59.5, 60.5]
    assert math.isclose(y["figures"]["f_low_hz"]["nominal"],
                        d["performance"]["as_built"]["f_low_hz"], rel_tol=1e-6)
    # Round trip: the analysis of the design's circuit, target and tolerances gives the same
    # yield block and status.
    a = strict_json(client.post("/v1/analyses", json={
        "circuit": d["circuit"], "target": d["target"], "input_peak_v": 0.001,
        "tolerances": d["tolerances"]}).data)
    assert a["yield"] == y
    assert a["status"] == d["status"]


def test_unreachable_yield_is_a_shortfall(client, strict_json):
    # A 60 % gain-bandwidth spread on two stages of 30 dB: some builds lose f_high whatever
    # the centring does (it moves capacitors, not the op-amp), so min_yield 1 is missed.
    body = dict(README, target=dict(README["target"], min_yield=1.0), stages=2,
                components={"gbw_tolerance_pct": 60})
    d = strict_json(client.post("/v1/designs", json=body).data)
    assert d["yield"]["predicted"] < 1.0
    assert d["status"] == "target_not_met"
    assert {"quantity": "yield", "target": 1.0,
            "achieved": d["yield"]["predicted"]} in d["shortfalls"]


#: A scenario of our own where the shared bias divider rings in some builds: 60 dB at 2 Hz
#: on 22.5 V, two stages forced.
RINGING = {"target": {"gain_db": 60, "f_low_hz": 1.99, "f_high_hz": 713.3,
                      "f_high_max_hz": 1797.0, "f_low_min_hz": 1.467},
           "supply": {"kind": "single", "v_pos": 22.52}, "opamp": "gc-bjt-lownoise-8m",
           "signal": {"input_peak_v": 0.00012, "source_impedance_ohm": 0}, "stages": 2}


RINGING_CIRCUIT = Circuit.from_dict({
    "topology": "non_inverting", "supply": {"kind": "single", "v_pos": 22.52},
    "opamp": CATALOG["gc-bjt-lownoise-8m"].to_dict(), "source_impedance_ohm": 0.0,
    "load_ohm": 10000.0,
    "bias": {"r_top_ohm": 93100.0, "r_bottom_ohm": 93100.0, "c_bypass_f": 0.0001,
             "buffered": False},
    "stages": [{"c_couple_f": 6.8e-06, "r_bias_ohm": 42200.0, "r_feedback_ohm": 102000.0,
                "c_feedback_f": 1e-09, "r_gain_ohm": 3320.0, "c_gain_f": 0.0001},
               {"c_couple_f": 6.8e-06, "r_bias_ohm": 42200.0, "r_feedback_ohm": 102000.0,
                "c_feedback_f": 8.2e-10, "r_gain_ohm": 3320.0, "c_gain_f": 0.0001}],
    "c_out_f": 3.3e-05})


@pytest.mark.slow
def test_builds_whose_shared_bias_rings_are_counted():
    # Reference: 20,000 trials of the exact per-trial solver, where some builds' bias loop
    # resonates near 0.3 Hz and lifts the response (their gain or low corner jumps); the
    # sensitivity model alone cannot see them, the exact peaking check does.
    req, _ = load_design_request(RINGING, CATALOG)
    # The synthesis now buffers this bias node (issue 8: its ripple and natural-frequency
    # checks), so the estimator is checked on the circuit an earlier synthesis gave for
    # this request, with its shared divider.
    circuit = dataclasses.replace(RINGING_CIRCUIT, opamp=req.opamp)
    est = ye.predict(circuit, req.target, tolerances_of(req.components))
    assert est.peaking > 0.02
    simulated = monte_carlo_yield(circuit, req.target, tolerances_of(req.components),
                                  trials=20000, seed=11)
    assert est.predicted == pytest.approx(simulated, abs=AGREEMENT), (est.predicted, simulated)
    # without the peaking check the same model would be further off
    quick = ye.predict(circuit, req.target, tolerances_of(req.components), peaking=False)
    assert abs(quick.predicted - simulated) > abs(est.predicted - simulated) + 0.01
    print("ringing scenario: predicted", est.predicted, "peaking", est.peaking,
          "without check", quick.predicted, "monte carlo", simulated)
