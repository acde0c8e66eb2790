"""The OpenAPI description: valid (openapi-spec-validator, an independent implementation of
the OpenAPI 3 specification), complete for the routes the app serves, errors as problem+json."""

from __future__ import annotations

import json
import re

import pytest
from openapi_spec_validator import validate

from service.openapi import OPERATIONS, PROBLEM_MEDIA, get_spec, undocumented_routes

from .conftest import make_app


@pytest.fixture(scope="module")
def plain_app():
    return make_app(test_routes=False)


@pytest.fixture(scope="module")
def spec(plain_app):
    resp = plain_app.test_client().get("/openapi.json")
    assert resp.status_code == 200 and resp.mimetype == "application/json"
    return json.loads(resp.data)


def test_spec_validates(spec):
    validate(spec)  # raises OpenAPIValidationError on any violation


def test_spec_does_not_depend_on_configuration(spec):
    # Issue 10: every /v1 operation documents 401 (and the front's 429) whether or not keys
    # are configured; the document is the same either way.
    app = make_app({"GAINCHAIN_API_KEYS": "k"}, test_routes=False)
    doc = json.loads(app.test_client().get("/openapi.json").data)
    validate(doc)
    assert doc == spec
    assert doc["components"]["securitySchemes"]["bearerAuth"]["scheme"] == "bearer"
    for path, item in doc["paths"].items():
        for op in item.values():
            public = path in {"/healthz", "/readyz", "/metrics", "/openapi.json"}
            assert ("401" in op["responses"]) is not public, path
            assert ("429" in op["responses"]) is not public, path
            assert ("security" in op) is not public, path
            # A request the front or gunicorn cannot read is refused before any route.
            assert {"400", "414", "431", "500"} <= set(op["responses"]), path


def test_opamp_listing_documents_its_errors_as_problem_json(spec):
    responses = spec["paths"]["/v1/opamps"]["get"]["responses"]
    errors = {status: resp for status, resp in responses.items() if int(status) >= 400}
    assert {"400", "401", "414", "429", "431", "500"} <= set(errors)
    for resp in errors.values():
        assert list(resp["content"]) == [PROBLEM_MEDIA]


def test_every_route_but_docs_is_documented(plain_app, spec):
    assert undocumented_routes(plain_app) == []
    served = {re.sub(r"<(?:[^:>]+:)?([^>]+)>", r"{\1}", rule.rule)
              for rule in plain_app.url_map.iter_rules()} - {"/docs", "/static/{filename}"}
    assert served == set(spec["paths"])
    assert "/docs" not in spec["paths"]
    for meta in ("/healthz", "/readyz", "/metrics", "/openapi.json"):
        assert meta in spec["paths"]


def test_every_error_status_is_problem_json_with_the_problem_schema(spec):
    refs = set()
    for item in spec["paths"].values():
        for op in item.values():
            for status, resp in op["responses"].items():
                if int(status) >= 400:
                    content = resp["content"]
                    assert list(content) == [PROBLEM_MEDIA]
                    refs.add(content[PROBLEM_MEDIA]["schema"]["$ref"])
    assert len(refs) == 1  # one problem schema for every error
    problem = spec["components"]["schemas"][refs.pop().rsplit("/", 1)[-1]]
    assert {"type", "title", "status", "detail"} <= set(problem["properties"])
    assert set(problem["required"]) >= {"type", "title", "status", "detail"}


def test_problem_schema_accepts_real_problem_bodies(plain_app, spec):
    # The documented problem schema validates bodies the app really sends (jsonschema's
    # OpenAPI 3.0 validator from openapi-schema-validator, an independent implementation).
    from openapi_schema_validator import OAS30Validator

    client = plain_app.test_client()
    bodies = [client.get("/nope").get_json(),
              client.post("/v1/designs", data=b"{", content_type="application/json").get_json(),
              client.post("/v1/designs", json={"target": 1}).get_json()]
    ref = spec["paths"]["/v1/designs"]["post"]["responses"]["422"]["content"][PROBLEM_MEDIA]
    schema = dict(ref["schema"], components=spec["components"])
    for body in bodies:
        OAS30Validator(schema).validate(body)


def test_no_schema_is_pending(spec):
    pending = spec["info"].get("x-pending-schemas")
    if pending:
        pytest.skip(f"response schemas not published yet, documented as any object: {pending}")


def test_json_bodies_declare_their_errors(spec):
    for item in spec["paths"].values():
        for op in item.values():
            if "requestBody" in op:
                for status in ("400", "413", "415", "422"):
                    assert status in op["responses"], op["operationId"]


def test_file_media_types(spec):
    media = {mt for item in spec["paths"].values() for op in item.values()
             for resp in op["responses"].values() for mt in resp.get("content", {})}
    assert {"application/json", PROBLEM_MEDIA, "text/plain"} <= media
    expected_if_served = {"/v1/plots/bode.png": "image/png", "/v1/plots/bode.svg": "image/svg+xml",
                          "/v1/plots/schematic.png": "image/png",
                          "/v1/plots/schematic.svg": "image/svg+xml"}
    for path, mt in expected_if_served.items():
        if path in spec["paths"]:
            assert mt in spec["paths"][path]["post"]["responses"]["200"]["content"]


def test_schematic_operations_have_their_own_ids(spec):
    ids = {path: spec["paths"][path]["post"]["operationId"]
           for path in ("/v1/plots/schematic.svg", "/v1/plots/schematic.png")}
    assert ids == {"/v1/plots/schematic.svg": "drawSchematicSvg",
                   "/v1/plots/schematic.png": "drawSchematicPng"}
    every_id = [op["operationId"] for item in spec["paths"].values() for op in item.values()]
    assert len(every_id) == len(set(every_id))


def test_table_has_one_row_per_operation():
    keys = [(op.path, op.method) for op in OPERATIONS]
    assert len(keys) == len(set(keys))


def test_spec_is_built_once_per_app(plain_app):
    assert get_spec(plain_app) is get_spec(plain_app)


def test_docs_page_is_self_contained(plain_app, spec):
    resp = plain_app.test_client().get("/docs")
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    html = resp.get_data(as_text=True)
    assert "<script" not in html.lower()
    # No run-time download: no external stylesheets, scripts, images or fonts.
    assert not re.search(r"""(?:src|href)\s*=\s*["']?(?:https?:)?//""", html)
    for path in spec["paths"]:
        assert path in html


def test_every_export_kind_and_its_media_type_is_documented(spec):
    from exporters.formats import KINDS, MIME_TYPES

    op = spec["paths"]["/v1/exports/{kind}"]["post"]
    kind_param = [p for p in op["parameters"] if p["name"] == "kind"][0]
    assert sorted(kind_param["schema"]["enum"]) == sorted(KINDS)
    documented = set(op["responses"]["200"]["content"])
    for mime in MIME_TYPES.values():
        assert mime.split(";")[0].strip() in documented, mime


def test_request_examples_are_accepted_by_the_service(plain_app, spec):
    # Every example body in the spec is one the service designs successfully.
    client = plain_app.test_client()
    checked = 0
    for path, item in spec["paths"].items():
        for method, op in item.items():
            media = op.get("requestBody", {}).get("content", {}).get("application/json", {})
            if "example" in media:
                url = path.replace("{kind}", "bom.csv")
                resp = client.open(url, method=method.upper(), json=media["example"])
                assert resp.status_code == 200, (path, resp.data[:300])
                checked += 1
    assert checked >= 4
