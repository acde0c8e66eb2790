"""Render an OpenAPI document as one self-contained HTML page (no scripts, no downloads)."""

from __future__ import annotations

import json
from html import escape

_STYLE = """
body{font-family:system-ui,sans-serif;max-width:60rem;margin:2rem auto;padding:0 1rem;
line-height:1.4;color:#222}
h2{border-bottom:1px solid #ccc;margin-top:2.5rem}
.op{border:1px solid #ddd;border-radius:6px;padding:.5rem 1rem;margin:1rem 0}
.m{font-weight:bold;font-family:monospace;padding:.1rem .4rem;border-radius:3px;background:#eef}
code,pre{font-family:monospace;background:#f6f6f6}
pre{padding:.5rem;overflow:auto;font-size:.85rem}
table{border-collapse:collapse}td,th{border:1px solid #ddd;padding:.2rem .5rem;text-align:left}
"""


def _ref_name(schema: dict) -> str:
    if "$ref" in schema:
        return schema["$ref"].rsplit("/", 1)[-1]
    if schema.get("type") == "array" and isinstance(schema.get("items"), dict):
        return "array of " + _ref_name(schema["items"])
    return schema.get("format") or schema.get("type") or "any"


def _link(schema: dict) -> str:
    name = _ref_name(schema)
    if "$ref" in schema:
        return f'<a href="#schema-{escape(name)}">{escape(name)}</a>'
    return escape(name)


def _operation(path: str, method: str, op: dict) -> str:
    parts = [f'<div class="op"><p><span class="m">{escape(method.upper())}</span> '
             f'<code>{escape(path)}</code> {escape(op.get("summary", ""))}</p>']
    if op.get("description"):
        parts.append(f"<p>{escape(op['description'])}</p>")
    if op.get("security"):
        parts.append("<p>Needs <code>Authorization: Bearer &lt;key&gt;</code>.</p>")
    for param in op.get("parameters", []):
        parts.append(f"<p>Path parameter <code>{escape(param['name'])}</code>: "
                     f"{escape(json.dumps(param.get('schema', {})))} "
                     f"{escape(param.get('description', ''))}</p>")
    body = op.get("requestBody")
    if body:
        media = ", ".join(f"{escape(mt)} ({_link(c.get('schema', {}))})"
                          for mt, c in body["content"].items())
        parts.append(f"<p>Request body: {media}</p>")
    rows = []
    for status, resp in op.get("responses", {}).items():
        media = ", ".join(f"{escape(mt)} ({_link(c.get('schema', {}))})"
                          for mt, c in resp.get("content", {}).items())
        rows.append(f"<tr><td>{escape(status)}</td><td>{escape(resp.get('description', ''))}"
                    f"</td><td>{media}</td></tr>")
    parts.append("<table><tr><th>Status</th><th>Meaning</th><th>Body</th></tr>"
                 + "".join(rows) + "</table></div>")
    return "".join(parts)


def render(spec: dict) -> str:
    info = spec.get("info", {})
    title = f"{info.get('title', 'API')} {info.get('version', '')}".strip()
    out = [f"<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\">"
           f"<title>{escape(title)} API</title><style>{_STYLE}</style></head><body>",
           f"<h1>{escape(title)} API</h1>",
           f"<pre>{escape(info.get('description', ''))}</pre>",
           '<p>Machine-readable description: <a href="/openapi.json">/openapi.json</a></p>',
           "<h2>Operations</h2>"]
    for path, item in spec.get("paths", {}).items():
        for method, op in item.items():
            out.append(_operation(path, method, op))
    out.append("<h2>Schemas</h2>")
    for name, schema in spec.get("components", {}).get("schemas", {}).items():
        out.append(f'<h3 id="schema-{escape(name)}">{escape(name)}</h3>'
                   f"<pre>{escape(json.dumps(schema, indent=2, sort_keys=True))}</pre>")
    out.append("</body></html>")
    return "\n".join(out)
