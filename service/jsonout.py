"""Strict JSON output: no NaN/Infinity literals ever, stable bytes for the same data.

Non-finite floats (an engine corner that does not exist) are written as ``null``.
Keys keep the order the schemas give them, so the same request gives the same bytes.
"""

from __future__ import annotations

import json
import math

import numpy as np


def _clean(value):
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    if isinstance(value, np.floating):
        v = float(value)
        return v if math.isfinite(v) else None
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, np.ndarray):
        return _clean(value.tolist())
    return value


def clean(value):
    """Return a JSON-ready copy: numpy scalars to Python, non-finite floats to None."""
    return _clean(value)


def dumps(value) -> str:
    """Serialise strictly (``allow_nan=False``) after :func:`clean`."""
    return json.dumps(_clean(value), allow_nan=False, ensure_ascii=False,
                      separators=(",", ":"))
