"""Midband gain and -3 dB corners of sampled magnitude responses, vectorised over a batch.

Method (after python-control's ``bandwidth``: bracket on a grid, then refine to tolerance):

1. evaluate ``|H|`` on a log grid of ``GRID_POINTS_PER_DECADE`` points per decade over
   ``F_MIN_HZ .. F_MAX_HZ`` (1 mHz .. 10 GHz, the search range of the circuit model);
2. midband gain = the maximum of ``|H|``: grid maximum refined by successive parabolic
   interpolation in (log f, log |H|);
3. ``f_low`` / ``f_high`` = the -3 dB crossings (``|H| = max / sqrt(2)``) nearest the maximum,
   below and above it; ``nan`` when the response never falls that far (a DC-coupled cascade
   has no low corner). Each bracket is refined by the Illinois variant of regula falsi on
   ``log |H|`` against ``log f``, which converges super-linearly on these smooth curves.

All functions take ``evaluate(f_hz) -> |H|`` where ``f_hz`` has shape ``(B, M)`` and the
result has the same shape (row b is batch member b).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

F_MIN_HZ = 1e-3
F_MAX_HZ = 1e10
#: 24 points per decade brackets every crossing within 10 % in frequency; with smooth,
#: low-order responses the refinement below then converges in a handful of steps.
GRID_POINTS_PER_DECADE = 24
#: Illinois steps: from a 10 % bracket, 6 steps reach ~1e-13 relative on these curves
#: (measured against scipy.optimize.brentq at xtol 1e-12 on a two-stage design).
REFINE_STEPS = 6
#: Parabolic refinement steps of the maximum (2 give ~1e-13 relative on the peak gain).
PEAK_STEPS = 2
#: A -3 dB corner is where |H| = max * 10**(-3.0103/20) = max / sqrt(2).
HALF_POWER = 1.0 / np.sqrt(2.0)
#: Numerical slack of the "3 dB below midband outside the band" rule, in dB.
FLATNESS_SLACK_DB = 0.01


def log_grid(f_min_hz: float = F_MIN_HZ, f_max_hz: float = F_MAX_HZ,
             per_decade: int = GRID_POINTS_PER_DECADE) -> np.ndarray:
    decades = np.log10(f_max_hz) - np.log10(f_min_hz)
    count = int(round(decades * per_decade)) + 1
    return np.logspace(np.log10(f_min_hz), np.log10(f_max_hz), count)


GRID_HZ = log_grid()


@dataclass(frozen=True)
class Band:
    """Per batch member: midband gain (ratio), corner frequencies (Hz, nan if none),
    and the largest gain outside [f_low, f_high] relative to midband (dB, -inf if none)."""

    gain: np.ndarray
    f_low_hz: np.ndarray
    f_high_hz: np.ndarray
    peak_hz: np.ndarray
    outside_max_db: np.ndarray


def find_band(evaluate, batch: int, grid_hz: np.ndarray = GRID_HZ) -> Band:
    """Midband gain and -3 dB corners of ``batch`` responses."""
    f = np.broadcast_to(grid_hz, (batch, grid_hz.size))
    mag = evaluate(f)
    rows = np.arange(batch)
    k = np.argmax(mag, axis=1)
    peak_f, peak = _refine_peak(evaluate, grid_hz, mag, k)
    thr = peak * HALF_POWER
    below = mag < thr[:, None]
    idx = np.arange(grid_hz.size)[None, :]
    low_mask = below & (idx < k[:, None])
    high_mask = below & (idx > k[:, None])
    has_low = low_mask.any(axis=1)
    has_high = high_mask.any(axis=1)
    j_low = np.where(has_low, np.max(np.where(low_mask, idx, -1), axis=1), 0)
    j_high = np.where(has_high, np.min(np.where(high_mask, idx, grid_hz.size), axis=1), 1)
    j_high = np.minimum(j_high, grid_hz.size - 1)
    # Brackets: low crossing in [j_low, j_low + 1], high crossing in [j_high - 1, j_high].
    lo_a = j_low
    lo_b = np.minimum(j_low + 1, grid_hz.size - 1)
    hi_a = np.maximum(j_high - 1, 0)
    hi_b = j_high
    x_a = np.log(np.concatenate([grid_hz[lo_a], grid_hz[hi_a]]))
    x_b = np.log(np.concatenate([grid_hz[lo_b], grid_hz[hi_b]]))
    y_a = np.log(np.concatenate([mag[rows, lo_a], mag[rows, hi_a]])) - np.log(np.tile(thr, 2))
    y_b = np.log(np.concatenate([mag[rows, lo_b], mag[rows, hi_b]])) - np.log(np.tile(thr, 2))

    def g(x):
        fx = np.exp(x)
        both = evaluate(np.stack([fx[:batch], fx[batch:]], axis=1))  # (B, 2)
        return np.log(np.concatenate([both[:, 0], both[:, 1]])) - np.log(np.tile(thr, 2))

    roots = _illinois(g, x_a, x_b, y_a, y_b)
    f_low = np.where(has_low, np.exp(roots[:batch]), np.nan)
    f_high = np.where(has_high, np.exp(roots[batch:]), np.nan)
    lo_edge = np.where(has_low, f_low, 0.0)
    hi_edge = np.where(has_high, f_high, np.inf)
    outside = (f < lo_edge[:, None]) | (f > hi_edge[:, None])
    with np.errstate(divide="ignore"):
        rel = np.where(outside, mag, 0.0).max(axis=1) / peak
        outside_db = 20.0 * np.log10(rel)
    return Band(gain=peak, f_low_hz=f_low, f_high_hz=f_high, peak_hz=peak_f,
                outside_max_db=outside_db)


def _refine_peak(evaluate, grid_hz, mag, k):
    """Successive parabolic interpolation of log|H| against log f around the grid maximum."""
    n = grid_hz.size
    rows = np.arange(mag.shape[0])
    k = np.clip(k, 1, n - 2)
    x = np.log(np.stack([grid_hz[k - 1], grid_hz[k], grid_hz[k + 1]], axis=1))
    y = np.log(np.stack([mag[rows, k - 1], mag[rows, k], mag[rows, k + 1]], axis=1))
    best_x = x[:, 1].copy()
    best_y = y[:, 1].copy()
    for _ in range(PEAK_STEPS):
        x0, x1, x2 = x[:, 0], x[:, 1], x[:, 2]
        y0, y1, y2 = y[:, 0], y[:, 1], y[:, 2]
        num = (x1 - x0) ** 2 * (y1 - y2) - (x1 - x2) ** 2 * (y1 - y0)
        den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0)
        ok = np.abs(den) > 1e-300
        with np.errstate(divide="ignore", invalid="ignore"):
            xv = np.where(ok, x1 - 0.5 * num / np.where(ok, den, 1.0), x1)
        xv = np.clip(xv, x0, x2)
        yv = np.log(evaluate(np.exp(xv)[:, None])[:, 0])
        better = yv > best_y
        best_x = np.where(better, xv, best_x)
        best_y = np.where(better, yv, best_y)
        # Keep the three best-bracketing points: replace the end on the far side.
        left = xv < x1
        new_x = np.where(left[:, None],
                         np.stack([x0, xv, x1], 1), np.stack([x1, xv, x2], 1))
        new_y = np.where(left[:, None],
                         np.stack([y0, yv, y1], 1), np.stack([y1, yv, y2], 1))
        # Only accept the step where the new point is the highest (a proper bracket).
        accept = (yv >= y1)[:, None]
        x = np.where(accept, new_x, x)
        y = np.where(accept, new_y, y)
    peak = np.maximum(np.exp(best_y), mag.max(axis=1))
    peak_f = np.where(np.exp(best_y) >= mag.max(axis=1), np.exp(best_x), grid_hz[np.argmax(mag, 1)])
    return peak_f, peak


def _illinois(g, a, b, ga, gb):
    """Vectorised Illinois regula falsi for roots of ``g`` bracketed by [a, b]."""
    side = np.zeros_like(a)
    # Rows without a sign change (no crossing; masked by the caller) must not wander off.
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    for _ in range(REFINE_STEPS):
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            c = np.where(gb != ga, (a * gb - b * ga) / (gb - ga), 0.5 * (a + b))
        c = np.where(np.isfinite(c), c, 0.5 * (a + b))
        c = np.clip(c, lo, hi)
        gc = g(c)
        same_as_b = np.sign(gc) == np.sign(gb)
        # Replace b by c where g(c) has b's sign; halve the stale end value if it repeats.
        a_new = np.where(same_as_b, a, b)
        ga_new = np.where(same_as_b, np.where(side == 1, ga * 0.5, ga), gb)
        side = np.where(same_as_b, 1, -1)
        a, ga = a_new, ga_new
        b, gb = c, gc
    return b


def find_band_one(magnitude_at, grid_hz: np.ndarray = GRID_HZ) -> Band:
    """:func:`find_band` for one response, the refinements run on Python floats.

    ``magnitude_at(f)`` takes an array of frequencies (the grid) or one float (a refinement
    step) and returns ``|H|`` of the same shape. Same grid, brackets, parabolic steps and
    Illinois steps as the batched search, so both agree to rounding (the tests compare
    them); a single circuit's corners cost a dozen point solves instead of a dozen
    small-array passes.
    """
    mag = np.asarray(magnitude_at(grid_hz), dtype=float)
    n = grid_hz.size
    k = int(np.argmax(mag))
    peak_f, peak = _refine_peak_one(magnitude_at, grid_hz, mag, k)
    thr = peak * HALF_POWER
    log_thr = _log(thr)
    below = mag < thr

    def g(x: float) -> float:
        return _log(magnitude_at(math.exp(x))) - log_thr

    def root(a: int, b: int) -> float:
        xa, xb = math.log(grid_hz[a]), math.log(grid_hz[b])
        return math.exp(_illinois_one(g, xa, xb, _log(mag[a]) - log_thr,
                                      _log(mag[b]) - log_thr))

    lows = np.flatnonzero(below[:k])
    highs = np.flatnonzero(below[k + 1:])
    f_low = root(int(lows[-1]), min(int(lows[-1]) + 1, n - 1)) if lows.size else math.nan
    if highs.size:
        j = min(k + 1 + int(highs[0]), n - 1)
        f_high = root(max(j - 1, 0), j)
    else:
        f_high = math.nan
    lo_edge = f_low if lows.size else 0.0
    hi_edge = f_high if highs.size else math.inf
    outside = (grid_hz < lo_edge) | (grid_hz > hi_edge)
    rel = float(np.max(mag, where=outside, initial=0.0)) / peak
    outside_db = 20.0 * math.log10(rel) if rel > 0.0 else -math.inf
    return Band(gain=np.array([peak]), f_low_hz=np.array([f_low]),
                f_high_hz=np.array([f_high]), peak_hz=np.array([peak_f]),
                outside_max_db=np.array([outside_db]))


def _refine_peak_one(magnitude_at, grid_hz, mag, k):
    """:func:`_refine_peak` for one response, on floats."""
    n = grid_hz.size
    k = min(max(k, 1), n - 2)
    x = [math.log(grid_hz[k - 1]), math.log(grid_hz[k]), math.log(grid_hz[k + 1])]
    y = [_log(mag[k - 1]), _log(mag[k]), _log(mag[k + 1])]
    best_x, best_y = x[1], y[1]
    for _ in range(PEAK_STEPS):
        x0, x1, x2 = x
        y0, y1, y2 = y
        num = (x1 - x0) ** 2 * (y1 - y2) - (x1 - x2) ** 2 * (y1 - y0)
        den = (x1 - x0) * (y1 - y2) - (x1 - x2) * (y1 - y0)
        xv = x1 - 0.5 * num / den if abs(den) > 1e-300 else x1
        xv = min(max(xv, x0), x2)
        yv = _log(magnitude_at(math.exp(xv)))
        if yv > best_y:
            best_x, best_y = xv, yv
        if yv >= y1:  # a proper bracket: keep the three points around the new best
            x, y = ([x0, xv, x1], [y0, yv, y1]) if xv < x1 else ([x1, xv, x2], [y1, yv, y2])
    top = float(mag.max())
    if math.exp(best_y) >= top:
        return math.exp(best_x), math.exp(best_y)
    return float(grid_hz[int(np.argmax(mag))]), top


def _illinois_one(g, a: float, b: float, ga: float, gb: float) -> float:
    """:func:`_illinois` for one bracket, on floats."""
    side = 0
    lo, hi = min(a, b), max(a, b)
    for _ in range(REFINE_STEPS):
        c = (a * gb - b * ga) / (gb - ga) if gb != ga else 0.5 * (a + b)
        if not math.isfinite(c):
            c = 0.5 * (a + b)
        c = min(max(c, lo), hi)
        gc = g(c)
        if _sign(gc) == _sign(gb):  # replace b by c; halve the stale end value if it repeats
            ga = ga * 0.5 if side == 1 else ga
            side = 1
        else:
            a, ga = b, gb
            side = -1
        b, gb = c, gc
    return b


def _log(x) -> float:
    """``ln x`` as numpy gives it: ``-inf`` at 0, nan for nan."""
    x = float(x)
    if x > 0.0:
        return math.log(x)
    return -math.inf if x == 0.0 else math.nan


def _sign(x: float) -> float:
    """``numpy.sign`` of one float (nan for nan, which equals nothing)."""
    if x != x:
        return math.nan
    return float((x > 0.0) - (x < 0.0))
