"""Design identity (``design_id``): the same circuit gives the same id on every app instance,
any part value changes it, and every export carries it.

References: ``hashlib.sha256`` (FIPS 180-4) over the canonical JSON as README documents it
(sorted keys, compact separators, numbers as Python's shortest round-trip float spelling),
built here independently of the service's code; python-calamine and ``zipfile``/``xml.etree``
(the workbook's ``dc:identifier``, ECMA-376 core properties), kinparse 1.2.4 and
kicad-netlist-reader 7.0.1 (the netlists' title-block comment), the ``csv`` module.
"""

from __future__ import annotations

import copy
import csv
import hashlib
import io
import json
import xml.etree.ElementTree as ET
import zipfile

import kicad_netlist_reader
import kinparse
from python_calamine import CalamineWorkbook

from service import create_app
from service.examples import README_EXAMPLE


def _canonical(value):
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, int | float):
        return repr(float(value))
    if isinstance(value, dict):
        return {k: _canonical(v) for k, v in value.items()}
    return [_canonical(v) for v in value]


def expected_id(circuit: dict) -> str:
    text = json.dumps(_canonical(circuit), sort_keys=True, separators=(",", ":"))
    return hashlib.sha256(f"gainchain-design/1\n{text}".encode("ascii")).hexdigest()


def test_same_circuit_same_id_across_app_instances(strict_json):
    ids = []
    for _ in range(2):
        client = create_app({"TESTING": True}).test_client()
        ids.append(strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)["design_id"])
    assert ids[0] == ids[1]


def test_id_is_the_documented_hash_and_analyses_agree(client, strict_json):
    design = strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)
    assert design["design_id"] == expected_id(design["circuit"])
    assert len(design["design_id"]) == 64
    analysis = strict_json(client.post("/v1/analyses", json={"circuit": design["circuit"]}).data)
    assert analysis["design_id"] == design["design_id"]
    # integer spellings of the same values are the same circuit
    circuit = copy.deepcopy(design["circuit"])
    circuit["load_ohm"] = int(circuit["load_ohm"])
    again = strict_json(client.post("/v1/analyses", json={"circuit": circuit}).data)
    assert again["design_id"] == design["design_id"]


def _numeric_paths(value, path=()):
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _numeric_paths(item, path + (key,))
    elif isinstance(value, list):
        for i, item in enumerate(value):
            yield from _numeric_paths(item, path + (i,))
    elif isinstance(value, int | float) and not isinstance(value, bool) and value > 0:
        yield path


def test_any_part_value_changes_the_id(client, strict_json):
    design = strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)
    base = design["circuit"]
    seen = {design["design_id"]}
    paths = [p for p in _numeric_paths(base) if p[0] in ("stages", "bias", "c_out_f")]
    assert len(paths) >= 13  # 2 stages x 5 parts, divider (2), bypass, output capacitor
    for path in paths:
        circuit = copy.deepcopy(base)
        node = circuit
        for key in path[:-1]:
            node = node[key]
        node[path[-1]] = node[path[-1]] * 1.01
        resp = client.post("/v1/analyses", json={"circuit": circuit})
        assert resp.status_code == 200, path
        new = strict_json(resp.data)["design_id"]
        assert new not in seen, path
        seen.add(new)


def test_every_export_carries_the_id(client, strict_json):
    did = strict_json(client.post("/v1/designs", json=README_EXAMPLE).data)["design_id"]

    def get(kind):
        resp = client.post(f"/v1/exports/{kind}", json=README_EXAMPLE)
        assert resp.status_code == 200
        return resp.data

    rows = list(csv.DictReader(io.StringIO(get("bom.csv").decode())))
    assert {row["Design ID"] for row in rows} == {did}
    xlsx = get("bom.xlsx")
    core = ET.fromstring(zipfile.ZipFile(io.BytesIO(xlsx)).read("docProps/core.xml"))
    assert core.find("{http://purl.org/dc/elements/1.1/}identifier").text == did
    sheet = CalamineWorkbook.from_filelike(io.BytesIO(xlsx)).get_sheet_by_name("BOM")
    head, *lines, _total = sheet.to_python()
    assert {line[head.index("Design ID")] for line in lines} == {did}
    nl = kinparse.parse_netlist(get("netlist.net").decode())
    assert nl.sheets[0].comments[0].text == f"design_id {did}"
    reader = kicad_netlist_reader.netlist(io.BytesIO(get("netlist.xml")))
    assert reader.design.get("comment", "value") == f"design_id {did}"
    deck = get("netlist.cir").decode().splitlines()
    assert deck[1] == f"* design_id {did}"
