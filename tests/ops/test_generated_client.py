"""A client generated from /openapi.json by openapi-python-client (an independent OpenAPI 3
client generator) works: every operation is named after what it does, and every JSON
operation called through the generated code returns its typed model; a 422 comes back as
the typed problem document.

The client is generated into a temporary directory inside the test and talks to the app
through httpx's WSGI transport (no server, no network).
"""

from __future__ import annotations

import importlib
import json
import re
import subprocess
import sys

import httpx
import pytest

from service.examples import README_EXAMPLE

from .conftest import make_app

pytestmark = pytest.mark.slow

EXPECTED_FUNCTIONS = {
    "meta": {"check_liveness", "check_readiness", "get_metrics", "get_open_api_document"},
    "opamps": {"list_opamps", "get_opamp"},
    "parts": {"list_parts"},
    "designs": {"create_design", "create_design_batch", "explore_designs"},
    "analyses": {"analyse_circuit"},
    "exports": {"export_design"},
}


@pytest.fixture(scope="module")
def generated(tmp_path_factory):
    app = make_app(test_routes=False)
    spec = app.test_client().get("/openapi.json").get_json()
    work = tmp_path_factory.mktemp("client")
    (work / "openapi.json").write_text(json.dumps(spec), encoding="utf-8")
    (work / "config.yaml").write_text("post_hooks: []\nproject_name_override: gc-client\n"
                                      "package_name_override: gc_client\n", encoding="utf-8")
    out = subprocess.run(
        [sys.executable, "-m", "openapi_python_client", "generate", "--path", "openapi.json",
         "--output-path", "out", "--config", "config.yaml"],
        cwd=work, capture_output=True, text=True, timeout=300)
    assert out.returncode == 0, out.stdout + out.stderr
    sys.path.insert(0, str(work / "out"))
    try:
        for name in [m for m in sys.modules if m == "gc_client" or m.startswith("gc_client.")]:
            del sys.modules[name]
        package = importlib.import_module("gc_client")
        yield app, spec, package, work / "out" / "gc_client"
    finally:
        sys.path.remove(str(work / "out"))


def test_operation_ids_say_what_they_do(generated):
    _, spec, _, root = generated
    ids = [op["operationId"] for item in spec["paths"].values() for op in item.values()]
    assert len(ids) == len(set(ids))
    for op_id in ids:
        # camelCase verbs, never the path-derived default (post_v1_designs, get_v1_opamps_...)
        assert re.fullmatch(r"[a-z]+(?:[A-Z][a-z0-9]*)+", op_id), op_id
        assert "v1" not in op_id.lower()
    for tag, functions in EXPECTED_FUNCTIONS.items():
        found = {p.stem for p in (root / "api" / tag).glob("*.py")} - {"__init__"}
        assert functions <= found, (tag, found)


def _client(generated):
    app, _, package, _ = generated
    client_mod = importlib.import_module("gc_client.client")
    return client_mod.Client(base_url="http://testserver",
                             httpx_args={"transport": httpx.WSGITransport(app=app)},
                             raise_on_unexpected_status=True)


def test_every_json_operation_through_the_generated_client(generated):
    _, spec, _, _ = generated
    api = lambda mod: importlib.import_module(f"gc_client.api.{mod}")  # noqa: E731
    models = importlib.import_module("gc_client.models")
    client = _client(generated)
    called = set()

    def call(module, **kwargs):
        result = api(module).sync_detailed(client=client, **kwargs)
        called.add(module.rsplit(".", 1)[-1])
        assert result.status_code == 200, (module, result.content[:300])
        assert result.parsed is not None, module
        return result.parsed

    assert isinstance(call("meta.check_liveness"), models.Health)
    assert isinstance(call("meta.check_readiness"), models.Ready)
    call("meta.get_open_api_document")
    listing = call("opamps.list_opamps")
    assert isinstance(listing, models.OpAmpList) and listing.opamps
    one = call("opamps.get_opamp", opamp_id="gc-cmos-rr-10m")
    assert isinstance(one, models.OpAmpOut) and one.gbw_hz == 10e6
    parts = call("parts.list_parts")
    assert isinstance(parts, models.PartsList) and parts.parts == []

    design = call("designs.create_design", body=models.DesignRequest.from_dict(README_EXAMPLE))
    assert isinstance(design, models.DesignResponse)
    assert design.status == models.DesignResponseStatus.MEETS_TARGET
    assert len(design.design_id) == 64
    batch = call("designs.create_design_batch", body=models.CreateDesignBatchBody.from_dict(
        {"requests": [README_EXAMPLE]}))
    assert batch.results[0].status == 200
    assert batch.results[0].design.design_id == design.design_id
    explore_body = {k: v for k, v in README_EXAMPLE.items() if k != "opamp"}
    explored = call("designs.explore_designs",
                    body=models.ExplorationRequest.from_dict(explore_body))
    assert isinstance(explored, models.ExplorationResponse)
    assert design.design_id in {c.design_id for c in explored.candidates}
    analysis = call("analyses.analyse_circuit", body=models.AnalysisRequest.from_dict(
        {"circuit": design.circuit.to_dict()}))
    assert isinstance(analysis, models.AnalysisResponse)
    assert analysis.design_id == design.design_id

    json_ops = {op["operationId"] for item in spec["paths"].values() for op in item.values()
                if "application/json" in op["responses"]["200"].get("content", {})}
    snake = {re.sub(r"(?<!^)([A-Z])", r"_\1", op_id).lower() for op_id in json_ops}
    assert snake == called  # each JSON operation was called through the generated code


def test_a_422_comes_back_as_a_problem_object(generated):
    models = importlib.import_module("gc_client.models")
    create = importlib.import_module("gc_client.api.designs.create_design")
    bad = dict(README_EXAMPLE, target={"gain_db": 60, "f_low_hz": 2000, "f_high_hz": 1000})
    result = create.sync_detailed(client=_client(generated),
                                  body=models.DesignRequest.from_dict(bad))
    assert result.status_code == 422
    assert "Problem" in type(result.parsed).__name__  # the documented problem model
    assert result.parsed.status == 422 and "f_low_hz" in result.parsed.detail
