"""Start-up transient of the linear circuit model: the supply stepped from 0 V to ``v_pos``.

The MNA system ``(G + s C) x = b`` is, in the time domain, the descriptor system
``C x' + G x = b u(t)`` (:mod:`service.engine.solver.mna`; the op-amp pole sits in ``C``).
Every capacitor starts discharged (``x(0) = 0``) and the supply source steps to ``v_pos``
at ``t = 0``. Integration is the two-step backward differentiation formula (BDF2) with
variable steps, started by one backward-Euler step: both are stiffly stable, so they handle
the algebraic rows and the op-amps' nanosecond poles next to the bias network's seconds,
and BDF2's second order keeps lightly damped modes (a soft shared bias node) from being
damped away numerically (C. W. Gear, *Numerical Initial Value Problems in Ordinary
Differential Equations*, 1971; cited from memory). With ``w = h_n / h_(n-1)``:
``C [(1+2w)/(1+w) x_(n+1) - (1+w) x_n + w^2/(1+w) x_(n-1)] / h_n + G x_(n+1) = b``.
The time grid is geometric from ``T_START_S`` with ratio ``STEP_RATIO``: the step stays a
fixed fraction of the elapsed time, so every time constant is crossed in the same number
of steps.
"""

from __future__ import annotations

import math

import numpy as np

from service.engine.solver.dc import dc_rhs
from service.engine.solver.mna import MnaSystem

#: First time point (s): well below the op-amps' closed-loop time constants.
T_START_S = 1e-9
#: Last time point (s): a start-up slower than this is reported as not settled (inf).
T_STOP_S = 1e4
#: Ratio of consecutive time points: 2.5 % growth keeps the backward-Euler error in the
#: decay of a mode to a few percent around its settling time (h/tau ~ 0.1 near t ~ 4 tau).
STEP_RATIO = 1.025


def settling_time_s(system: MnaSystem, v_pos: float, band_v: float) -> float:
    """Time after the supply step until every node voltage stays within ``band_v`` of its
    final DC value; ``inf`` when it has not settled by ``T_STOP_S``.

    The crossing is interpolated linearly in log time between the two grid points that
    bracket the last excursion.
    """
    b = dc_rhs(system, v_pos)
    n_nodes = len(system.nodes)
    final = np.linalg.solve(system.g, b)[:n_nodes]
    if not np.any(np.abs(final) > band_v):  # nothing to charge: settled from the start
        return 0.0
    x = np.zeros(system.size)
    x_old = None  # x one step back (None before the first step: backward Euler)
    h_old = None
    t_prev, dev_prev = 0.0, math.inf
    t_now = T_START_S
    crossing = None  # time the deviation last fell inside the band (None: outside now)
    while t_now <= T_STOP_S:
        h = t_now - t_prev
        if x_old is None:
            x_new = np.linalg.solve(system.c / h + system.g, system.c @ x / h + b)
        else:
            w = h / h_old
            a0 = (1.0 + 2.0 * w) / (1.0 + w)
            hist = (1.0 + w) * x - (w * w / (1.0 + w)) * x_old
            x_new = np.linalg.solve(system.c * (a0 / h) + system.g, system.c @ hist / h + b)
        x_old, x, h_old = x, x_new, h
        dev = float(np.max(np.abs(x[:n_nodes] - final)))
        if dev > band_v:
            crossing = None
        elif crossing is None:
            crossing = _log_interpolate(t_prev, dev_prev, t_now, dev, band_v)
        if crossing is not None and dev < SETTLED_FRACTION * band_v:
            return crossing
        t_prev, dev_prev = t_now, dev
        t_now *= STEP_RATIO
    return math.inf if crossing is None else crossing


#: Integration stops once every node is this fraction of the band from its final value
#: (the deviation decays monotonically from there on a linear circuit of real poles).
SETTLED_FRACTION = 0.01


def _log_interpolate(t0: float, d0: float, t1: float, d1: float, level: float) -> float:
    """Where the deviation crosses ``level`` between ``(t0, d0)`` and ``(t1, d1)``,
    linear in log time (``t0 = 0`` or an infinite ``d0``: ``t1``)."""
    if t0 <= 0.0 or not math.isfinite(d0) or d0 <= d1:
        return t1
    frac = (d0 - level) / (d0 - d1)
    return math.exp(math.log(t0) + frac * (math.log(t1) - math.log(t0)))
