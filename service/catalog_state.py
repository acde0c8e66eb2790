"""The op-amp catalog of a running app: built-ins, optionally replaced or extended by an
organisation's approved-parts file (``GAINCHAIN_OPAMP_CATALOG``, JSON).

File format: ``{"opamps": [<op-amp object>, ...]}``, each with an ``id``; the objects are
validated by ``schemas.opamp.OpAmpSchema`` (so ``manufacturer`` and ``mpn`` of real parts
come from the organisation, never from us). ``GAINCHAIN_OPAMP_CATALOG_MODE`` is
``extend`` (default: file entries are added, and replace built-ins of the same id) or
``replace`` (only the file's entries).
"""

from __future__ import annotations

import json

from flask import Flask, current_app
from marshmallow import ValidationError

from schemas.opamp import OpAmpSchema
from service.engine.model.catalog import BUILTIN_OPAMPS
from service.engine.model.circuit import OpAmp

EXTENSION_KEY = "gainchain_catalog"


def load_catalog_file(path: str) -> list[OpAmp]:
    """Read and validate an approved-parts file.

    :raise RuntimeError: the file is missing, not JSON, or holds an invalid entry (the
        service refuses to start rather than serve a half-read catalog).
    """
    try:
        with open(path, encoding="utf-8") as fh:
            data = json.load(fh)
    except (OSError, ValueError) as exc:
        raise RuntimeError(f"cannot read the op-amp catalog {path!r}: {exc}") from exc
    entries = data.get("opamps") if isinstance(data, dict) else None
    if not isinstance(entries, list):
        raise RuntimeError(f"{path!r}: expected {{\"opamps\": [...]}}")
    out = []
    for i, entry in enumerate(entries):
        try:
            opamp = OpAmpSchema().load(entry)
        except ValidationError as exc:
            raise RuntimeError(f"{path!r}: entry {i} is invalid: {exc.messages}") from exc
        if not opamp.id:
            raise RuntimeError(f"{path!r}: entry {i} has no id")
        out.append(opamp)
    return out


def build_catalog(path: str | None, mode: str = "extend") -> dict[str, OpAmp]:
    catalog: dict[str, OpAmp] = {}
    if not (path and mode == "replace"):
        catalog.update({op.id: op for op in BUILTIN_OPAMPS})
    if path:
        catalog.update({op.id: op for op in load_catalog_file(path)})
    return catalog


def load_catalog_into(app: Flask) -> None:
    app.extensions[EXTENSION_KEY] = build_catalog(app.config.get("GAINCHAIN_OPAMP_CATALOG"),
                                                  app.config.get("GAINCHAIN_OPAMP_CATALOG_MODE",
                                                                 "extend"))


def current_catalog() -> dict[str, OpAmp]:
    return current_app.extensions[EXTENSION_KEY]
