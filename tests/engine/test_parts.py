"""One source of truth for part classes and tolerances (issue 9, items 1 and 5).

The BOM and the Monte Carlo must state and use the same tolerance for every part; the
capacitor class follows the value and the DC across the part. Rules checked here are
common practice: C0G/NP0 up to 10 nF (5 %), X7R/X5R class-2 ceramics (10 %) carrying at most
25 % of their rating as DC in the signal path (DC-bias capacitance loss), aluminium
electrolytics (20 %) above, every rating at least twice the DC across the part.
"""

from __future__ import annotations

import numpy as np
import pytest

from exporters.board import build_board
from service.engine.judge import montecarlo as mc
from service.engine.model import parts
from service.engine.model.circuit import Bias, Circuit, OpAmp, Stage, Supply
from service.engine.solver.chain import params_from_circuit


def circuit(v_pos: float = 12.0, c_couple: float = 1e-6, c_gain: float = 4.7e-6) -> Circuit:
    amp = OpAmp(gbw_hz=10e6, slew_v_per_us=5, swing_to_pos_v=0.1, swing_to_neg_v=0.1,
                supply_min_v=3, supply_max_v=36, channels_per_package=2)
    st = Stage(r_feedback_ohm=10e3, r_gain_ohm=1e3, c_couple_f=c_couple, r_bias_ohm=10e3,
               c_gain_f=c_gain)
    return Circuit(topology="non_inverting", supply=Supply("single", v_pos), opamp=amp,
                   source_impedance_ohm=50, load_ohm=10e3,
                   bias=Bias(10e3, 10e3, 4.7e-9, False), stages=(st, st), c_out_f=220e-6)


@pytest.mark.parametrize("value, v_dc, kind, dielectric, rating", [
    (4.7e-9, 6.0, parts.C0G, "C0G/NP0", 16.0),     # class 1: plain 2x derating
    (1e-6, 2.5, parts.CLASS2, "X7R", 10.0),        # 4 x 2.5 V = 10 V
    (1e-6, 6.0, parts.CLASS2, "X7R", 25.0),        # 4 x 6 V = 24 V -> 25 V
    (4.7e-6, 6.0, parts.CLASS2, "X5R", 25.0),      # X5R up to 25 V ratings
    (4.7e-6, 7.5, parts.ELECTROLYTIC, "Al electrolytic", 16.0),  # 30 V: no X5R rating
    (1e-6, 0.0, parts.CLASS2, "X7R", 10.0),        # no DC: smallest rating
    (100e-6, 0.0, parts.ELECTROLYTIC, "Al electrolytic bipolar", 6.3),
])
def test_capacitor_class_keeps_class2_dc_under_a_quarter_of_rating(value, v_dc, kind,
                                                                    dielectric, rating):
    cls = parts.capacitor_class(value, v_dc)
    assert (cls.kind, cls.dielectric, cls.rating_v) == (kind, dielectric, rating)
    if cls.kind == parts.CLASS2:
        assert v_dc <= 0.25 * cls.rating_v  # common practice: DC-bias limit of X5R/X7R
    assert cls.rating_v >= 2.0 * v_dc      # common practice: 2x voltage derating
    # Off the signal path (decoupling) only the 2x derating applies.
    assert parts.capacitor_class(1e-6, 6.0, signal_path=False).rating_v == 16.0


def test_bom_and_monte_carlo_state_the_same_tolerance_for_every_capacitor():
    # The BOM's Tolerance column (exporters.board) against the per-part tolerance the Monte
    # Carlo draws with (montecarlo.varied_parts with the engine's kinds), part by part.
    c = circuit()
    tol = parts.Tolerances(resistor_tolerance_pct=1, c0g_tolerance_pct=2,
                           capacitor_tolerance_pct=10, electrolytic_tolerance_pct=20)
    board = build_board(c, tolerances=tol)
    bom = {}
    for p in board.parts:
        if p.prefix == "C" and not p.role.endswith(("decoupling", "bulk")):
            bom.setdefault(p.value_si, set()).add(p.field("Tolerance"))
    mc_tol = mc.Tolerances.from_block(tol)
    varied = mc.varied_parts(params_from_circuit(c), mc_tol, parts.capacitor_kinds(c))
    seen = 0
    for f, k, value, _ in parts.circuit_capacitors(c):
        pct = parts.part_tolerance_pct(c, f, k, tol)
        assert bom[value] == {f"{pct:g}%"}
        part = next(p for p in varied if p.field == f and p.index == k)
        assert mc_tol.of(part.kind) * 100 == pytest.approx(pct)
        seen += 1
    assert seen == 6  # 2 coupling, 2 ground legs, output, bypass
    # The classes in play: C0G bypass (2 %), X7R coupling (10 %), X5R ground leg on 12 V
    # (6 V DC needs 25 V: X5R allowed), electrolytic output (20 %).
    assert bom[4.7e-9] == {"2%"} and bom[1e-6] == {"10%"} and bom[220e-6] == {"20%"}


def test_monte_carlo_draws_each_capacitor_within_its_class_tolerance():
    # Drawn values stay inside nominal*(1 +- t) of their own class and fill it (uniform).
    c = circuit()
    tol = mc.Tolerances.from_block(parts.Tolerances())
    params = params_from_circuit(c)
    varied = mc.varied_parts(params, tol, parts.capacitor_kinds(c))
    values = mc.draw(varied, 20000, tol, np.random.default_rng(3))
    for i, p in enumerate(varied):
        rel = values[:, i] / p.nominal - 1.0
        t = tol.of(p.kind)
        assert np.all(np.abs(rel) <= t + 1e-12)
        assert np.max(np.abs(rel)) > 0.99 * t
    kinds = {(p.field, p.index): p.kind for p in varied}
    assert kinds[("c_out_f", None)] == parts.ELECTROLYTIC
    assert kinds[("c_bypass_f", None)] == parts.C0G
