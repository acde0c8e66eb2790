"""KiCad netlists read back by independent parsers and checked against the circuit.

References: kinparse 1.2.4 (the ``.net``), sexpdata 1.0.2 (exact atom values after
unescaping), kicad-netlist-reader 7.0.1 (KiCad's own BOM-script helper, GPL-3.0, used here
only) for the ``.xml``; ngspice 39 for the DC operating point. Connectivity is compared with
the SPICE deck of the same board, which ``test_export_spice`` proves equal to the circuit
model numerically; pin numbers with the de facto industry-standard op-amp pinouts as tabled
from KiCad's standard libraries and industry-standard pinouts (common practice), spelled
out again here.
"""

from __future__ import annotations

import dataclasses
import functools
import io
import re
import xml.etree.ElementTree as ET

import kicad_netlist_reader
import kinparse
import pytest
import sexpdata
from export_circuits import CIRCUITS, HOSTILE_NAMES, dual_inv, opamp, single_ni
from spice_run import require_ngspice, run_deck

from exporters.board import build_board
from exporters.kicad_sexpr import kicad_net
from exporters.kicad_xml import kicad_xml
from exporters.spice import spice_deck

# unit -> (+in, -in, out); rails (V+, V-). De facto standard pinouts (common practice).
PINOUT = {
    1: ({"A": ("3", "2", "6")}, ("7", "4")),
    2: ({"A": ("3", "2", "1"), "B": ("5", "6", "7")}, ("8", "4")),
    4: ({"A": ("3", "2", "1"), "B": ("5", "6", "7"), "C": ("10", "9", "8"),
         "D": ("12", "13", "14")}, ("4", "11")),
}


def deck_terminals(deck: str, channels: int) -> dict:
    """``{(ref, pin): spice node}`` from the deck's element lines (R, C, X, RSOURCE, RLOAD)."""
    units, _ = PINOUT[channels]
    out = {}
    body = deck.split(".ends", 1)[1]
    for line in body.splitlines():
        tok = line.split()
        if not tok or tok[0].startswith(("*", ".")):
            continue
        name = tok[0]
        if name in ("RSOURCE", "RLOAD") or name[0] in "V":
            out[(name, "1")], out[(name, "2")] = tok[1], tok[2]
        elif name[0] in "RC":
            out[(name, "1")], out[(name, "2")] = tok[1], tok[2]
        elif name[0] == "X":
            ref, unit = name[1:-1], name[-1]
            p_in, p_inn, p_out = units[unit]
            out[(ref, p_in)], out[(ref, p_inn)], out[(ref, p_out)] = tok[1], tok[2], tok[3]
    return out


def partition(mapping: dict) -> set[frozenset]:
    groups: dict = {}
    for term, node in mapping.items():
        groups.setdefault(node, set()).add(term)
    return {frozenset(g) for g in groups.values()}


def parse_net(text: str):
    """kinparse view: parts {ref: part}, nets {name: {(ref, pin)}}."""
    nl = kinparse.parse_netlist(text)
    parts = {p.ref: p for p in nl.parts}
    nets = {n.name: {(x.ref, x.num) for x in n.pins} for n in nl.nets}
    assert all(int(n.code) >= 1 for n in nl.nets)
    assert len(nets) == len(nl.nets)  # unique names
    kinds = {p.ref: (p.lib, p.name) for p in nl.parts}
    fields = {p.ref: {f.name: f.value for f in p.fields} for p in nl.parts}
    return parts, nets, kinds, fields, [p.footprint for p in nl.parts]


def parse_xml(data: bytes, capsys):
    """kicad-netlist-reader view, same shape as :func:`parse_net`."""
    net = kicad_netlist_reader.netlist(io.BytesIO(data))
    assert capsys.readouterr().out == ""  # no "missing libpart" complaints
    parts = {c.getRef(): c for c in net.components}
    nets = {}
    for n in net.getNets():
        nets[n.get("net", "name")] = {(nd.get("node", "ref"), nd.get("node", "pin"))
                                      for nd in n.getChildren("node")}
        assert int(n.get("net", "code")) >= 1
    kinds = {r: (c.getLibName(), c.getPartName()) for r, c in parts.items()}
    fields = {r: {f: c.getField(f) for f in c.getFieldNames()} for r, c in parts.items()}
    return parts, nets, kinds, fields, [c.getFootprint() for c in net.components]


def check_connectivity(circuit, parsed, deck: str):
    parts, nets, kinds, _, footprints = parsed
    channels = circuit.opamp.channels_per_package
    pins = [t for members in nets.values() for t in members]
    assert len(pins) == len(set(pins))  # no pin on two nets
    assert {r for r, _ in pins} <= set(parts)  # every node ref is a component
    assert all(len(members) >= 2 for members in nets.values())  # no single-node nets
    assert all(re.fullmatch(r"[A-Za-z0-9_.]+:[^:\s]+", fp) for fp in footprints)
    # (1) same connectivity as the SPICE deck (R, C, op-amp units), which ngspice ties to
    # the circuit model; connectors stand in for the deck's source and load.
    spice = deck_terminals(deck, channels)
    board_terms = {t: name for name, members in nets.items() for t in members}
    common = {t for t in spice if t[0] in parts}
    assert partition({t: spice[t] for t in common}) == partition(
        {t: board_terms[t] for t in common if t in board_terms})
    assert {t for t in board_terms if t[0][0] in "RCU"} == {
        t for t in board_terms if t in spice or (t[0][0] == "U" and t[1] in PINOUT[channels][1])}
    # (2) connectors: J1 = source side of RSOURCE / GND, J2 = RLOAD, J3 = rails
    by_spice = {spice[t]: board_terms[t] for t in common if t in board_terms}
    by_spice["0"] = board_terms[("J1", "2")]
    assert board_terms[("J1", "1")] == by_spice[spice[("RSOURCE", "2")]]
    assert board_terms[("J2", "1")] == by_spice[spice[("RLOAD", "1")]]
    assert board_terms[("J2", "2")] == by_spice[spice[("RLOAD", "2")]]
    rails = [board_terms[("J3", "1")], board_terms[("J3", "2")]]
    if circuit.supply.kind == "dual":
        rails.append(board_terms[("J3", "3")])
    # (3) every package: V+ on VCC, V- on GND (single) or VEE (dual); every unit's pins wired
    vpos, vneg = PINOUT[channels][1]
    packages = [r for r in parts if r.startswith("U")]
    assert len(packages) == -(-circuit.opamp_units // channels)
    for ref in packages:
        assert board_terms[(ref, vpos)] == rails[0]
        assert board_terms[(ref, vneg)] == (rails[2] if len(rails) == 3 else rails[1])
        for p_in, p_inn, p_out in PINOUT[channels][0].values():
            assert {(ref, p_in), (ref, p_inn), (ref, p_out)} <= set(board_terms)


def dc_operating_point(deck: str) -> dict:
    """Node voltages from ngspice's DC operating point of the same deck (``.op``)."""
    op_deck = re.sub(r"^\.ac .*$", ".op", deck, flags=re.M)
    op_deck = re.sub(r"^\.print .*\n", "", op_deck, flags=re.M)
    stdout, _ = run_deck(op_deck)
    volts = {"0": 0.0}
    for line in stdout.splitlines():
        m = re.fullmatch(r"\s+([a-z0-9_]+)\s+(-?\d\.\d+e[+-]\d+)", line)
        if m:
            volts[m.group(1)] = float(m.group(2))
    return volts


def check_capacitors(parsed, deck: str, circuit):
    """Polarised + (pin 1) on the higher DC node (ngspice .op); rating >= 1.5x DC across."""
    require_ngspice()
    _, _, kinds, fields, _ = parsed
    volts = dc_operating_point(deck)
    spice = deck_terminals(deck, circuit.opamp.channels_per_package)
    polarised = 0
    for ref, (_, symbol) in kinds.items():
        if not ref.startswith("C"):
            continue
        v1, v2 = volts[spice[(ref, "1")]], volts[spice[(ref, "2")]]
        rating = float(fields[ref]["Voltage"].rstrip("V"))
        assert rating >= 1.5 * abs(v1 - v2)  # common practice: rated >= 1.5-2x DC across
        if symbol == "C_Polarized":
            polarised += 1
            assert v1 - v2 > 0.4, (ref, v1, v2)
    return polarised


@functools.cache
def _net_parsed(key: str):
    """kinparse is slow (pyparsing): parse each circuit's .net once per session."""
    text = kicad_net(build_board(CIRCUITS[key](), name=key))
    return text, parse_net(text)


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_net_file_parses_and_matches_circuit(key):
    circuit = CIRCUITS[key]()
    board = build_board(circuit, name=key)
    text, parsed = _net_parsed(key)
    assert text == kicad_net(board)
    assert re.match(r"[ ]*\(export[ ]+", text.splitlines()[0])  # KiCad's format sniffing
    assert sexpdata.loads(text)[0] == sexpdata.Symbol("export")
    check_connectivity(circuit, parsed, spice_deck(board))


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_xml_file_parses_and_matches_circuit(key, capsys):
    circuit = CIRCUITS[key]()
    board = build_board(circuit, name=key)
    parsed = parse_xml(kicad_xml(board), capsys)
    check_connectivity(circuit, parsed, spice_deck(board))


@pytest.mark.ngspice
@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_electrolytic_polarity_and_rating_from_ngspice_dc(key, capsys):
    circuit = CIRCUITS[key]()
    board = build_board(circuit, name=key)
    deck = spice_deck(board)
    n_net = check_capacitors(_net_parsed(key)[1], deck, circuit)
    n_xml = check_capacitors(parse_xml(kicad_xml(board), capsys), deck, circuit)
    assert n_net == n_xml
    if circuit.supply.kind == "single":  # bulk, bypass and gain-leg parts are polarised
        assert n_net >= 2


def test_same_request_same_bytes():
    board = build_board(single_ni(3, buffered=True), name="twice")
    again = build_board(single_ni(3, buffered=True), name="twice")
    assert kicad_net(board) == kicad_net(again)
    assert kicad_xml(board) == kicad_xml(again)
    assert "date" not in kicad_net(board) and b"<date>" not in kicad_xml(board)
    assert '(date "2026-01-31")' in kicad_net(board, date="2026-01-31")


def test_groups_in_xml_reader_follow_natural_order(capsys):
    net = kicad_netlist_reader.netlist(io.BytesIO(kicad_xml(build_board(dual_inv(5, channels=2)))))
    capsys.readouterr()
    groups = net.groupComponents(net.getInterestingComponents())
    refs = [c.getRef() for g in groups for c in g]
    assert sorted(refs) == sorted(c.getRef() for c in net.components)
    r_refs = [r for r in refs if r.startswith("R")]
    assert "R10" in r_refs and r_refs.index("R2") < r_refs.index("R10")


def _hostile_circuit(text: str):
    amp = opamp(2, id=text, mpn=text, manufacturer=text, description=text)
    return dataclasses.replace(single_ni(2), opamp=amp)


def _clean(text: str) -> str:  # control characters other than \t \n \r are dropped
    return re.sub(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]", "", text)


@pytest.mark.parametrize("name", HOSTILE_NAMES + ["nul\x00bell\x07", "surrogate \ud800 x"])
def test_hostile_text_round_trips_inert_in_net(name):
    board = build_board(_hostile_circuit(name), name=name)
    text = kicad_net(board)
    tree = sexpdata.loads(text)  # one top-level form: nothing escaped the quotes
    expected = _clean(name).encode("utf-8", "replace").decode("utf-8")
    design = next(x for x in tree if isinstance(x, list) and x[0] == sexpdata.Symbol("design"))
    assert design[1][1] == expected
    comps = next(x for x in tree if isinstance(x, list) and x[0] == sexpdata.Symbol("components"))
    u1 = next(c for c in comps[1:] if c[1][1] == "U1")
    assert u1[2][1] == expected  # value
    assert "\r" not in text and not re.search(r"[\x00-\x08\x0b\x0c\x0e-\x1f]", text)
    parse_net(text)  # kinparse still reads the file


@pytest.mark.parametrize("name", HOSTILE_NAMES + ["nul\x00bell\x07"])
def test_hostile_text_round_trips_inert_in_xml(name, capsys):
    board = build_board(_hostile_circuit(name), name=name)
    data = kicad_xml(board)
    net = kicad_netlist_reader.netlist(io.BytesIO(data))
    capsys.readouterr()
    # The reader drops whitespace around entities and line ends (kicad-netlist-reader), so it is
    # compared without whitespace; the standard library's parser checks exact text
    # (XML parsers normalise CR to LF).
    expected = _clean(name).replace("\r\n", "\n").replace("\r", "\n")
    bare = re.sub(r"\s", "", expected)
    u1 = next(c for c in net.components if c.getRef() == "U1")
    for got in (net.getSource(), u1.getValue(), u1.getField("MPN")):
        assert re.sub(r"\s", "", got) == bare
    root = ET.fromstring(data)
    assert root.find("design/source").text == expected
    comp = next(c for c in root.iter("comp") if c.get("ref") == "U1")
    assert comp.find("value").text == expected
    assert comp.find("fields/field[@name='Manufacturer']").text == expected
    assert b"]]>" not in data and b"<tag>" not in data
