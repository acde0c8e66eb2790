"""Stocked passives (GAINCHAIN_PARTS_LIBRARY): start-up validation, GET /v1/parts, the stock
columns of every export read back by independent readers, bom_cost, stocked_only.

References: Python's ``csv`` module (the CSV BOM), python-calamine (an independent Rust xlsx
reader), kinparse 1.2.4 (KiCad ``.net``), kicad-netlist-reader 7.0.1 (KiCad's own XML
netlist reader), the ``eseries`` package (IEC 60063 series membership), ``decimal`` for exact
price arithmetic. The library data are invented (examples/parts-library.json, and small
stocks written here); the matching rules are common practice (same kind, value, package and
dielectric class, tolerance equal or tighter, voltage rating equal or higher).
"""

from __future__ import annotations

import csv
import io
import json
from decimal import Decimal
from pathlib import Path

import eseries
import kicad_netlist_reader
import kinparse
import pytest
from python_calamine import CalamineWorkbook

from service import create_app
from service.examples import README_EXAMPLE
from service.parts_library import load_parts_library

ROOT = Path(__file__).resolve().parents[2]
DEMO_LIBRARY = ROOT / "examples" / "parts-library.json"


def _app(library=None):
    return create_app({"TESTING": True, "GAINCHAIN_PARTS_LIBRARY":
                       None if library is None else str(library)})


@pytest.fixture(scope="module")
def demo_client():
    return _app(DEMO_LIBRARY).test_client()


def _write(tmp_path, data) -> Path:
    path = tmp_path / "stock.json"
    path.write_text(data if isinstance(data, str) else json.dumps(data), encoding="utf-8")
    return path


GOOD_R = {"kind": "resistor", "value": 10000, "tolerance_pct": 1, "package": "0603",
          "internal_pn": "GC-R-0603-10K0"}
GOOD_C = {"kind": "capacitor", "value": 1e-7, "tolerance_pct": 10, "package": "0603",
          "dielectric": "X7R", "voltage_v": 16, "internal_pn": "GC-C-0603-100N-X7R-16V"}


@pytest.mark.parametrize("bad_entry, words", [
    ({**GOOD_R, "kind": "inductor"}, ["parts[2]", "kind"]),
    ({k: v for k, v in GOOD_C.items() if k != "dielectric"} | {"internal_pn": "GC-X"},
     ["parts[2]", "'GC-X'", "dielectric"]),
    ({**GOOD_R, "voltage_v": 50, "internal_pn": "GC-Y"}, ["parts[2]", "'GC-Y'", "voltage_v"]),
    ({**GOOD_R, "value": -1, "internal_pn": "GC-Z"}, ["parts[2]", "'GC-Z'", "value"]),
    ({**GOOD_R, "value": "10k", "internal_pn": "GC-Z"}, ["parts[2]", "value"]),
    ({**GOOD_R, "colour": "blue", "internal_pn": "GC-Q"}, ["parts[2]", "colour"]),
    ({**GOOD_C, "dielectric": "paper", "internal_pn": "GC-P"}, ["parts[2]", "dielectric"]),
    ({**GOOD_R}, ["parts[2]", "repeats", "parts[0]"]),  # duplicate internal_pn
])
def test_bad_entry_stops_start_up_naming_it(tmp_path, bad_entry, words):
    path = _write(tmp_path, {"currency": "EUR", "parts": [GOOD_R, GOOD_C, bad_entry]})
    with pytest.raises(RuntimeError) as err:
        _app(path)
    for word in words:
        assert word in str(err.value)


@pytest.mark.parametrize("content, word", [
    ("{not json", "cannot read"),
    ({"parts": [GOOD_R]}, "currency"),
    ({"currency": "euro", "parts": [GOOD_R]}, "currency"),
    ({"currency": "EUR", "parts": {}}, "parts"),
    ([GOOD_R], "expected"),
])
def test_bad_file_stops_start_up(tmp_path, content, word):
    with pytest.raises(RuntimeError, match=word):
        _app(_write(tmp_path, content))


def test_missing_file_named_in_the_environment_stops_start_up(tmp_path):
    from service import config

    cfg = config.from_environment({"GAINCHAIN_PARTS_LIBRARY": str(tmp_path / "none.json")})
    with pytest.raises(RuntimeError, match="none.json"):
        create_app(cfg)


def test_get_parts_lists_the_library(demo_client, strict_json):
    body = strict_json(demo_client.get("/v1/parts").data)
    on_disk = json.loads(DEMO_LIBRARY.read_text(encoding="utf-8"))
    assert body["currency"] == on_disk["currency"] == "EUR"
    assert [p["internal_pn"] for p in body["parts"]] == [p["internal_pn"]
                                                         for p in on_disk["parts"]]
    empty = strict_json(_app().test_client().get("/v1/parts").data)
    assert empty == {"currency": None, "parts": []}


_SI_PREFIX = {"p": 1e-12, "n": 1e-9, "u": 1e-6, "m": 1e-3, "k": 1e3, "M": 1e6}


def eda_to_si(text: str) -> float:
    """An EDA value ("9.31k", "22n", "4k7", "442") in SI units (SI prefixes; the prefix as
    decimal point is common practice)."""
    for prefix, scale in _SI_PREFIX.items():
        if prefix in text:
            whole, _, frac = text.partition(prefix)
            return float(f"{whole}.{frac}" if frac else whole) * scale
    return float(text)


def _csv_rows(client, body) -> list[dict]:
    resp = client.post("/v1/exports/bom.csv", json=body)
    assert resp.status_code == 200
    return list(csv.DictReader(io.StringIO(resp.get_data(as_text=True))))


def test_every_export_shows_the_internal_part_numbers(demo_client, strict_json):
    rows = _csv_rows(demo_client, README_EXAMPLE)
    pn_of = {}
    for row in rows:
        refs = row["Reference"].split(",")
        # the invented demo stock covers every line of this design
        assert row["Stocked"] == "yes" and row["Internal PN"].startswith("GC-"), row
        unit, ext = Decimal(row["Unit cost"]), Decimal(row["Extended cost"])
        assert ext == unit * int(row["Qty"])  # exact decimal arithmetic
        if refs[0][0] in "RCJ":
            assert row["Manufacturer"] == "Invented Co." and row["MPN"]
        else:  # the archetype op-amp: stocked by catalog id, no MPN (not a real part)
            assert row["Value"] == "gc-cmos-rr-10m" and row["MPN"] == ""
            assert row["Internal PN"] == "GC-U-CMOS-RR-10M"
        pn_of.update({ref: row["Internal PN"] for ref in refs})
    assert len(pn_of) == 20
    total = sum(Decimal(r["Extended cost"]) for r in rows if r["Extended cost"])

    design = strict_json(demo_client.post("/v1/designs", json=README_EXAMPLE).data)
    assert design["bom_cost"] == {"currency": "EUR", "total": float(total), "unpriced_lines": 0}
    assert not [w for w in design["warnings"] if w["code"] == "unstocked_parts"]

    # xlsx read back by python-calamine: the same numbers per line and a Total row
    data = demo_client.post("/v1/exports/bom.xlsx", json=README_EXAMPLE).data
    sheet = CalamineWorkbook.from_filelike(io.BytesIO(data)).get_sheet_by_name("BOM")
    head, *lines, total_row = sheet.to_python()
    col = {name: i for i, name in enumerate(head)}
    for line in lines:
        for ref in line[col["Reference"]].split(","):
            assert pn_of.get(ref, "") == line[col["Internal PN"]]
    assert total_row[col["Reference"]] == "Total"
    assert total_row[col["Extended cost"]] == pytest.approx(float(total), rel=1e-12)
    assert "EUR" in total_row[col["Description"]] and "0 line(s)" in total_row[col["Description"]]

    # KiCad .net read back by kinparse, .xml by kicad-netlist-reader
    text = demo_client.post("/v1/exports/netlist.net", json=README_EXAMPLE).get_data(as_text=True)
    net_fields = {p.ref: {f.name: f.value for f in p.fields}
                  for p in kinparse.parse_netlist(text).parts}
    xml = demo_client.post("/v1/exports/netlist.xml", json=README_EXAMPLE).data
    reader = kicad_netlist_reader.netlist(io.BytesIO(xml))
    xml_fields = {c.getRef(): c.getField("Internal PN") for c in reader.components}
    for ref, pn in pn_of.items():
        assert net_fields[ref]["Internal PN"] == pn
        assert xml_fields[ref] == pn


def test_unmatched_lines_say_so_in_a_column_and_a_warning(tmp_path, strict_json):
    # Values taken from the README design's own BOM (without a library): a stock of one
    # exact match (the divider resistor at 1 % in 0603) plus near misses that must not
    # match: stage 1's bias resistor at 5 % (looser), the last resistor in 0805 (other
    # package), the coupling capacitor rated 6.3 V (below its line's 10 V), the ground-leg
    # X5R value as X7R (other dielectric).
    plain = {r["Reference"]: r for r in _csv_rows(_app().test_client(), README_EXAMPLE)}
    divider = next(ref for ref, r in plain.items() if ref.startswith("R") and "," in ref)
    resistors = sorted((ref for ref in plain if ref.startswith("R") and "," not in ref),
                       key=lambda ref: int(ref[1:]))
    first_r, other_r = resistors[0], resistors[-1]
    coupling = next(ref for ref in plain if ref.startswith("C1,"))
    x5r = next(ref for ref, r in plain.items() if r["Dielectric"] == "X5R")

    def si(ref):
        return float(eda_to_si(plain[ref]["Value"]))

    stock = {"currency": "EUR", "parts": [
        {**GOOD_R, "value": si(divider), "internal_pn": "GC-R-DIV", "unit_cost": 0.01},
        {**GOOD_R, "value": si(first_r), "tolerance_pct": 5, "internal_pn": "GC-R-FIRST-5"},
        {**GOOD_R, "value": si(other_r), "package": "0805", "internal_pn": "GC-R-0805"},
        {**GOOD_C, "value": si(coupling), "voltage_v": 6.3, "internal_pn": "GC-C-CC-6V3"},
        {**GOOD_C, "value": si(x5r), "internal_pn": "GC-C-X7R"},
    ]}
    client = _app(_write(tmp_path, stock)).test_client()
    rows = {r["Reference"]: r for r in _csv_rows(client, README_EXAMPLE)}
    stocked = {ref: r["Internal PN"] for ref, r in rows.items() if r["Stocked"] == "yes"}
    assert stocked == {divider: "GC-R-DIV"}
    design = strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)
    warning = [w["message"] for w in design["warnings"] if w["code"] == "unstocked_parts"]
    assert len(warning) == 1
    for ref, row in rows.items():
        if ref[0] in "RC" and row["Stocked"] == "no":
            assert ref in warning[0]
    assert divider not in warning[0]
    assert design["bom_cost"]["total"] == pytest.approx(0.02)
    # tighter tolerance and higher voltage do match
    stock["parts"][1]["tolerance_pct"] = 0.1
    stock["parts"][3]["voltage_v"] = 25
    client = _app(_write(tmp_path, stock)).test_client()
    rows = {r["Reference"]: r for r in _csv_rows(client, README_EXAMPLE)}
    assert rows[first_r]["Internal PN"] == "GC-R-FIRST-5"
    assert rows[coupling]["Internal PN"] == "GC-C-CC-6V3"


def test_opamps_and_connectors_match_by_mpn_id_and_package(tmp_path, strict_json):
    from service.engine.model.catalog import BUILTIN_OPAMPS

    cmos = next(op for op in BUILTIN_OPAMPS if op.id == "gc-cmos-rr-10m").to_dict()
    with_mpn = {**cmos, "id": None, "manufacturer": "Invented Co.", "mpn": "INV-OA-10"}
    soic8 = "SOIC-8_3.9x4.9mm_P1.27mm"
    stock = {"currency": "EUR", "parts": [
        {"kind": "opamp", "opamp_id": "gc-cmos-rr-10m", "package": soic8,
         "internal_pn": "GC-U-BY-ID", "unit_cost": 0.4},
        {"kind": "opamp", "mpn": "INV-OA-10", "package": soic8, "internal_pn": "GC-U-BY-MPN"},
        {"kind": "opamp", "opamp_id": "gc-cmos-rr-10m", "package": "SOIC-14_3.9x8.7mm_P1.27mm",
         "internal_pn": "GC-U-WRONG-PACKAGE"},
        {"kind": "connector", "package": "PinHeader_1x02_P2.54mm_Vertical",
         "internal_pn": "GC-J-2"},
    ]}
    client = _app(_write(tmp_path, stock)).test_client()
    rows = {r["Reference"]: r for r in _csv_rows(client, README_EXAMPLE)}
    assert rows["U1"]["Internal PN"] == "GC-U-BY-ID" and rows["U1"]["Unit cost"] == "0.4"
    assert {rows[j]["Internal PN"] for j in ("J1", "J2", "J3")} == {"GC-J-2"}
    rows = {r["Reference"]: r for r in _csv_rows(client, {**README_EXAMPLE, "opamp": with_mpn})}
    assert rows["U1"]["Internal PN"] == "GC-U-BY-MPN" and rows["U1"]["MPN"] == "INV-OA-10"
    # a library that lists op-amps warns about an op-amp it does not stock
    other = {**cmos, "id": "gc-other"}
    design = strict_json(client.post("/v1/designs", json={**README_EXAMPLE, "opamp": other}).data)
    message = next(w["message"] for w in design["warnings"] if w["code"] == "unstocked_parts")
    assert "U1" in message and "J1" not in message


@pytest.mark.parametrize("entry, word", [
    ({"kind": "opamp", "package": "SOIC-8", "internal_pn": "GC-U"}, "mpn"),
    ({"kind": "opamp", "package": "SOIC-8", "opamp_id": "x", "value": 1.0,
      "internal_pn": "GC-U"}, "value"),
    ({"kind": "connector", "package": "Hdr", "tolerance_pct": 5, "internal_pn": "GC-J"},
     "tolerance_pct"),
    ({"kind": "resistor", "package": "0603", "internal_pn": "GC-R"}, "value"),
])
def test_entries_are_checked_by_kind(tmp_path, entry, word):
    with pytest.raises(RuntimeError, match=word):
        _app(_write(tmp_path, {"currency": "EUR", "parts": [entry]}))


def test_design_without_library_has_null_cost(client, strict_json):
    body = strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)
    assert body["bom_cost"] is None


# A small invented stock: E12 resistors (1 %) from 100 ohm to 1 Mohm and E6 capacitors
# (X7R/C0G/X5R and electrolytic classes not needed here: stocked_only limits values only).
def _small_stock() -> dict:
    parts = []
    for v in eseries.erange(eseries.E12, 100, 1.01e6):
        parts.append({"kind": "resistor", "value": float(v), "tolerance_pct": 1,
                      "package": "0603", "internal_pn": f"GC-R-{v:.4g}"})
    for v in eseries.erange(eseries.E6, 1e-12, 1.01e-3):
        parts.append({"kind": "capacitor", "value": float(v), "tolerance_pct": 10,
                      "package": "0603", "dielectric": "X7R", "voltage_v": 50,
                      "internal_pn": f"GC-C-{v:.4g}"})
    return {"currency": "EUR", "parts": parts}


def _values(circuit: dict):
    resistors, capacitors = [], []
    for stage in circuit["stages"]:
        for key, value in stage.items():
            if value is not None:
                (resistors if key.startswith("r_") else capacitors).append(value)
    bias = circuit["bias"] or {}
    resistors += [bias[k] for k in ("r_top_ohm", "r_bottom_ohm") if k in bias]
    capacitors += [v for v in (bias.get("c_bypass_f"), circuit["c_out_f"]) if v is not None]
    return resistors, capacitors


def test_stocked_only_designs_use_only_stocked_values(tmp_path, strict_json):
    stock = _small_stock()
    client = _app(_write(tmp_path, stock)).test_client()
    body = {**README_EXAMPLE, "components": {"resistor_series": "E24", "capacitor_series": "E12",
                                             "stocked_only": True}}
    design = strict_json(client.post("/v1/designs", json=body).data)
    stocked_r = {p["value"] for p in stock["parts"] if p["kind"] == "resistor"}
    stocked_c = {p["value"] for p in stock["parts"] if p["kind"] == "capacitor"}
    resistors, capacitors = _values(design["circuit"])
    assert resistors and capacitors
    for r in resistors:
        assert min(abs(r / s - 1) for s in stocked_r) < 1e-9, r
        assert eseries.find_nearest(eseries.E12, r) == pytest.approx(r)  # IEC 60063 E12
    for c in capacitors:
        assert min(abs(c / s - 1) for s in stocked_c) < 1e-9, c
        assert eseries.find_nearest(eseries.E6, c) == pytest.approx(c)
    # the restriction acted: without it the same request uses values outside the stock
    free = strict_json(client.post("/v1/designs", json={
        **body, "components": {"resistor_series": "E24", "capacitor_series": "E12"}}).data)
    free_r, free_c = _values(free["circuit"])
    outside = [r for r in free_r if min(abs(r / s - 1) for s in stocked_r) > 1e-9]
    outside += [c for c in free_c if min(abs(c / s - 1) for s in stocked_c) > 1e-9]
    assert outside


def test_stocked_only_needs_a_library(client, strict_json):
    body = {**README_EXAMPLE, "components": {"stocked_only": True}}
    resp = client.post("/v1/designs", json=body)
    assert resp.status_code == 422
    problem = strict_json(resp.data)
    assert "stocked_only" in problem["errors"]["components"]
    assert "components.stocked_only" in problem["detail"]


def test_demo_library_loads_and_prices_every_part():
    library = load_parts_library(str(DEMO_LIBRARY))
    assert library.currency == "EUR" and len(library.parts) > 500
    assert all(p.unit_cost is not None for p in library.parts)
