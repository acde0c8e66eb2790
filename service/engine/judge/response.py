"""Frequency-response curves of the cascade: gain and unwrapped phase of Vout/Vs and of each
stage's cumulative output ``(V(O_k) - V(REF)) / Vs``, on a log-spaced grid with both ends
included. Computed by the exact nodal solution (:func:`service.engine.solver.chain.solve`).
"""

from __future__ import annotations

import math

import numpy as np

from service.engine.model.circuit import Circuit
from service.engine.solver.chain import solve

DEFAULT_POINTS = 200
MAX_POINTS = 2000
#: Without explicit limits the curves run one decade beyond the as-built corners.
MARGIN_DECADES = 1.0
#: A DC-coupled cascade has no low corner; its curves start this many decades below f_high.
DC_SPAN_DECADES = 4.0


def default_span(f_low_hz, f_high_hz) -> tuple[float, float]:
    """One decade beyond the as-built corners (``f_low`` None/nan: DC coupled)."""
    f_high = float(f_high_hz) if _finite(f_high_hz) else 1e6
    stop = f_high * 10 ** MARGIN_DECADES
    if _finite(f_low_hz):
        start = float(f_low_hz) / 10 ** MARGIN_DECADES
    else:
        start = f_high / 10 ** (DC_SPAN_DECADES + MARGIN_DECADES)
    return start, stop


def log_frequencies(f_start_hz: float, f_stop_hz: float, points: int) -> np.ndarray:
    """``points`` log-spaced frequencies, both ends included exactly."""
    f = np.logspace(math.log10(f_start_hz), math.log10(f_stop_hz), points)
    f[0], f[-1] = f_start_hz, f_stop_hz
    return f


def gain_phase(h: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``20 log10 |h|`` (dB) and the phase of ``h`` (degrees), unwrapped along the curve and
    anchored at the gain peak: the phase there is wrapped into (-180, 180] and the rest of
    the curve follows continuously from it (``numpy.unwrap``). So the midband phase reads
    as 0 or 180 degrees (non-inverting or inverting overall), never -360 or -720."""
    with np.errstate(divide="ignore"):
        gain_db = 20.0 * np.log10(np.abs(h))
    phase_deg = np.degrees(np.unwrap(np.angle(h)))
    magnitude = np.abs(h)
    finite = np.isfinite(magnitude) & np.isfinite(phase_deg)
    if finite.any():
        peak = int(np.argmax(np.where(finite, magnitude, -np.inf)))
        phase_deg = phase_deg + (wrap_deg(phase_deg[peak]) - phase_deg[peak])
    return gain_db, phase_deg


def wrap_deg(phase_deg: float) -> float:
    """``phase_deg`` wrapped into (-180, 180] degrees."""
    return float(phase_deg - 360.0 * math.ceil((phase_deg - 180.0) / 360.0))


def response_block(circuit: Circuit, *, as_built: dict, points: int = DEFAULT_POINTS,
                   f_start_hz: float | None = None, f_stop_hz: float | None = None) -> dict:
    """The response's ``response`` block (JSON-ready)."""
    start, stop = default_span(as_built.get("f_low_hz"), as_built.get("f_high_hz"))
    start = start if f_start_hz is None else float(f_start_hz)
    stop = stop if f_stop_hz is None else float(f_stop_hz)
    if start >= stop:  # only one limit given, on the wrong side of the default other one
        if f_start_hz is None:
            start = stop / 10 ** (2 * MARGIN_DECADES)
        else:
            stop = start * 10 ** (2 * MARGIN_DECADES)
    f = log_frequencies(start, stop, points)
    sol = solve(circuit, f)
    gain_db, phase_deg = gain_phase(sol.vout)
    stages = []
    for k, h in enumerate(sol.stage_out, start=1):
        g, ph = gain_phase(h)
        stages.append({"stage": k, "gain_db": g.tolist(), "phase_deg": ph.tolist()})
    return {
        "frequency_hz": f.tolist(),
        "gain_db": gain_db.tolist(),
        "phase_deg": phase_deg.tolist(),
        "stages": stages,
    }


def _finite(x) -> bool:
    return x is not None and math.isfinite(float(x))
