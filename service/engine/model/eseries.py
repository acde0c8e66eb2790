"""IEC 60063 preferred-number series (E6 ... E192) and rounding to them.

E6, E12 and E24 are tabulated (their values keep historical roundings that no formula
reproduces, e.g. 2.7, 3.3, 4.7, 8.2). E48, E96 and E192 are ``10**(i/N)`` rounded to three
significant figures, with the single exception the standard makes: 9.20 instead of 9.19 in
E192. Tables checked in tests/engine/test_eseries.py against the PyPI package ``eseries``.

References
----------
IEC 60063:2015, "Preferred number series for resistors and capacitors".
"""

from __future__ import annotations

import math
from functools import lru_cache

import numpy as np

E24_MANTISSAS = (
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
)


def _geometric(n: int) -> tuple[float, ...]:
    values = [round(10.0 ** (i / n), 2) for i in range(n)]
    if n == 192:
        values[185] = 9.20  # IEC 60063's one deviation from the formula in E192
    return tuple(values)


SERIES: dict[str, tuple[float, ...]] = {
    "E6": E24_MANTISSAS[::4],
    "E12": E24_MANTISSAS[::2],
    "E24": E24_MANTISSAS,
    "E48": _geometric(48),
    "E96": _geometric(96),
    "E192": _geometric(192),
}

RESISTOR_SERIES = ("E24", "E48", "E96", "E192")
CAPACITOR_SERIES = ("E6", "E12", "E24")


def _clean(mantissa: float, exponent: int) -> float:
    """``mantissa * 10**exponent`` as the float nearest its decimal spelling (4.7e-06)."""
    return float(f"{mantissa:.2f}e{exponent}")


@lru_cache(maxsize=256)
def _values_between(series: str, low: float, high: float) -> tuple:
    return tuple(values_between_uncached(series, low, high))


def values_between(series: str, low: float, high: float) -> np.ndarray:
    """All values of ``series`` in ``[low, high]`` (ascending)."""
    return np.array(_values_between(series, low, high))


def values_between_uncached(series: str, low: float, high: float) -> list:
    mantissas = SERIES[series]
    out = []
    for exponent in range(math.floor(math.log10(low)) - 1, math.floor(math.log10(high)) + 1):
        for m in mantissas:
            v = _clean(m, exponent)
            if low <= v <= high:
                out.append(v)
    return out


def neighbours(series: str, value: float) -> tuple[float, float]:
    """The series values just below-or-equal and just above-or-equal ``value``."""
    if not value > 0 or not math.isfinite(value):
        raise ValueError(f"value must be positive and finite, got {value!r}")
    exponent = math.floor(math.log10(value))
    candidates = [_clean(m, e) for e in (exponent - 1, exponent, exponent + 1)
                  for m in SERIES[series]]
    below = max(v for v in candidates if v <= value * (1 + 1e-12))
    above = min(v for v in candidates if v >= value * (1 - 1e-12))
    return below, above


def nearest(series: str, value: float) -> float:
    """The series value nearest ``value`` on a logarithmic scale."""
    below, above = neighbours(series, value)
    return below if math.log(value / below) <= math.log(above / value) else above


def round_up(series: str, value: float) -> float:
    return neighbours(series, value)[1]


def round_down(series: str, value: float) -> float:
    return neighbours(series, value)[0]


def in_series(series: str, value: float) -> bool:
    """True when ``value`` is a member of ``series`` (to 1e-9 relative)."""
    exponent = math.floor(math.log10(value) + 1e-12)
    mantissa = value / 10.0 ** exponent
    return any(abs(mantissa - m) <= 1e-9 * m for m in SERIES[series]) or any(
        abs(mantissa / 10 - m) <= 1e-9 * m for m in SERIES[series])
