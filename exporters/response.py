"""Frequency response of a circuit for the exports: band edges, analysis range, table.

Everything comes from the engine's nodal solution (``service.engine.solver.chain.solve``) and its
corner finder (``service.engine.solver.corners.find_band``); nothing here re-derives the model.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from service.engine.model.circuit import Circuit
from service.engine.solver.chain import solve
from service.engine.solver.corners import find_band

#: Decades of a DC-coupled response shown below its high corner (no low corner exists).
DC_COUPLED_DECADES_BELOW = 5


@dataclass(frozen=True)
class BandEdges:
    """Midband gain (ratio) and -3 dB corners (Hz; ``f_low_hz`` None when DC coupled)."""

    gain: float
    f_low_hz: float | None
    f_high_hz: float


def band_edges(circuit: Circuit) -> BandEdges:
    """Midband gain and corners of the as-built circuit (engine corner finder)."""
    band = find_band(lambda f: np.abs(solve(circuit, f).vout), 1)
    f_low = float(band.f_low_hz[0])
    return BandEdges(gain=float(band.gain[0]),
                     f_low_hz=f_low if math.isfinite(f_low) else None,
                     f_high_hz=float(band.f_high_hz[0]))


def edges_from_report(as_built: dict | None) -> BandEdges | None:
    """The corners a design response reports (``performance.as_built``), if present."""
    if not as_built or not as_built.get("f_high_hz"):
        return None
    return BandEdges(gain=float(as_built["gain"]), f_low_hz=as_built.get("f_low_hz"),
                     f_high_hz=float(as_built["f_high_hz"]))


def analysis_range(edges: BandEdges) -> tuple[float, float]:
    """Whole decades from at least one decade below f_low to one decade above f_high."""
    f_high_dec = math.ceil(math.log10(edges.f_high_hz)) + 1
    if edges.f_low_hz:
        f_low_dec = math.floor(math.log10(edges.f_low_hz)) - 1
    else:
        f_low_dec = f_high_dec - 2 - DC_COUPLED_DECADES_BELOW
    return 10.0 ** f_low_dec, 10.0 ** f_high_dec


def response_table(circuit: Circuit, f_start_hz: float, f_stop_hz: float,
                   per_decade: int = 20):
    """``(f_hz, gain_db, phase_deg)`` of Vout/Vs on a log grid (phase unwrapped)."""
    decades = math.log10(f_stop_hz / f_start_hz)
    f_hz = np.logspace(math.log10(f_start_hz), math.log10(f_stop_hz),
                       int(round(decades * per_decade)) + 1)
    h = solve(circuit, f_hz).vout
    gain_db = 20.0 * np.log10(np.abs(h))
    phase_deg = np.degrees(np.unwrap(np.angle(h)))
    return f_hz, gain_db, phase_deg
