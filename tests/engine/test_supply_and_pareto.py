"""Supply current budget and the Pareto helpers of the engine.

References: Ohm's law and a quiescent-current budget (common practice) worked by hand for
the supply current; the textbook definition of Pareto dominance, applied by brute force over
every pair (written here independently of ``service.engine.judge.pareto``), for the flags.
"""

from __future__ import annotations

import math
import sys
from dataclasses import replace
from pathlib import Path

from hypothesis import given, settings
from hypothesis import strategies as st

from service.engine.judge.pareto import dominates, pareto_flags, rank_order
from service.engine.judge.supply import supply_current_a

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "exporters"))
from export_circuits import dual_inv, single_ni  # noqa: E402


def test_supply_current_single_supply_by_hand():
    # 3 stages + buffered VMID = 4 units -> 2 dual packages; iq 1 mA per unit;
    # divider 100k + 100k on 5 V: 25 uA; the load sits behind c_out_f: no DC.
    c = single_ni(3, buffered=True, channels=2, iq_a=1e-3)
    assert supply_current_a(c) == 4 * 1e-3 + 5.0 / 200e3
    # 3 stages unbuffered on a quad: one package, the spare unit still draws its iq
    c = single_ni(3, buffered=False, channels=4, iq_a=0.5e-3)
    assert math.isclose(supply_current_a(c), 4 * 0.5e-3 + 25e-6, rel_tol=1e-15)


def test_supply_current_dual_supply_by_hand():
    # 2 single-channel packages at 2 mA each; no divider; load behind c_out_f
    c = dual_inv(2, channels=1)
    c = replace(c, opamp=replace(c.opamp, iq_a=2e-3))
    assert supply_current_a(c) == 4e-3
    # without an output capacitor the load returns to REF (ground) from an output at REF
    c = replace(c, c_out_f=None)
    assert supply_current_a(c) == 4e-3


def _brute(points, eligible):
    out = []
    for i, p in enumerate(points):
        if not eligible[i]:
            out.append(False)
            continue
        beaten = False
        for j, q in enumerate(points):
            if j != i and eligible[j]:
                no_worse = all(a <= b for a, b in zip(q, p, strict=True))
                better = any(a < b for a, b in zip(q, p, strict=True))
                beaten = beaten or (no_worse and better)
        out.append(not beaten)
    return out


@settings(max_examples=200, deadline=None, derandomize=True, database=None)
@given(st.lists(st.tuples(st.integers(10, 14), st.integers(1, 4), st.integers(1, 3),
                          st.booleans()), min_size=1, max_size=12))
def test_pareto_flags_match_brute_force(rows):
    points = [r[:3] for r in rows]
    eligible = [r[3] for r in rows]
    assert pareto_flags(points, eligible) == _brute(points, eligible)
    order = rank_order(eligible, pareto_flags(points, eligible), points)
    assert sorted(order) == list(range(len(rows)))


def test_dominance_basics():
    assert dominates((1, 2), (1, 3)) and not dominates((1, 3), (1, 3))
    assert not dominates((1, 4), (2, 3))
    assert dominates((1, 2), (1, None)) and not dominates((1, None), (1, 2))
