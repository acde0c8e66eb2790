"""``POST /v1/plots/schematic.svg`` and ``.png`` end to end through the Flask test client.

The headline check (issue 12, item 5): for design requests of both topologies and both
supplies, buffered and unbuffered bias, and op-amps of 1, 2 and 4 channels per package
(spare units included), every reference of the BOM that ``POST /v1/exports/bom.csv`` returns
for the same body (read back with the standard library's ``csv`` module) appears as a text
of the SVG (parsed with the standard library's ``xml.etree``). PNG sizes are read with
Pillow. Bad inputs are RFC 9457 problem details (from memory).
"""

from __future__ import annotations

import csv
import io
import re
import xml.etree.ElementTree as ET

import pytest
from design_cases import DESIGNS, README_SCENARIO
from PIL import Image

PROBLEM = "application/problem+json"
SVG_NS = "{http://www.w3.org/2000/svg}"


def svg_texts(data: bytes) -> list[str]:
    root = ET.fromstring(data)  # reference: xml.etree, the SVG must be well-formed XML
    assert root.tag == SVG_NS + "svg"
    return ["".join(t.itertext()).strip() for t in root.iter(SVG_NS + "text")]


def bom_refs(client, body) -> list[str]:
    resp = client.post("/v1/exports/bom.csv", json=body)
    assert resp.status_code == 200
    rows = csv.DictReader(io.StringIO(resp.get_data(as_text=True)))  # reference: csv module
    return [ref for row in rows for ref in row["Reference"].split(",")]


def test_the_design_cases_span_the_asked_variety(client):
    seen = set()
    for body in DESIGNS.values():
        circuit = client.post("/v1/designs", json=body).get_json()["circuit"]
        bias = circuit["bias"]
        seen.add(("topology", circuit["topology"]))
        seen.add(("supply", circuit["supply"]["kind"]))
        seen.add(("channels", circuit["opamp"]["channels_per_package"]))
        if bias is not None:
            seen.add(("buffered", bias["buffered"]))
    assert {("topology", "non_inverting"), ("topology", "inverting"), ("supply", "single"),
            ("supply", "dual"), ("buffered", True), ("buffered", False), ("channels", 1),
            ("channels", 2), ("channels", 4)} <= seen


@pytest.mark.parametrize("key", sorted(DESIGNS))
def test_schematic_references_equal_the_bom_references(client, key):
    body = DESIGNS[key]
    resp = client.post("/v1/plots/schematic.svg", json=body)
    assert resp.status_code == 200 and resp.mimetype == "image/svg+xml"
    texts = svg_texts(resp.data)
    refs = bom_refs(client, body)
    assert refs
    assert [ref for ref in refs if ref not in texts] == []
    # and nothing drawn looks like a reference the BOM does not have
    drawn = {t for t in texts if re.fullmatch(r"[RCJUL]\d+", t)}
    assert drawn == set(refs)


def test_circuit_body_gives_the_same_sheet_as_the_design_request(client):
    design = client.post("/v1/designs", json=README_SCENARIO).get_json()
    by_request = client.post("/v1/plots/schematic.svg", json=README_SCENARIO)
    by_circuit = client.post("/v1/plots/schematic.svg",
                             json={"name": README_SCENARIO["name"], "circuit": design["circuit"],
                                   "target": design["target"]})
    assert by_circuit.status_code == 200
    assert by_circuit.data == by_request.data


def test_same_request_same_bytes(client):
    for ext in ("svg", "png"):
        first = client.post(f"/v1/plots/schematic.{ext}", json=README_SCENARIO)
        second = client.post(f"/v1/plots/schematic.{ext}", json=README_SCENARIO)
        assert first.status_code == 200 and first.data == second.data


@pytest.mark.parametrize("query,size", [("?width_px=640&height_px=400", (640, 400)),
                                         ("?width_px=200&height_px=4000", (200, 4000))])
def test_png_opens_with_the_asked_size(client, query, size):
    resp = client.post(f"/v1/plots/schematic.png{query}", json=DESIGNS["dual_inv_5"])
    assert resp.status_code == 200 and resp.mimetype == "image/png"
    image = Image.open(io.BytesIO(resp.data))  # reference: Pillow's PNG reader
    assert image.format == "PNG" and image.size == size


def test_png_default_and_one_sided_sizes(client):
    natural = Image.open(io.BytesIO(
        client.post("/v1/plots/schematic.png", json=README_SCENARIO).data))
    w, h = natural.size
    assert 200 <= w <= 4000 and 200 <= h <= 4000
    wide = Image.open(io.BytesIO(
        client.post("/v1/plots/schematic.png?width_px=1000", json=README_SCENARIO).data))
    assert wide.size[0] == 1000
    assert wide.size[1] == pytest.approx(1000 * h / w, abs=2)


@pytest.mark.parametrize("query", ["width_px=199", "height_px=4001", "width_px=abc",
                                   "width_px=-5", "height_px=1.5"])
def test_bad_size_is_422_naming_the_parameter(client, strict_json, query):
    resp = client.post(f"/v1/plots/schematic.png?{query}", json=README_SCENARIO)
    assert resp.status_code == 422 and resp.mimetype == PROBLEM
    assert query.split("=")[0] in strict_json(resp.data)["errors"]["query"]


@pytest.mark.parametrize("body,field", [
    ({"circuit": 1}, "circuit"),
    ({"circuit": {}}, "circuit"),
    ({"name": "x" * 81, "target": {"gain_db": 40, "f_low_hz": 20, "f_high_hz": 2e4},
      "supply": {"kind": "single", "v_pos": 5}, "opamp": "gc-cmos-rr-10m"}, "name"),
    (dict(README_SCENARIO, opamp="gc-no-such-part"), "opamp"),
    (dict(README_SCENARIO, colour="red"), "colour"),
    ([README_SCENARIO], "_schema"),
])
def test_bad_bodies_are_422_problems(client, strict_json, body, field):
    resp = client.post("/v1/plots/schematic.svg", json=body)
    assert resp.status_code == 422 and resp.mimetype == PROBLEM
    problem = strict_json(resp.data)
    assert problem["status"] == 422 and field in problem["errors"]


def test_not_json_is_400_or_415(client):
    bad = client.post("/v1/plots/schematic.svg", data="{", content_type="application/json")
    assert bad.status_code == 400 and bad.mimetype == PROBLEM
    plain = client.post("/v1/plots/schematic.png", data="x", content_type="text/plain")
    assert plain.status_code == 415 and plain.mimetype == PROBLEM
    assert client.get("/v1/plots/schematic.svg").status_code == 405
