"""``POST /v1/exports/<kind>`` end to end through the Flask test client.

The headline check (issue 3): for designs of both topologies, both supply kinds and 1 to 6
stages, ngspice 39 runs the downloaded deck and reproduces the design's reported as-built
midband gain within 0.05 dB and corners within 0.5 %. Other references: kinparse 1.2.4,
kicad-netlist-reader 7.0.1, python-calamine, the standard library's csv reader.
"""

from __future__ import annotations

import csv
import io

import kicad_netlist_reader
import kinparse
import numpy as np
import pytest
from design_cases import DESIGNS, README_SCENARIO
from export_circuits import HOSTILE_NAMES
from python_calamine import CalamineWorkbook
from spice_run import band_from_table, parse_print_table, require_ngspice, run_deck

from exporters.bom_xlsx import XLSX_MIME

KINDS = {
    "bom.csv": "text/csv",
    "bom.xlsx": XLSX_MIME,
    "netlist.cir": "text/plain",
    "netlist.net": "text/plain",
    "netlist.xml": "application/xml",
}
PROBLEM = "application/problem+json"


def _export(client, kind, body, query=""):
    return client.post(f"/v1/exports/{kind}{query}", json=body)


@pytest.mark.ngspice
@pytest.mark.parametrize("key", sorted(DESIGNS))
def test_ngspice_reproduces_reported_as_built_figures(client, key):
    require_ngspice()
    body = DESIGNS[key]
    design = client.post("/v1/designs", json=body)
    assert design.status_code == 200, design.data
    built = design.get_json()["performance"]["as_built"]
    resp = _export(client, "netlist.cir", body)
    assert resp.status_code == 200
    stdout, _ = run_deck(resp.get_data(as_text=True))
    f_hz, vdb, _ = parse_print_table(stdout).T
    peak_db, f_low, f_high = band_from_table(f_hz, vdb)
    assert peak_db == pytest.approx(built["gain_db"], abs=0.05)
    assert f_high == pytest.approx(built["f_high_hz"], rel=5e-3)
    if built["f_low_hz"] is None:
        assert np.isnan(f_low)
    else:
        assert f_low == pytest.approx(built["f_low_hz"], rel=5e-3)
        assert f_hz[0] <= built["f_low_hz"] / 10
    assert f_hz[-1] >= built["f_high_hz"] * 10


@pytest.mark.parametrize("kind", sorted(KINDS))
def test_readme_scenario_downloads_every_kind(client, kind):
    resp = _export(client, kind, README_SCENARIO)
    assert resp.status_code == 200, resp.data
    assert resp.mimetype == KINDS[kind]
    assert resp.headers["Content-Disposition"] == (
        f'attachment; filename="ultrasonic-rx-40kHz-{kind}"')
    again = _export(client, kind, README_SCENARIO)
    assert again.data == resp.data  # same request, same bytes (xlsx included)


def test_readme_scenario_files_parse(client, capsys):
    net = _export(client, "netlist.net", README_SCENARIO).get_data(as_text=True)
    nl = kinparse.parse_netlist(net)
    assert {p.ref for p in nl.parts} >= {"U1", "J1", "J2", "J3", "R1", "C1"}
    xml = _export(client, "netlist.xml", README_SCENARIO).data
    reader = kicad_netlist_reader.netlist(io.BytesIO(xml))
    assert capsys.readouterr().out == ""
    assert {c.getRef() for c in reader.components} == {p.ref for p in nl.parts}
    rows = list(csv.DictReader(io.StringIO(
        _export(client, "bom.csv", README_SCENARIO).get_data(as_text=True))))
    assert sum(int(r["Qty"]) for r in rows) == len(nl.parts)
    wb = CalamineWorkbook.from_filelike(io.BytesIO(_export(client, "bom.xlsx",
                                                           README_SCENARIO).data))
    design = {r[0]: r[1:] for r in wb.get_sheet_by_name("Design").to_python() if r and r[0]}
    assert design["Status"][0] == "meets_target"
    assert design["gain_db"][0] == pytest.approx(60.0)  # the target column
    reported = client.post("/v1/designs", json=README_SCENARIO).get_json()
    assert design["f_high_hz"][2] == pytest.approx(
        reported["performance"]["as_built"]["f_high_hz"])


def test_circuit_body_gives_the_same_files_as_the_design(client):
    design = client.post("/v1/designs", json=README_SCENARIO).get_json()
    by_circuit = {"name": README_SCENARIO["name"], "circuit": design["circuit"]}
    for kind in ("netlist.net", "netlist.xml", "bom.csv"):
        assert _export(client, kind, by_circuit).data == _export(client, kind,
                                                                 README_SCENARIO).data


def test_options_size_and_date(client):
    csv_0805 = _export(client, "bom.csv", README_SCENARIO, "?size=0805").get_data(as_text=True)
    assert "R_0805_2012Metric" in csv_0805 and "R_0603" not in csv_0805
    dated = _export(client, "netlist.net", README_SCENARIO, "?date=2026-01-31")
    assert '(date "2026-01-31")' in dated.get_data(as_text=True)
    undated = _export(client, "netlist.net", README_SCENARIO).get_data(as_text=True)
    assert "(date" not in undated


@pytest.mark.parametrize("query, field", [
    ("?size=0402", "size"), ("?date=31.01.2026", "date"), ("?colour=red", "colour")])
def test_bad_options_are_422_problems(client, query, field):
    resp = _export(client, "bom.csv", README_SCENARIO, query)
    assert resp.status_code == 422 and resp.mimetype == PROBLEM
    assert field in resp.get_json()["errors"]["query"]


@pytest.mark.parametrize("body, field", [
    ({**README_SCENARIO, "target": {"gain_db": 60, "f_low_hz": 5, "f_high_hz": 1}}, "target"),
    ({**README_SCENARIO, "gian_db": 3}, "gian_db"),
    ({"name": "x", "circuit": {"topology": "sideways"}}, "circuit"),
    ({"name": "x", "circuit": None}, "circuit"),
    ({"name": 5, "circuit": {}}, "name"),
    ({"name": "x" * 81, "circuit": {}}, "name"),
    ({"circuit": {}, "extra": 1}, "extra"),
])
def test_bad_bodies_are_422_problems(client, body, field):
    resp = _export(client, "netlist.cir", body)
    assert resp.status_code == 422 and resp.mimetype == PROBLEM, resp.data
    assert field in resp.get_json()["errors"]


def test_unknown_kind_malformed_json_and_wrong_type(client):
    assert _export(client, "bom.pdf", README_SCENARIO).status_code == 404
    resp = client.post("/v1/exports/bom.csv", data="{nope", content_type="application/json")
    assert resp.status_code == 400 and resp.mimetype == PROBLEM
    resp = client.post("/v1/exports/bom.csv", data="a,b", content_type="text/csv")
    assert resp.status_code == 415 and resp.mimetype == PROBLEM
    resp = client.get("/v1/exports/bom.csv")
    assert resp.status_code == 405 and "POST" in resp.headers["Allow"]
    resp = client.post("/v1/exports/bom.csv", json=[1, 2])
    assert resp.status_code == 422 and resp.mimetype == PROBLEM


# A lone surrogate is refused before any exporter sees it (400: tests/api/test_bad_inputs.py).
@pytest.mark.parametrize("name", HOSTILE_NAMES + ["nul\x00bell\x07", ".hidden", "-rf",
                                  "x" * 80])
def test_hostile_names_give_safe_filenames_and_inert_files(client, name):
    design = client.post("/v1/designs", json=README_SCENARIO).get_json()
    body = {"name": name, "circuit": design["circuit"]}
    for kind in KINDS:
        resp = _export(client, kind, body)
        assert resp.status_code == 200, resp.data
        disposition = resp.headers["Content-Disposition"]
        assert disposition.startswith('attachment; filename="') and disposition.endswith('"')
        filename = disposition[len('attachment; filename="'):-1]
        assert set(filename) <= set("ABCDEFGHIJKLMNOPQRSTUVWXYZabcdefghijklmnopqrstuvwxyz"
                                    "0123456789._-")
        assert not filename.startswith((".", "-"))  # no hidden file, no command option
    deck = _export(client, "netlist.cir", body).get_data(as_text=True)
    assert ".control" not in "\n".join(deck.splitlines()[1:]).lower()


def test_xlsx_design_sheet_lists_the_verdict(client):
    # The workbook an engineer opens shows the same build checks and yield as the design
    # response (read back with python-calamine, an independent xlsx reader).
    design = client.post("/v1/designs", json=README_SCENARIO).get_json()
    resp = _export(client, "bom.xlsx", README_SCENARIO)
    rows = CalamineWorkbook.from_filelike(io.BytesIO(resp.data)) \
        .get_sheet_by_name("Design").to_python()
    header = ["check", "stage", "value", "limit", "unit", "passed", "detail"]
    start = next(i for i, row in enumerate(rows) if row[:7] == header)
    listed = rows[start + 1:start + 1 + len(design["checks"])]
    assert [row[0] for row in listed] == [c["check"] for c in design["checks"]]
    assert [row[6] for row in listed] == [c["detail"] for c in design["checks"]]
    for row, c in zip(listed, design["checks"], strict=True):
        if c["value"] is not None:
            assert row[2] == pytest.approx(c["value"], rel=1e-12)
    (yield_row,) = [rows[i + 1] for i, row in enumerate(rows) if row[:2] == ["yield",
                                                                             "predicted"]]
    assert yield_row[1] == pytest.approx(design["yield"]["predicted"], rel=1e-12)
