"""What both KiCad netlists share: tool name, field order and library-part pin lists."""

from __future__ import annotations

from exporters.board import PINOUTS, Board, Part
from exporters.stock import PartsLibrary, match

TOOL = "gainchain 0.1.0"
#: Title-block comment 1 of the root sheet in both netlists: this prefix and the design id.
DESIGN_ID_COMMENT = "design_id "
#: Fields written per component, in this order; empty fields are left out.
FIELD_ORDER = ("Description", "Tolerance", "Voltage", "Dielectric", "Manufacturer", "MPN",
               "Internal PN")


def comp_fields(part: Part, library: PartsLibrary | None = None,
                opamp_id: str | None = None) -> list[tuple[str, str]]:
    """Non-empty BOM fields of a part (the ones KiCad keeps as symbol fields); a part that
    matches a stocked part of ``library`` takes its manufacturer, MPN and internal PN."""
    fields = dict(part.fields)
    stock = match(part, library, opamp_id=opamp_id)
    if stock is not None:
        fields["Manufacturer"] = stock.manufacturer or fields.get("Manufacturer", "")
        fields["MPN"] = stock.mpn or fields.get("MPN", "")
        fields["Internal PN"] = stock.internal_pn
    return [(name, fields[name]) for name in FIELD_ORDER[1:] if fields.get(name)]


def libparts(board: Board) -> list[dict]:
    """One library part per (lib, part) used, with its pins (num, name, type).

    kicad-netlist-reader needs a ``libpart`` for every ``libsource`` (its own source,
    kicad_netlist_reader.py).
    """
    seen: dict[tuple[str, str], dict] = {}
    for part in board.parts:
        key = (part.lib, part.symbol)
        if key in seen:
            continue
        if part.prefix == "U":
            pinout = PINOUTS[board.circuit.opamp.channels_per_package]
            pins = []
            for p_in, p_inn, p_out in pinout["units"].values():
                pins += [(p_out, "OUT", "output"), (p_inn, "-", "input"), (p_in, "+", "input")]
            pins += [(pinout["vneg"], "V-", "power_in"), (pinout["vpos"], "V+", "power_in")]
        elif part.prefix == "J":
            pins = [(pin.number, f"Pin_{pin.number}", "passive") for pin in part.pins]
        else:
            pins = [("1", "~", "passive"), ("2", "~", "passive")]
        pins.sort(key=lambda pin: int(pin[0]))
        seen[key] = {"lib": part.lib, "part": part.symbol, "description": _generic(part),
                     "pins": pins}
    return [seen[key] for key in sorted(seen)]


def _generic(part: Part) -> str:
    return {"R": "Resistor", "J": "Generic connector"}.get(
        part.prefix, "Polarized capacitor" if part.polarised else
        "Unpolarized capacitor" if part.prefix == "C" else "Operational amplifier")
