"""EDA value notation and natural reference order.

``eda_value(4.7e-6) == "4.7u"``: the SI prefix letter replaces the unit, as KiCad's
schematic values and most BOMs write them ("10k", "4.7u", "100n", "1M" for mega-ohm in KiCad
notation). SPICE decks never use this notation (``1M`` is milli in SPICE); see
:func:`spice_number`.
"""

from __future__ import annotations

import math
import re

#: SI prefixes from pico to giga; "u" stands for micro (ASCII, as KiCad writes it).
_PREFIXES = ((1e9, "G"), (1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "u"),
             (1e-9, "n"), (1e-12, "p"))


def eda_value(x: float, digits: int = 3) -> str:
    """Format ``x`` with an SI prefix letter and up to ``digits`` significant digits.

    >>> eda_value(10e3), eda_value(4.7e-6), eda_value(100e-9), eda_value(1.21e3)
    ('10k', '4.7u', '100n', '1.21k')
    """
    if not math.isfinite(x) or x <= 0:
        raise ValueError(f"component value must be finite and > 0, got {x!r}")
    rounded = float(f"{x:.{digits}g}")  # round first, so 999.99k becomes 1M, not 1000k
    for scale, letter in _PREFIXES:
        if rounded >= scale * (1 - 1e-12) or scale == _PREFIXES[-1][0]:
            text = f"{rounded / scale:.{digits}g}"
            if "e" in text:  # only beyond giga: write the plain mantissa
                text = f"{rounded / scale:.0f}"
            return text + letter
    raise AssertionError("unreachable")


def spice_number(x: float) -> str:
    """A plain SPICE number: digits and an exponent, never a scale suffix (``1e-06``).

    Twelve significant digits keep the deck equal to the circuit to far below any tolerance.
    """
    if not math.isfinite(x):
        raise ValueError(f"SPICE numbers must be finite, got {x!r}")
    mant, exp = f"{x:.11e}".split("e")
    mant = mant.rstrip("0").rstrip(".")
    return f"{mant}e{int(exp):+03d}"


def natural_key(ref: str):
    """Sort key that orders embedded numbers numerically: R1, R2, R10 (not R1, R10, R2)."""
    return [int(tok) if tok.isdigit() else tok for tok in re.split(r"(\d+)", ref)]


def join_refs(refs) -> str:
    """References in natural order joined by a bare comma, as KiCad's BOM export writes them."""
    return ",".join(sorted(refs, key=natural_key))
