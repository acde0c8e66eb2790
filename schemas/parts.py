"""The parts library file (``GAINCHAIN_PARTS_LIBRARY``) and GET /v1/parts.

File: ``{"currency": "<ISO 4217 code>", "parts": [<stocked part>, ...]}``; unknown fields are
refused, like everywhere else.
"""

from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range, Regexp

from exporters.stock import CAPACITOR, CONNECTOR, DIELECTRICS, KINDS, OPAMP, RESISTOR, StockPart
from schemas.fields import OutFloat, StrictFloat

#: ISO 4217 alphabetic codes are three capital letters.
CURRENCY = Regexp(r"^[A-Z]{3}$", error="an ISO 4217 code: three capital letters (EUR, USD)")


class StockPartSchema(Schema):
    kind = fields.String(required=True, validate=OneOf(KINDS))
    value = StrictFloat(validate=Range(min=1e-15, max=1e12))
    tolerance_pct = StrictFloat(validate=Range(min=0, max=100))
    package = fields.String(required=True, validate=Length(min=1, max=80))
    dielectric = fields.String(validate=OneOf(sorted(DIELECTRICS)))
    voltage_v = StrictFloat(validate=Range(min=0, max=10_000, min_inclusive=False))
    opamp_id = fields.String(validate=Length(min=1, max=80))
    internal_pn = fields.String(required=True, validate=Length(min=1, max=80))
    manufacturer = fields.String(load_default="", validate=Length(max=80))
    mpn = fields.String(load_default="", validate=Length(max=80))
    unit_cost = StrictFloat(validate=Range(min=0, max=1e9))

    #: kind -> (required fields, refused fields) beyond kind, package and internal_pn.
    _FIELDS = {
        RESISTOR: (("value", "tolerance_pct"), ("dielectric", "voltage_v", "opamp_id")),
        CAPACITOR: (("value", "tolerance_pct", "dielectric", "voltage_v"), ("opamp_id",)),
        OPAMP: ((), ("value", "tolerance_pct", "dielectric", "voltage_v")),
        CONNECTOR: ((), ("value", "tolerance_pct", "dielectric", "voltage_v", "opamp_id")),
    }

    @validates_schema
    def _by_kind(self, data, **kwargs):
        kind = data.get("kind")
        if kind not in self._FIELDS:
            return
        required, refused = self._FIELDS[kind]
        for key in required:
            if key not in data:
                raise ValidationError(f"required for a {kind}", key)
        for key in refused:
            if key in data:
                raise ValidationError(f"a {kind} has no {key}", key)
        if kind == OPAMP and not (data.get("mpn") or data.get("opamp_id")):
            raise ValidationError("an opamp needs its mpn or its catalog opamp_id", "mpn")

    @post_load
    def _make(self, data, **kwargs) -> StockPart:
        return StockPart(**data)


class PartsLibraryFileSchema(Schema):
    currency = fields.String(required=True, validate=CURRENCY)
    parts = fields.List(fields.Raw(), required=True)


class StockPartOutSchema(Schema):
    kind = fields.String()
    value = OutFloat()
    tolerance_pct = OutFloat()
    package = fields.String()
    dielectric = fields.String(allow_none=True)
    voltage_v = OutFloat()
    opamp_id = fields.String(allow_none=True)
    internal_pn = fields.String()
    manufacturer = fields.String()
    mpn = fields.String()
    unit_cost = OutFloat()


class PartsListSchema(Schema):
    currency = fields.String(allow_none=True, metadata={
        "description": "ISO 4217 code of the prices; null when no library is loaded"})
    parts = fields.List(fields.Nested(StockPartOutSchema), required=True)
