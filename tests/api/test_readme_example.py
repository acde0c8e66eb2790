"""The README's worked example is one body everywhere: README.md, `make serve`'s curl line
and the OpenAPI request example all show ``service.examples.README_EXAMPLE``, and it
designs to ``meets_target`` with the as-built corners inside the target (issue 2, Done when).
"""

from __future__ import annotations

import json
import re
from pathlib import Path

from service.examples import README_EXAMPLE

ROOT = Path(__file__).resolve().parents[2]


def _curl_bodies(text: str) -> list[dict]:
    """JSON bodies of the ``curl ... -d '{...}'`` commands of a text."""
    return [json.loads(m) for m in re.findall(r"-d '(\{.*?\})'", text, flags=re.S)]


def test_readme_shows_the_example_body():
    bodies = _curl_bodies((ROOT / "README.md").read_text(encoding="utf-8"))
    assert README_EXAMPLE in bodies


def test_openapi_offers_the_example(client, strict_json):
    spec = strict_json(client.get("/openapi.json").data)
    op = spec["paths"]["/v1/designs"]["post"]["requestBody"]["content"]["application/json"]
    assert README_EXAMPLE in [op.get("example")] + [e.get("value") for e in
                                                    op.get("examples", {}).values()]


def test_example_meets_its_target(client, strict_json):
    resp = client.post("/v1/designs", json=README_EXAMPLE)
    body = strict_json(resp.data)
    ab = body["performance"]["as_built"]
    target = README_EXAMPLE["target"]
    assert body["status"] == "meets_target"
    assert ab["f_low_hz"] <= target["f_low_hz"] and ab["f_high_hz"] >= target["f_high_hz"]
