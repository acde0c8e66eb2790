"""The speed paths of the solver give the same numbers as the paths they shortcut.

Each shortcut is checked against the general path it replaces (the independent references
for the figures themselves, ngspice and scipy.signal, are in tests/analyses and
tests/engine/test_chain*.py):

* ``chain.solve_params`` on one float frequency (Python complex arithmetic) against the
  same solve on a numpy array, for every node voltage;
* ``corners.find_band_one`` (one response, refined on floats) against the batched
  ``corners.find_band`` (same grid, brackets and steps);
* the fraction-free kernel evaluated in blocks of trials (``magnitude.evaluator``) against
  one call over the whole batch, and against the chain's nodal solution;
* the start-up transient (constant-step blocks of BDF2) against the exact solution of the
  same descriptor system (matrix exponential of its differential part, scipy.linalg.expm).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from analyses.circuits import ALL

from service.engine.judge import montecarlo as mc
from service.engine.solver import chain, corners, magnitude, transient
from service.engine.solver.dc import dc_rhs
from service.engine.solver.mna import build


@pytest.mark.parametrize("name", sorted(ALL))
def test_scalar_solve_equals_array_solve(name):
    circuit = ALL[name]()
    p = chain.params_from_circuit(circuit)
    for f in (0.37, 12.0, 2.2e3, 4.7e5, 8.1e7):
        one = chain.solve_params(p, f)
        arr = chain.solve_params(p, np.array([f]))
        assert isinstance(one.vout, complex)
        assert one.vout == pytest.approx(complex(arr.vout[0]), rel=1e-13, abs=1e-300)
        for k in range(circuit.n_stages):
            assert one.stage_out[k] == pytest.approx(complex(arr.stage_out[k][0]), rel=1e-12,
                                                     abs=1e-14)
            assert one.stage_in[k] == pytest.approx(complex(arr.stage_in[k][0]), rel=1e-12,
                                                    abs=1e-14)


@pytest.mark.parametrize("name", sorted(ALL))
def test_one_response_band_equals_batched_band(name):
    circuit = ALL[name]()
    mag = chain.magnitude(circuit)
    batched = corners.find_band(mag, 1)
    one = corners.find_band_one(mag)
    for field in ("gain", "f_low_hz", "f_high_hz", "peak_hz", "outside_max_db"):
        a, b = float(getattr(batched, field)[0]), float(getattr(one, field)[0])
        if math.isnan(a):
            assert math.isnan(b), field
        else:
            assert b == pytest.approx(a, rel=1e-12), field


@pytest.mark.parametrize("name", sorted(k for k, m in ALL.items() if not mc.stiff_reference(m())))
def test_fraction_free_in_blocks_equals_one_block_and_nodal(name):
    base = ALL[name]()
    circuit = replace(base, stages=(base.stages * 4)[:4])
    params = chain.params_from_circuit(circuit)
    tol = mc.Tolerances(10.0, 10.0, 10.0)
    parts = mc.varied_parts(params, tol)
    trials = 3 * magnitude.BLOCK_POINTS // 200 + 7  # several blocks and a ragged last one
    p = mc.with_values(params, parts, mc.draw(parts, trials, tol, np.random.default_rng(11)))
    f = np.logspace(0, 7, 200)[None, :]
    blocks = magnitude.evaluator(p, magnitude.SHARED_REF)(f)
    whole = magnitude.shared_ref_mag(p, f)
    np.testing.assert_array_equal(blocks, whole)
    rows = slice(0, 40)
    nodal = np.abs(chain.solve_params(magnitude._trial_slice(p, 0, 40), f).vout)
    big = nodal > 1e-3 * nodal.max(axis=1, keepdims=True)
    np.testing.assert_allclose(blocks[rows][big], nodal[big], rtol=1e-9)


def _reference_settling_s(system, v_pos: float, band_v: float, t_stop_s: float) -> float:
    """Settling time from the exact solution of ``C x' + G x = b`` (step at t = 0, every
    capacitor discharged), sampled on 4000 log-spaced times.

    The algebraic rows are eliminated first: with ``C = U S V^T`` (SVD, rank r), ``y =
    V^T x`` splits into a differential part ``y1`` (``C x = 0`` is ``y1 = 0``) and an
    algebraic part ``y2``; ``y1' = A y1 + f`` then has the exact solution
    ``y1(t) = (e^(A t) - I) A^-1 f`` (matrix exponential by scipy.linalg.expm), and
    ``y2`` follows from the algebraic rows.
    """
    from scipy.linalg import expm

    g, c = system.g, system.c
    b = dc_rhs(system, v_pos)
    u, sv, vt = np.linalg.svd(c)
    r = int(np.sum(sv > sv[0] * 1e-12))
    gt = u.T @ g @ vt.T
    bt = u.T @ b
    g11, g12, g21, g22 = gt[:r, :r], gt[:r, r:], gt[r:, :r], gt[r:, r:]
    g22_inv = np.linalg.inv(g22)
    a = -(g11 - g12 @ g22_inv @ g21) / sv[:r, None]
    f0 = (bt[:r] - g12 @ g22_inv @ bt[r:]) / sv[:r]
    n_nodes = len(system.nodes)
    final = np.linalg.solve(g, b)[:n_nodes]
    t = np.geomspace(1e-6, t_stop_s, 4000)
    y1 = (expm(t[:, None, None] * a) - np.eye(r)) @ np.linalg.solve(a, f0)  # (T, r)
    y2 = g22_inv @ (bt[r:, None] - g21 @ y1.T)
    nodes = (vt.T @ np.vstack([y1.T, y2]))[:n_nodes]
    dev = np.max(np.abs(nodes - final[:, None]), axis=0)
    outside = np.nonzero(dev > band_v)[0]
    return float(t[outside[-1] + 1]) if outside.size else 0.0


@pytest.mark.parametrize("name", sorted(k for k, m in ALL.items() if m().bias is not None))
def test_startup_blocks_agree_with_the_exact_solution(name):
    # The exact solution of the same linear system (scipy.linalg.expm), supply stepped at
    # t = 0 from discharged capacitors; its 4000-point grid resolves the crossing to 0.5 %.
    # The lightly damped shared-bias cases are the hardest for a fixed step ratio.
    circuit = ALL[name]()
    system = build(circuit)
    band = 0.01 * circuit.supply.span_v
    ours = transient.settling_time_s(system, circuit.supply.v_pos, band)
    ref = _reference_settling_s(system, circuit.supply.v_pos, band, 20.0 * ours)
    assert ours == pytest.approx(ref, rel=0.01)
