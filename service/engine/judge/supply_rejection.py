"""Supply ripple at the output: ``20 log10 |Vout / Vcc|`` of a single-supply circuit.

The ripple enters through the bias divider (VCC - r_top - VDIV), reaches VMID (directly or
through the follower) and from there every ``r_bias`` and ground leg returning to REF.
Optionally each op-amp unit's finite supply rejection adds ``Vcc 10**(-psrr_db/20)`` in
series with its + input (``OpAmp.psrr_db``; None = ideal). ``Vout`` is the voltage across
the load, as in the circuit model; the signal source is off (``Vs = 0``).

Computed with the MNA adjoint: ``Vout/Vcc = y^T b`` where ``b`` holds ``Vcc = 1`` and the
PSRR terms (:meth:`service.engine.solver.mna.MnaSystem.supply_rhs`). Negative dB = attenuation.
"""

from __future__ import annotations

import numpy as np

from service.engine.model.circuit import Circuit
from service.engine.solver.mna import build

#: Mains ripple and its full-wave rectified second harmonic, for 50 Hz and 60 Hz grids
#: (common practice).
RIPPLE_FREQUENCIES_HZ = (50.0, 60.0, 100.0, 120.0)


def ripple_frequencies(extra_hz: float | None) -> tuple[float, ...]:
    """The supply-rejection frequencies: the mains set plus ``extra_hz`` when given."""
    freqs = list(RIPPLE_FREQUENCIES_HZ)
    if extra_hz is not None and extra_hz not in freqs:
        freqs.append(float(extra_hz))
    return tuple(freqs)


def supply_gain(circuit: Circuit, f_hz) -> np.ndarray:
    """Complex ``Vout / Vcc`` at ``f_hz``; raises ValueError on a dual supply."""
    system = build(circuit)
    f = np.atleast_1d(np.asarray(f_hz, dtype=float))
    y = system.adjoint(f)
    return y @ system.supply_rhs()


def supply_rejection_block(circuit: Circuit, *, extra_hz: float | None = None) -> dict | None:
    """The response's ``supply_rejection`` block, or None on a dual supply."""
    if circuit.bias is None:
        return None
    freqs = list(ripple_frequencies(extra_hz))
    h = np.abs(supply_gain(circuit, freqs))
    with np.errstate(divide="ignore"):
        gain_db = 20.0 * np.log10(h)
    return {
        "frequency_hz": freqs,
        "gain_db": gain_db.tolist(),
        "psrr_db": circuit.opamp.psrr_db,
        "model": ("Vout/Vcc by modified nodal analysis of the circuit model; op-amp supply "
                  "sensitivity " + ("ideal (psrr_db not given)" if circuit.opamp.psrr_db is None
                                    else "as Vcc*10^(-psrr_db/20) in series with each + input")),
    }
