"""The parts library file (``GAINCHAIN_PARTS_LIBRARY``) and GET /v1/parts.

File: ``{"currency": "<ISO 4217 code>", "parts": [<stocked part>, ...]}``; unknown fields are
refused, like everywhere else.
"""

from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range, Regexp

from exporters.stock import CAPACITOR, DIELECTRICS, KINDS, RESISTOR, StockPart
from schemas.fields import OutFloat, StrictFloat

#: ISO 4217 alphabetic codes are three capital letters.
CURRENCY = Regexp(r"^[A-Z]{3}$", error="an ISO 4217 code: three capital letters (EUR, USD)")


class StockPartSchema(Schema):
    kind = fields.String(required=True, validate=OneOf(KINDS))
    value = StrictFloat(required=True, validate=Range(min=1e-15, max=1e12))
    tolerance_pct = StrictFloat(required=True, validate=Range(min=0, max=100))
    package = fields.String(required=True, validate=Length(min=1, max=80))
    dielectric = fields.String(validate=OneOf(sorted(DIELECTRICS)))
    voltage_v = StrictFloat(validate=Range(min=0, max=10_000, min_inclusive=False))
    internal_pn = fields.String(required=True, validate=Length(min=1, max=80))
    manufacturer = fields.String(load_default="", validate=Length(max=80))
    mpn = fields.String(load_default="", validate=Length(max=80))
    unit_cost = StrictFloat(validate=Range(min=0, max=1e9))

    @validates_schema
    def _by_kind(self, data, **kwargs):
        if data.get("kind") == CAPACITOR:
            for key in ("dielectric", "voltage_v"):
                if key not in data:
                    raise ValidationError("required for a capacitor", key)
        if data.get("kind") == RESISTOR:
            for key in ("dielectric", "voltage_v"):
                if key in data:
                    raise ValidationError("only capacitors have it", key)

    @post_load
    def _make(self, data, **kwargs) -> StockPart:
        return StockPart(**data)


class PartsLibraryFileSchema(Schema):
    currency = fields.String(required=True, validate=CURRENCY)
    parts = fields.List(fields.Raw(), required=True)


class StockPartOutSchema(Schema):
    kind = fields.String()
    value = fields.Float()
    tolerance_pct = fields.Float()
    package = fields.String()
    dielectric = fields.String(allow_none=True)
    voltage_v = OutFloat()
    internal_pn = fields.String()
    manufacturer = fields.String()
    mpn = fields.String()
    unit_cost = OutFloat()


class PartsListSchema(Schema):
    currency = fields.String(allow_none=True, metadata={
        "description": "ISO 4217 code of the prices; null when no library is loaded"})
    parts = fields.List(fields.Nested(StockPartOutSchema), required=True)
