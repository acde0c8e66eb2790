"""An organisation's stocked passives and the matching of BOM lines to them (pure).

A :class:`PartsLibrary` holds stocked resistors and capacitors, each with its internal part
number (``service/parts_library.py`` reads and validates the file named by
``GAINCHAIN_PARTS_LIBRARY``). A board part matches a stocked part when all of these hold:

* kind: a resistor (``R`` reference) or a capacitor (``C``);
* value: equal to 1e-9 relative;
* package: the chip size (``0603``, ``0805``, ``1206``) of a chip part, or the can size
  ``<diameter>x<height>`` in mm (``6.3x5.4``) of an aluminium electrolytic, as in its
  footprint name; the full footprint name (``Capacitor_SMD:CP_Elec_6.3x5.4``) is accepted too;
* dielectric (capacitors): the same class (``C0G`` = ``NP0`` = ``C0G/NP0``; ``aluminium
  electrolytic``; ``aluminium electrolytic bipolar`` for the non-polarised kind);
* tolerance: the stocked part's is equal or tighter;
* voltage rating (capacitors): the stocked part's is equal or higher.

Among several matches the cheapest priced one wins, then the lowest internal part number
(deterministic). Costs are kept as exact decimals (:class:`decimal.Decimal` of the number's
shortest spelling), so ``3 x 0.0012`` is ``0.0036``.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from decimal import Decimal

RESISTOR = "resistor"
CAPACITOR = "capacitor"
KINDS = (RESISTOR, CAPACITOR)

#: Dielectric spellings a library may use, by class (common practice: EIA class names;
#: C0G is also written NP0).
DIELECTRICS = {
    "C0G": "C0G", "NP0": "C0G", "C0G/NP0": "C0G",
    "X5R": "X5R", "X6S": "X6S", "X7R": "X7R", "X7S": "X7S", "X8R": "X8R", "Y5V": "Y5V",
    "aluminium electrolytic": "AL", "aluminum electrolytic": "AL", "Al electrolytic": "AL",
    "aluminium electrolytic bipolar": "AL-BP", "aluminum electrolytic bipolar": "AL-BP",
    "Al electrolytic bipolar": "AL-BP",
}
_DIELECTRIC_KEYS = {k.lower(): v for k, v in DIELECTRICS.items()}

_CHIP = re.compile(r"_(\d{4})_\d{4}Metric$")
_CAN = re.compile(r"CP_Elec_([0-9.]+x[0-9.]+)$")
_NUMBER = re.compile(r"^\s*([0-9.]+(?:[eE][-+]?\d+)?)")


def dielectric_class(text: str | None) -> str | None:
    """The class of a dielectric spelling (``"NP0"`` -> ``"C0G"``), None when unknown."""
    if not text:
        return None
    return _DIELECTRIC_KEYS.get(text.strip().lower())


def money(x) -> Decimal:
    """An exact decimal of a price given as a JSON number (its shortest spelling)."""
    return Decimal(repr(float(x))) if not isinstance(x, Decimal) else x


@dataclass(frozen=True)
class StockPart:
    kind: str
    value: float
    tolerance_pct: float
    package: str
    internal_pn: str
    dielectric: str | None = None
    voltage_v: float | None = None
    manufacturer: str = ""
    mpn: str = ""
    unit_cost: float | None = None

    def to_dict(self) -> dict:
        return {"kind": self.kind, "value": self.value, "tolerance_pct": self.tolerance_pct,
                "package": self.package, "dielectric": self.dielectric,
                "voltage_v": self.voltage_v, "internal_pn": self.internal_pn,
                "manufacturer": self.manufacturer, "mpn": self.mpn,
                "unit_cost": self.unit_cost}


@dataclass(frozen=True)
class PartsLibrary:
    currency: str
    parts: tuple[StockPart, ...]

    @property
    def has_prices(self) -> bool:
        return any(p.unit_cost is not None for p in self.parts)

    def values(self, kind: str, *, max_tolerance_pct: float | None = None) -> tuple:
        """Distinct stocked values of a kind, ascending (optionally tolerance-limited)."""
        return tuple(sorted({p.value for p in self.parts if p.kind == kind and (
            max_tolerance_pct is None or p.tolerance_pct <= max_tolerance_pct + 1e-9)}))

    def to_dict(self) -> dict:
        return {"currency": self.currency, "parts": [p.to_dict() for p in self.parts]}


def package_of(footprint: str) -> str | None:
    """``Resistor_SMD:R_0603_1608Metric`` -> ``0603``; ``...CP_Elec_6.3x5.4`` -> ``6.3x5.4``."""
    for pattern in (_CHIP, _CAN):
        m = pattern.search(footprint)
        if m:
            return m.group(1)
    return None


def _number(text: str) -> float | None:
    m = _NUMBER.match(text or "")
    return float(m.group(1)) if m else None


def match(part, library: PartsLibrary | None) -> StockPart | None:
    """The stocked part for a board part (``exporters.board.Part``), or None."""
    if library is None:
        return None
    kind = {"R": RESISTOR, "C": CAPACITOR}.get(part.prefix)
    if kind is None or part.value_si is None:
        return None
    package = package_of(part.footprint)
    tolerance = _number(part.field("Tolerance"))
    voltage = _number(part.field("Voltage"))
    dielectric = dielectric_class(part.field("Dielectric"))
    found = []
    for s in library.parts:
        if s.kind != kind or abs(s.value / part.value_si - 1.0) > 1e-9:
            continue
        if s.package not in (package, part.footprint):
            continue
        if tolerance is not None and s.tolerance_pct > tolerance + 1e-9:
            continue
        if kind == CAPACITOR:
            if dielectric_class(s.dielectric) != dielectric:
                continue
            if voltage is not None and (s.voltage_v is None or s.voltage_v < voltage - 1e-9):
                continue
        found.append(s)
    if not found:
        return None
    return min(found, key=lambda s: (s.unit_cost is None, s.unit_cost or 0.0, s.internal_pn))
