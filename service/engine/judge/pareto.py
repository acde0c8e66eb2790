"""Pareto set and ranking of design candidates (pure: lists of numbers in, flags out).

A candidate is a tuple of criteria, all to be minimised (part count, input-referred noise,
supply current and, when prices are known, cost); ``None`` or NaN counts as the worst value.
A dominates B when A is no worse on every criterion and strictly better on at least one
(Pareto dominance, the textbook definition of multi-objective optimisation).
"""

from __future__ import annotations

import math
from collections.abc import Sequence


def _value(x) -> float:
    if x is None:
        return math.inf
    x = float(x)
    return math.inf if math.isnan(x) else x


def dominates(a: Sequence, b: Sequence) -> bool:
    """True when ``a`` is no worse than ``b`` on every criterion and better on one."""
    va, vb = [_value(x) for x in a], [_value(x) for x in b]
    return all(x <= y for x, y in zip(va, vb, strict=True)) and any(
        x < y for x, y in zip(va, vb, strict=True))


def pareto_flags(points: Sequence[Sequence], eligible: Sequence[bool]) -> list[bool]:
    """For each point: eligible and not dominated by another eligible point."""
    out = []
    for i, p in enumerate(points):
        if not eligible[i]:
            out.append(False)
            continue
        out.append(not any(eligible[j] and j != i and dominates(q, p)
                           for j, q in enumerate(points)))
    return out


def rank_order(meets: Sequence[bool], pareto: Sequence[bool],
               keys: Sequence[Sequence]) -> list[int]:
    """Indices in rank order: meeting candidates first, Pareto ones first among them, then
    by ``keys`` (e.g. part count, noise, current), then by input position (stable)."""
    def key(i):
        return (not meets[i], not pareto[i], tuple(_value(x) for x in keys[i]), i)

    return sorted(range(len(meets)), key=key)
