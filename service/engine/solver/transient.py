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

The step is constant over blocks of ``STEPS_PER_BLOCK`` steps and doubles from one block to
the next, so it stays between ``1/(2 K)`` and ``1/K`` of the elapsed time (every time
constant is crossed in about the same number of steps) while each block's step matrix is
inverted once: a step is then one product with the block's propagator,
``[x_(n+1); x_n] = T [x_n; x_(n-1)] + [q; 0]`` with ``T = [[(1+w) P, -w^2/(1+w) P], [I, 0]]``,
``P = M^-1 C / h``, ``q = M^-1 b`` and ``M = (1+2w)/(1+w) C / h + G``.
"""

from __future__ import annotations

import math

import numpy as np

from service.engine.solver.dc import dc_rhs
from service.engine.solver.mna import MnaSystem

#: First step (s): well below the op-amps' closed-loop time constants.
T_START_S = 1e-9
#: Last time point (s): a start-up slower than this is reported as not settled (inf).
T_STOP_S = 1e4
#: Steps of constant size per block (the step doubles from block to block): the step is
#: at most 1/40 of the elapsed time. Against the exact solution (matrix exponential, in
#: tests/engine/test_fast_paths.py) the settling time is then within 0.5 % on every test
#: circuit; 20 steps gave 2 % on a lightly damped shared-bias loop, 80 steps 0.05 %.
STEPS_PER_BLOCK = 40


def _propagator(system: MnaSystem, b: np.ndarray, h: float, w: float | None):
    """``(T, q)`` of one step of size ``h`` after a step ``h / w`` (``w`` None: the
    backward-Euler start, whose ``x_(n-1)`` half of the state is ignored)."""
    n = system.size
    if w is None:
        a0, ca, cb = 1.0, 1.0, 0.0
    else:
        a0, ca, cb = (1.0 + 2.0 * w) / (1.0 + w), 1.0 + w, -(w * w) / (1.0 + w)
    m_inv = np.linalg.inv(system.c * (a0 / h) + system.g)
    p = m_inv @ system.c / h
    t = np.zeros((2 * n, 2 * n))
    t[:n, :n] = ca * p
    t[:n, n:] = cb * p
    t[n:, :n] = np.eye(n)
    q = np.zeros(2 * n)
    q[:n] = m_inv @ b
    return t, q


def _steps(t: np.ndarray, q: np.ndarray, z: np.ndarray, count: int) -> np.ndarray:
    """The states ``z`` after each of ``count`` steps ``z <- T z + q``: shape (count, 2N)."""
    out = np.empty((count, z.size))
    for i in range(count):
        z = t @ z + q
        out[i] = z
    return out


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
    z = np.zeros(2 * system.size)  # [x_n; x_(n-1)]
    t_prev, dev_prev = 0.0, math.inf
    crossing = None  # time the deviation last fell inside the band (None: outside now)
    h, w = T_START_S, None
    while t_prev < T_STOP_S:
        # the block's first step follows the previous block's (w = 2, or the Euler start);
        # the rest run at ratio 1
        first, q1 = _propagator(system, b, h, w)
        rest, q = _propagator(system, b, h, 1.0)
        z1 = first @ z + q1
        states = np.vstack([z1[None, :], _steps(rest, q, z1, STEPS_PER_BLOCK - 1)])
        z = states[-1]
        devs = np.max(np.abs(states[:, :n_nodes] - final), axis=1)
        for dev in devs.tolist():
            t_now = t_prev + h
            if dev > band_v:
                crossing = None
            elif crossing is None:
                crossing = _log_interpolate(t_prev, dev_prev, t_now, dev, band_v)
            if crossing is not None and dev < SETTLED_FRACTION * band_v:
                return crossing
            t_prev, dev_prev = t_now, dev
        h, w = 2.0 * h, 2.0
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
