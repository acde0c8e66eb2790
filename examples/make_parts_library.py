"""Write examples/parts-library.json: an invented stock of passives for demos and tests.

Not a real organisation's stock and not real part numbers: internal numbers follow an
invented scheme (``GC-R-0603-10K0``), the manufacturer is made up, prices are round
invented figures in EUR. The stock covers what the service's designs need at the default
size 0603:

* resistors: E96 (IEC 60063), 10 ohm .. 1 Mohm, 1 %, 0603;
* ceramic capacitors: E12, 1 pF .. 10 uF, 10 % (C0G 5 %), 0603, in the dielectric class the
  exporters choose for each value, rated 16 and 50 V (X5R: 16 and 25 V);
* aluminium electrolytics: E6, 10 uF .. 1000 uF, 20 %, rated 6.3 .. 50 V, polarised and
  bipolar, in the can size the exporters choose for each value and rating;
* the built-in op-amp archetypes (by catalog id, no MPN: they are not real parts) in their
  SOIC packages, and the 2- and 3-pin headers of the connectors.

Run from the repository root: ``python examples/make_parts_library.py``.
"""

from __future__ import annotations

import json
from pathlib import Path

from exporters.board import (
    C0G_MAX_F,
    ELECTROLYTIC_RATINGS_V,
    X5R_MAX_F,
    X5R_MAX_RATING_V,
    X7R_MAX_F,
    _cp_footprint,
)
from exporters.stock import package_of
from service.engine.synthesis.eseries import values_between

MAKER = "Invented Co."
OUT = Path(__file__).with_name("parts-library.json")


def _code(value: float, unit: str) -> str:
    """10000 -> "10K0", 2.7e-8 -> "27N0" (invented compact value code)."""
    for scale, letter in ((1e6, "M"), (1e3, "K"), (1.0, unit), (1e-3, "M"), (1e-6, "U"),
                          (1e-9, "N"), (1e-12, "P")):
        if value >= scale * (1 - 1e-9):
            whole, frac = divmod(round(value / scale * 100), 100)
            return f"{whole}{letter}{frac:02d}".rstrip("0") if frac else f"{whole}{letter}0"
    raise ValueError(value)


def resistors() -> list[dict]:
    return [{"kind": "resistor", "value": v, "tolerance_pct": 1, "package": "0603",
             "internal_pn": f"GC-R-0603-{_code(v, 'R')}", "manufacturer": MAKER,
             "mpn": f"IPC-R0603F-{_code(v, 'R')}", "unit_cost": 0.002}
            for v in values_between("E96", 10.0, 1e6)]


def ceramics() -> list[dict]:
    out = []
    for v in values_between("E12", 1e-12, 10e-6):
        for rating in (16, 25, 50):
            if v <= C0G_MAX_F and rating != 25:
                diel, tol, cost = "C0G", 5, 0.004
            elif v <= X7R_MAX_F and rating != 25:
                diel, tol, cost = "X7R", 10, 0.005
            elif v <= X5R_MAX_F and rating <= X5R_MAX_RATING_V:
                diel, tol, cost = "X5R", 10, 0.015
            else:
                continue
            code = _code(v, "F")
            out.append({"kind": "capacitor", "value": v, "tolerance_pct": tol,
                        "package": "0603", "dielectric": diel, "voltage_v": rating,
                        "internal_pn": f"GC-C-0603-{code}-{diel}-{rating}V",
                        "manufacturer": MAKER, "mpn": f"IPC-C0603{diel}-{code}-{rating}",
                        "unit_cost": cost + 0.001 * (rating >= 50)})
    return out


def electrolytics() -> list[dict]:
    out = []
    for v in values_between("E6", 10e-6, 1000e-6):
        for rating in ELECTROLYTIC_RATINGS_V[:6]:
            can = package_of(_cp_footprint(v, rating))
            for bipolar in (False, True):
                diel = "aluminium electrolytic" + (" bipolar" if bipolar else "")
                code = _code(v, "F")
                kind = "NP" if bipolar else "E"
                out.append({"kind": "capacitor", "value": v, "tolerance_pct": 20,
                            "package": can, "dielectric": diel, "voltage_v": rating,
                            "internal_pn": f"GC-C{kind}-{can}-{code}-{rating:g}V",
                            "manufacturer": MAKER, "mpn": f"IPC-{kind}{can}-{code}-{rating:g}",
                            "unit_cost": round(0.04 + (0.03 if bipolar else 0.0)
                                               + 0.00002 * v * 1e6 * rating, 3)})
    return out


#: The built-in archetypes (invented ids) with invented stock prices; no MPN (not real parts).
OPAMP_PRICES = {"gc-jfet-4m": 0.60, "gc-cmos-rr-10m": 0.45, "gc-bjt-lownoise-8m": 0.80,
                "gc-micro-1m": 0.55, "gc-fast-50m-g5": 1.20}


def opamps() -> list[dict]:
    from exporters.board import _SOIC, PINOUTS
    from service.engine.model.catalog import BUILTIN_OPAMPS

    out = []
    for op in BUILTIN_OPAMPS:
        footprint = _SOIC[PINOUTS[op.channels_per_package]["pins"]]
        pn = "GC-U-" + op.id.upper().removeprefix("GC-")
        out.append({"kind": "opamp", "opamp_id": op.id, "package": package_of(footprint),
                    "internal_pn": pn, "unit_cost": OPAMP_PRICES[op.id]})
    return out


def connectors() -> list[dict]:
    from exporters.board import _HEADER

    return [{"kind": "connector", "package": package_of(_HEADER[pins]),
             "internal_pn": f"GC-J-HDR-1X{pins:02d}", "manufacturer": MAKER,
             "mpn": f"IPC-HDR-1X{pins:02d}", "unit_cost": 0.03 + 0.01 * pins}
            for pins in sorted(_HEADER)]


def library() -> dict:
    return {"currency": "EUR", "parts": resistors() + ceramics() + electrolytics() + opamps()
            + connectors()}


if __name__ == "__main__":
    lib = library()
    lines = [json.dumps(part) for part in lib["parts"]]
    OUT.write_text(f'{{"currency": "{lib["currency"]}", "parts": [\n'
                   + ",\n".join(lines) + "\n]}\n", encoding="utf-8")
    print(f"wrote {OUT} ({len(library()['parts'])} parts)")
