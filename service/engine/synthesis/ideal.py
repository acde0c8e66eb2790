"""The textbook cascade of n identical single-pole stages ("ideal" figures).

Notes
-----
For n identical stages of gain ``g = G**(1/n)``:

* each stage is a single-pole low-pass with corner ``f_s = GBW / noise_gain``
  (noise gain ``g`` for a non-inverting stage, ``1 + g`` for an inverting one);
* n such poles in cascade fall to -3 dB at ``f_s * sqrt(2**(1/n) - 1)``, because
  ``|1 / (1 + j f/f_s)|**(2n) = 1/2`` gives ``(f/f_s)**2 = 2**(1/n) - 1`` [1]_;
* by the same argument n identical first-order high-pass sections with corner ``f_l``
  reach -3 dB at ``f_l / sqrt(2**(1/n) - 1)``, so each stage's low corner must sit at
  ``f_low * sqrt(2**(1/n) - 1)`` for the cascade to reach ``f_low``;
* for the non-inverting case the cascade bandwidth ``GBW G**(-1/n) sqrt(2**(1/n) - 1)`` is
  largest near ``n = 2 ln G`` (for large n, ``sqrt(2**(1/n)-1) ~ sqrt(ln2 / n)`` and
  ``d/dn [-(ln G)/n - (ln n)/2] = 0`` gives ``n = 2 ln G``).

References
----------
.. [1] Common practice: the bandwidth-shrinkage factor of cascaded identical
       first-order stages, found in analog-design handbooks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from service.engine.model.circuit import INVERTING

MAX_STAGES = 12


def shrinkage(n: int | float) -> float:
    """``sqrt(2**(1/n) - 1)``: cascade -3 dB bandwidth over one stage's (single poles)."""
    return math.sqrt(2.0 ** (1.0 / n) - 1.0)


def noise_gain(stage_gain: float, topology: str) -> float:
    """Noise gain ``1/beta`` of one stage: ``g`` (non-inverting) or ``1 + g`` (inverting)."""
    return stage_gain + 1.0 if topology == INVERTING else stage_gain


@dataclass(frozen=True)
class IdealCascade:
    stage_count: int
    stage_gain: float
    stage_f_high_hz: float
    stage_f_low_hz: float
    f_high_hz: float
    f_low_hz: float
    bandwidth_hz: float
    single_stage_f_high_hz: float
    bandwidth_fraction: float

    def to_dict(self) -> dict:
        return {
            "stage_gain": self.stage_gain,
            "stage_f_high_hz": self.stage_f_high_hz,
            "stage_f_low_hz": self.stage_f_low_hz,
            "f_high_hz": self.f_high_hz,
            "f_low_hz": self.f_low_hz,
            "bandwidth_hz": self.bandwidth_hz,
            "single_stage_f_high_hz": self.single_stage_f_high_hz,
            "bandwidth_fraction": self.bandwidth_fraction,
        }


def ideal_cascade(gain: float, f_low_hz: float, gbw_hz: float, n: int,
                  topology: str) -> IdealCascade:
    """Ideal figures of ``n`` identical stages sharing ``gain`` (see module Notes)."""
    g = gain ** (1.0 / n)
    k = shrinkage(n)
    stage_f_high = gbw_hz / noise_gain(g, topology)
    f_high = stage_f_high * k
    stage_f_low = f_low_hz * k
    single = gbw_hz / noise_gain(gain, topology)
    # No band at all when the stage's low corner reaches its high corner: no fraction.
    stage_band = stage_f_high - stage_f_low
    fraction = (f_high - f_low_hz) / stage_band if stage_band > 0 else math.nan
    return IdealCascade(
        stage_count=n,
        stage_gain=g,
        stage_f_high_hz=stage_f_high,
        stage_f_low_hz=stage_f_low,
        f_high_hz=f_high,
        f_low_hz=f_low_hz,
        bandwidth_hz=f_high - f_low_hz,
        single_stage_f_high_hz=single,
        bandwidth_fraction=fraction,
    )


def optimal_stage_count(gain: float, topology: str) -> float:
    """The real n that maximises the ideal cascade bandwidth (golden-section on [1, 60])."""

    def bw(n: float) -> float:
        return shrinkage(n) / noise_gain(gain ** (1.0 / n), topology)

    lo, hi = 1.0, 60.0
    phi = (math.sqrt(5.0) - 1.0) / 2.0
    a, b = hi - phi * (hi - lo), lo + phi * (hi - lo)
    for _ in range(100):
        if bw(a) > bw(b):
            hi, b = b, a
            a = hi - phi * (hi - lo)
        else:
            lo, a = a, b
            b = lo + phi * (hi - lo)
    return 0.5 * (lo + hi)


def required_gbw_hz(gain: float, f_high_hz: float, topology: str,
                    max_stages: int = MAX_STAGES) -> tuple[float, int]:
    """Least op-amp GBW (Hz) that reaches ``f_high_hz`` ideally, and the n that needs it."""
    best = min(
        (f_high_hz * noise_gain(gain ** (1.0 / n), topology) / shrinkage(n), n)
        for n in range(1, max_stages + 1)
    )
    return best
