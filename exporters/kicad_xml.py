"""KiCad XML generic netlist (``.xml``, what BOM scripts read), built with ElementTree.

Same tree as the ``.net`` (KiCad's schematic-editor manual, generic XML netlist):
``export version="E"`` > ``design``,
``components`` (value, footprint, datasheet ``~``, fields, libsource, sheetpath, tstamps),
``libparts`` (one per libsource, with pins), ``nets`` (code from 1, class ``Default``).
ElementTree escapes ``& < > "``; characters XML 1.0 forbids are dropped first
(:func:`exporters.names.xml_text`). No date unless one is given. The design identity sits in
the root sheet's title block: ``<comment number="1" value="design_id <id>"/>``.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from exporters.board import Board
from exporters.kicad_common import DESIGN_ID_COMMENT, TOOL, comp_fields, libparts
from exporters.names import xml_text
from exporters.stock import PartsLibrary


def _sub(parent: ET.Element, tag: str, text: str | None = None, **attrib) -> ET.Element:
    el = ET.SubElement(parent, tag, {k: xml_text(v) for k, v in attrib.items()})
    if text is not None:
        el.text = xml_text(text)
    return el


def kicad_xml(board: Board, *, date: str | None = None,
              library: PartsLibrary | None = None) -> bytes:
    """The ``.xml`` file as UTF-8 bytes with an XML declaration."""
    root = ET.Element("export", {"version": "E"})
    design = _sub(root, "design")
    _sub(design, "source", board.name or "gainchain design")
    if date:
        _sub(design, "date", date)
    _sub(design, "tool", TOOL)
    sheet = _sub(design, "sheet", number="1", name="/", tstamps="/")
    title_block = _sub(sheet, "title_block")
    _sub(title_block, "title", board.name or "gainchain design")
    _sub(title_block, "comment", number="1", value=DESIGN_ID_COMMENT + board.design_id)
    comps = _sub(root, "components")
    for part in board.parts:
        comp = _sub(comps, "comp", ref=part.ref)
        _sub(comp, "value", part.value)
        _sub(comp, "footprint", part.footprint)
        _sub(comp, "datasheet", "~")
        _sub(comp, "description", part.description)
        fields = comp_fields(part, library, board.circuit.opamp.id)
        if fields:
            fel = _sub(comp, "fields")
            for name, value in fields:
                _sub(fel, "field", value, name=name)
        _sub(comp, "libsource", lib=part.lib, part=part.symbol, description=part.description)
        _sub(comp, "sheetpath", names="/", tstamps="/")
        _sub(comp, "tstamps", " ".join(part.tstamps))
    lps = _sub(root, "libparts")
    for lp in libparts(board):
        el = _sub(lps, "libpart", lib=lp["lib"], part=lp["part"])
        _sub(el, "description", lp["description"])
        pins = _sub(el, "pins")
        for num, name, kind in lp["pins"]:
            _sub(pins, "pin", num=num, name=name, type=kind)
    nets = _sub(root, "nets")
    pin_info = {(p.ref, pin.number): pin for p in board.parts for pin in p.pins}
    for code, (net_name, nodes) in enumerate(board.nets.items(), start=1):
        net = _sub(nets, "net", code=str(code), name=net_name, **{"class": "Default"})
        for ref, number in nodes:
            pin = pin_info[(ref, number)]
            attrib = {"ref": ref, "pin": number}
            if pin.function:
                attrib["pinfunction"] = pin.function
            attrib["pintype"] = pin.type
            _sub(net, "node", **attrib)
    ET.indent(root, space="  ")
    return ET.tostring(root, encoding="utf-8", xml_declaration=True) + b"\n"
