"""An organisation's stocked parts and the matching of BOM lines to them (pure).

A :class:`PartsLibrary` holds stocked resistors and capacitors (and, optionally, op-amps and
connectors), each with its internal part number (``service/parts_library.py`` reads and
validates the file named by ``GAINCHAIN_PARTS_LIBRARY``). A resistor or capacitor of the
board matches a stocked part when all of these hold:

* kind: a resistor (``R`` reference) or a capacitor (``C``);
* value: equal to 1e-9 relative;
* package: the chip size (``0603``, ``0805``, ``1206``) of a chip part, or the can size
  ``<diameter>x<height>`` in mm (``6.3x5.4``) of an aluminium electrolytic, as in its
  footprint name; the full footprint name (``Capacitor_SMD:CP_Elec_6.3x5.4``) is accepted too;
* dielectric (capacitors): the same class (``C0G`` = ``NP0`` = ``C0G/NP0``; ``aluminium
  electrolytic``; ``aluminium electrolytic bipolar`` for the non-polarised kind);
* tolerance: the stocked part's is equal or tighter;
* voltage rating (capacitors): the stocked part's is equal or higher.

An op-amp package (``U``) matches a stocked ``opamp`` whose ``mpn`` equals the op-amp's MPN,
or whose ``opamp_id`` equals its catalog id, in the same package; a connector (``J``) matches
a stocked ``connector`` of the same package. The package of those is the footprint's name
after the library prefix (``SOIC-8_3.9x4.9mm_P1.27mm``, ``PinHeader_1x02_P2.54mm_Vertical``),
or the full footprint.

Among several matches the cheapest priced one wins, then the lowest internal part number
(deterministic). Costs are kept as exact decimals (:class:`decimal.Decimal` of the number's
shortest spelling), so ``3 x 0.0012`` is ``0.0036``.
"""

from __future__ import annotations

import bisect
import re
from dataclasses import dataclass
from decimal import Decimal
from functools import cached_property

RESISTOR = "resistor"
CAPACITOR = "capacitor"
OPAMP = "opamp"
CONNECTOR = "connector"
KINDS = (RESISTOR, CAPACITOR, OPAMP, CONNECTOR)
#: Board reference prefix -> library kind.
KIND_OF_PREFIX = {"R": RESISTOR, "C": CAPACITOR, "U": OPAMP, "J": CONNECTOR}

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
    package: str
    internal_pn: str
    value: float | None = None  # ohm or F (resistors and capacitors)
    tolerance_pct: float | None = None  # resistors and capacitors
    dielectric: str | None = None  # capacitors
    voltage_v: float | None = None  # capacitors
    opamp_id: str | None = None  # op-amps: the catalog id matched when there is no MPN
    manufacturer: str = ""
    mpn: str = ""
    unit_cost: float | None = None

    def to_dict(self) -> dict:
        return {"kind": self.kind, "value": self.value, "tolerance_pct": self.tolerance_pct,
                "package": self.package, "dielectric": self.dielectric,
                "voltage_v": self.voltage_v, "opamp_id": self.opamp_id,
                "internal_pn": self.internal_pn, "manufacturer": self.manufacturer,
                "mpn": self.mpn, "unit_cost": self.unit_cost}


@dataclass(frozen=True)
class PartsLibrary:
    currency: str
    parts: tuple[StockPart, ...]

    @property
    def has_prices(self) -> bool:
        return any(p.unit_cost is not None for p in self.parts)

    def values(self, kind: str, *, max_tolerance_pct: float | None = None) -> tuple:
        """Distinct stocked values of a kind, ascending (optionally tolerance-limited)."""
        return tuple(sorted({p.value for p in self.parts if p.kind == kind and
                             p.value is not None and (max_tolerance_pct is None or
                                                      p.tolerance_pct <= max_tolerance_pct
                                                      + 1e-9)}))

    def to_dict(self) -> dict:
        return {"currency": self.currency, "parts": [p.to_dict() for p in self.parts]}

    @cached_property
    def _index(self) -> dict:
        """(kind, package) -> (ascending values, parts in that order)."""
        groups: dict[tuple[str, str], list[StockPart]] = {}
        for p in self.parts:
            groups.setdefault((p.kind, p.package), []).append(p)
        index = {}
        for key, parts in groups.items():
            parts.sort(key=lambda p: p.value or 0.0)
            index[key] = ([p.value or 0.0 for p in parts], parts)
        return index

    def candidates(self, kind: str, *packages: str, value: float | None = None
                   ) -> list[StockPart]:
        """Stocked parts of ``kind`` in any of ``packages`` (and of ``value`` to 1e-9
        relative, when given)."""
        out = []
        for package in dict.fromkeys(packages):
            values, parts = self._index.get((kind, package), ((), ()))
            if value is None:
                out += parts
            else:
                lo = bisect.bisect_left(values, value * (1 - 1e-9))
                hi = bisect.bisect_right(values, value * (1 + 1e-9))
                out += parts[lo:hi]
        return out


def package_of(footprint: str) -> str:
    """``Resistor_SMD:R_0603_1608Metric`` -> ``0603``; ``...CP_Elec_6.3x5.4`` -> ``6.3x5.4``;
    any other footprint -> its name after the library prefix."""
    for pattern in (_CHIP, _CAN):
        m = pattern.search(footprint)
        if m:
            return m.group(1)
    return footprint.split(":", 1)[-1]


def _number(text: str) -> float | None:
    m = _NUMBER.match(text or "")
    return float(m.group(1)) if m else None


def _best(found: list[StockPart]) -> StockPart | None:
    if not found:
        return None
    return min(found, key=lambda s: (s.unit_cost is None, s.unit_cost or 0.0, s.internal_pn))


def match(part, library: PartsLibrary | None, *, opamp_id: str | None = None
          ) -> StockPart | None:
    """The stocked part for a board part (``exporters.board.Part``), or None.

    ``opamp_id``: the catalog id of the board's op-amp (matched by ``opamp`` entries when
    the op-amp has no MPN)."""
    if library is None:
        return None
    kind = KIND_OF_PREFIX.get(part.prefix)
    if kind is None:
        return None
    package = package_of(part.footprint)
    if kind in (OPAMP, CONNECTOR):
        mpn = part.field("MPN")
        return _best([s for s in library.candidates(kind, package, part.footprint)
                      if (kind == CONNECTOR or (s.mpn and s.mpn == mpn)
                           or (not mpn and s.opamp_id and s.opamp_id == opamp_id))])
    if part.value_si is None:
        return None
    tolerance = _number(part.field("Tolerance"))
    voltage = _number(part.field("Voltage"))
    dielectric = dielectric_class(part.field("Dielectric"))
    found = []
    for s in library.candidates(kind, package, part.footprint, value=part.value_si):
        if abs(s.value / part.value_si - 1.0) > 1e-9:
            continue
        if tolerance is not None and s.tolerance_pct > tolerance + 1e-9:
            continue
        if kind == CAPACITOR:
            if dielectric_class(s.dielectric) != dielectric:
                continue
            if voltage is not None and (s.voltage_v is None or s.voltage_v < voltage - 1e-9):
                continue
        found.append(s)
    return _best(found)
