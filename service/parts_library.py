"""The stocked-parts library of a running app (``GAINCHAIN_PARTS_LIBRARY``, JSON).

File format: ``{"currency": "EUR", "parts": [{"kind": "resistor" | "capacitor" | "opamp" |
"connector", "package", "internal_pn", "value" and "tolerance_pct" (resistors and
capacitors), "dielectric" and "voltage_v" (capacitors), "opamp_id" or "mpn" (op-amps),
optional "manufacturer", "mpn", "unit_cost"}, ...]}``, validated by ``schemas.parts``;
internal part numbers are unique. A bad file stops start-up with a message naming the entry
(as ``service.catalog_state`` does for the op-amp catalog). Without the variable there is
no library: BOM lines are all unstocked and ``bom_cost`` is null.
"""

from __future__ import annotations

import json

from flask import Flask, current_app
from marshmallow import ValidationError

from exporters.stock import PartsLibrary
from schemas.parts import PartsLibraryFileSchema, StockPartSchema

EXTENSION_KEY = "gainchain_parts_library"


def load_parts_library(path: str) -> PartsLibrary:
    """Read and validate a parts library file.

    :raise RuntimeError: the file is missing, not JSON, or holds an invalid entry.
    """
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError) as exc:
        raise RuntimeError(f"cannot read the parts library {path!r}: {exc}") from exc
    if not isinstance(data, dict):
        raise RuntimeError(f"{path!r}: expected {{\"currency\": ..., \"parts\": [...]}}")
    try:
        top = PartsLibraryFileSchema().load(data)
    except ValidationError as exc:
        raise RuntimeError(f"parts library {path!r} is invalid: {exc.messages}") from exc
    parts = []
    seen: dict[str, int] = {}
    for i, entry in enumerate(top["parts"]):
        pn = entry.get("internal_pn") if isinstance(entry, dict) else None
        label = f"parts[{i}]" + (f" (internal_pn {pn!r})" if isinstance(pn, str) else "")
        try:
            part = StockPartSchema().load(entry)
        except ValidationError as exc:
            raise RuntimeError(f"parts library {path!r}: {label} is invalid: "
                               f"{exc.messages}") from exc
        if part.internal_pn in seen:
            raise RuntimeError(f"parts library {path!r}: {label} repeats the internal_pn of "
                               f"parts[{seen[part.internal_pn]}]")
        seen[part.internal_pn] = i
        parts.append(part)
    return PartsLibrary(currency=top["currency"], parts=tuple(parts))


def load_library_into(app: Flask) -> None:
    path = app.config.get("GAINCHAIN_PARTS_LIBRARY")
    app.extensions[EXTENSION_KEY] = load_parts_library(path) if path else None


def current_library() -> PartsLibrary | None:
    return current_app.extensions.get(EXTENSION_KEY)
