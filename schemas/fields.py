"""Strictly typed fields: a number field refuses strings and booleans, an integer field
refuses 3.5, and no field accepts NaN or Infinity (the JSON parser already refuses their
literals; these refuse them from any other source too)."""

from __future__ import annotations

import math

from marshmallow import fields


class StrictFloat(fields.Float):
    """A JSON number (int or float, not bool, not a string), finite."""

    default_error_messages = {
        "invalid": "Not a valid number.",
        "special": "Special numeric values (nan or infinity) are not permitted.",
    }

    def __init__(self, **kwargs):
        kwargs.setdefault("allow_nan", False)
        super().__init__(**kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.make_error("invalid")
        if isinstance(value, float) and not math.isfinite(value):
            raise self.make_error("special")
        return super()._deserialize(value, attr, data, **kwargs)


class StrictInteger(fields.Integer):
    """A JSON integer: refuses 3.5, "3" and booleans."""

    def __init__(self, **kwargs):
        kwargs.setdefault("strict", True)
        super().__init__(**kwargs)

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.make_error("invalid")
        return super()._deserialize(value, attr, data, **kwargs)


class StrictBoolean(fields.Boolean):
    """A JSON true/false only (no "yes", 1 or "true")."""

    def _deserialize(self, value, attr, data, **kwargs):
        if not isinstance(value, bool):
            raise self.make_error("invalid")
        return value


class OutFloat(fields.Float):
    """Response float that may be null (non-finite engine values are written as null)."""

    def __init__(self, **kwargs):
        kwargs.setdefault("allow_none", True)
        super().__init__(**kwargs)

    def _serialize(self, value, attr, obj, **kwargs):
        if value is None:
            return None
        value = float(value)
        return value if math.isfinite(value) else None
