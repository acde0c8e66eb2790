"""Op-amp units a circuit does not use, and how they are wired on the board.

A package of ``channels_per_package`` units holds the signal stages in signal order, then
the VMID follower (when buffered); the units left over in the last package are *spares*.
An unused unit must not be left floating (its output may rail or oscillate, and it draws
supply current either way): it is tied to REF with a defined noise gain (common practice).

* A unity-gain-stable part (``min_stable_gain <= 1``): a follower of REF, + input on REF,
  - input tied to the output (noise gain 1).
* A part stable only at a noise gain ``g_min > 1``: a non-inverting amplifier of REF,
  + input on REF, ``r_feedback_ohm`` from the output to the - input and ``r_gain_ohm`` from
  the - input to REF, so its noise gain ``1 + Rf/Rg`` is at least ``g_min`` at every
  frequency (resistive feedback: beta does not depend on frequency). The resistors are E24
  values around ``SPARE_R_GAIN_OHM``; with REF on both ends nothing flows in them at DC.

The exporters draw these parts (two resistors per spare of a decompensated part) and the
judges check the spare units' stability with the same numbers.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from service.engine.model import eseries
from service.engine.model.circuit import Circuit

#: The spare amplifier's gain resistor (the impedance level of a circuit that carries no
#: signal: high enough to load the output lightly, low enough for stray capacitance).
SPARE_R_GAIN_OHM = 10_000.0
#: Series of the spare amplifier's resistors (stocked by every organisation).
SPARE_SERIES = "E24"


@dataclass(frozen=True)
class SpareUnit:
    """One unused unit: ``index`` counts units from 0 in package order (stages, follower,
    spares); ``r_feedback_ohm``/``r_gain_ohm`` are None for a follower."""

    index: int
    r_feedback_ohm: float | None
    r_gain_ohm: float | None

    @property
    def noise_gain(self) -> float:
        """``1 + Rf/Rg`` (1 for a follower)."""
        if self.r_feedback_ohm is None:
            return 1.0
        return 1.0 + self.r_feedback_ohm / self.r_gain_ohm


def spare_count(circuit: Circuit) -> int:
    """Units left over in the last package: ``ceil(u / c) c - u``."""
    used = circuit.opamp_units
    channels = circuit.opamp.channels_per_package
    return math.ceil(used / channels) * channels - used


def spare_network(min_stable_gain: float) -> tuple[float | None, float | None]:
    """``(r_feedback_ohm, r_gain_ohm)`` of a spare unit (module docstring): ``(None, None)``
    for a unity-gain-stable part; else ``Rg = SPARE_R_GAIN_OHM`` and the smallest E24 ``Rf``
    with ``1 + Rf/Rg >= min_stable_gain``."""
    if min_stable_gain <= 1.0:
        return None, None
    r_gain = SPARE_R_GAIN_OHM
    r_feedback = eseries.round_up(SPARE_SERIES, (min_stable_gain - 1.0) * r_gain)
    return r_feedback, r_gain


def spare_units(circuit: Circuit) -> list[SpareUnit]:
    """The spare units of the circuit's packages, in package order."""
    first = circuit.opamp_units
    rf, rg = spare_network(circuit.opamp.min_stable_gain)
    return [SpareUnit(first + i, rf, rg) for i in range(spare_count(circuit))]
