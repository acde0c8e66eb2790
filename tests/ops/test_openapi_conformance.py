"""Real success and error bodies validate against the documented schemas.

The fuzzer (test_schemathesis.py) mostly produces requests that are rejected (random
catalog ids, random circuits), so this file sends known-good requests (the README scenario
and variants) and validates each reply with openapi-schema-validator's OAS 3.0 validator
against the schema /openapi.json documents for that path, status and media type.
"""

from __future__ import annotations

import json
import re

import pytest
from openapi_schema_validator import OAS30Validator

from service.examples import README_EXAMPLE

from .conftest import make_app


@pytest.fixture(scope="module")
def served():
    app = make_app(test_routes=False)
    client = app.test_client()
    spec = json.loads(client.get("/openapi.json").data)
    return client, spec


def _documented_schema(spec, path: str, method: str, status: int, mimetype: str) -> dict:
    for template, item in spec["paths"].items():
        pattern = "^" + re.sub(r"\\{[^}]+\\}", "[^/]+", re.escape(template)) + "$"
        if re.match(pattern, path) and method.lower() in item:
            responses = item[method.lower()]["responses"]
            assert str(status) in responses, f"{method} {path}: {status} not documented"
            content = responses[str(status)]["content"]
            assert mimetype in content, f"{method} {path} {status}: {mimetype} not documented"
            return dict(content[mimetype]["schema"], components=spec["components"])
    raise AssertionError(f"{method} {path} is not in the spec")


def _check(served, method: str, path: str, expected_status: int, **kwargs):
    client, spec = served
    resp = client.open(path, method=method, **kwargs)
    assert resp.status_code == expected_status, resp.data[:300]
    schema = _documented_schema(spec, path.split("?")[0], method, resp.status_code,
                                resp.mimetype)
    if resp.mimetype.endswith("json"):
        OAS30Validator(schema).validate(json.loads(resp.data))
    return resp


def test_meta_endpoints(served):
    _check(served, "GET", "/healthz", 200)
    _check(served, "GET", "/readyz", 200)
    _check(served, "GET", "/metrics", 200)
    _check(served, "GET", "/openapi.json", 200)


def test_catalog(served):
    listing = _check(served, "GET", "/v1/opamps", 200).get_json()
    first = listing["opamps"][0]["id"]
    _check(served, "GET", f"/v1/opamps/{first}", 200)
    _check(served, "GET", "/v1/opamps/no-such-part", 404)


@pytest.mark.parametrize("change", [
    {},
    {"topology": "inverting"},
    {"supply": {"kind": "dual", "v_pos": 2.5, "v_neg": -2.5}},
    {"stages": 3},
    {"target": {"gain_db": 80, "f_low_hz": 10, "f_high_hz": 2000000}},  # likely not met
])
def test_designs(served, change):
    _check(served, "POST", "/v1/designs", 200, json=dict(README_EXAMPLE, **change))


def test_design_errors(served):
    _check(served, "POST", "/v1/designs", 422, json=dict(README_EXAMPLE, gian_db=60))
    _check(served, "POST", "/v1/designs", 400, data=b"{", content_type="application/json")
    _check(served, "POST", "/v1/designs", 415, data=b"{}", content_type="text/plain")


def test_analysis_round_trip(served):
    client, _ = served
    design = client.post("/v1/designs", json=README_EXAMPLE).get_json()
    _check(served, "POST", "/v1/analyses", 200,
           json={"circuit": design["circuit"], "input_peak_v": 0.001,
                 "target": design["target"]})


def test_batch(served):
    _check(served, "POST", "/v1/designs/batch", 200,
           json={"requests": [README_EXAMPLE, dict(README_EXAMPLE, opamp="no-such-part")]})


@pytest.mark.parametrize("kind", ["bom.csv", "bom.xlsx", "netlist.cir", "netlist.net",
                                  "netlist.xml"])
def test_exports(served, kind):
    _check(served, "POST", f"/v1/exports/{kind}", 200, json=README_EXAMPLE)


@pytest.mark.parametrize("plot", ["bode", "schematic"])
@pytest.mark.parametrize("ext", ["svg", "png"])
def test_plots(served, plot, ext):
    _check(served, "POST", f"/v1/plots/{plot}.{ext}", 200, json=README_EXAMPLE)
