"""The op-amp object: catalog entry, inline in a request, embedded in a circuit."""

from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range

from schemas.fields import OutFloat, StrictFloat, StrictInteger
from service.engine.model.circuit import OpAmp

POSITIVE = Range(min=0, min_inclusive=False)
NON_NEGATIVE = Range(min=0)


def swing_window_error(swing_to_pos_v: float, swing_to_neg_v: float, span_v: float,
                       what: str) -> str | None:
    """Why the output swing window is empty or inverted on ``span_v`` volts, else None.

    The output reaches from ``V- + swing_to_neg_v`` to ``V+ - swing_to_pos_v``, a window of
    ``span - swing_to_pos_v - swing_to_neg_v`` volts (common practice: datasheet output
    swing figures); zero or less leaves no output range at all.
    """
    if swing_to_pos_v + swing_to_neg_v >= span_v:
        return (f"swing_to_pos_v + swing_to_neg_v = {swing_to_pos_v + swing_to_neg_v:g} V "
                f"leaves no output swing on {what} of {span_v:g} V (the window is inverted)")
    return None


class OpAmpSchema(Schema):
    """Required: gbw_hz, slew_v_per_us, swing_to_pos_v, swing_to_neg_v, supply_min_v,
    supply_max_v. Optional fields take the defaults documented on ``OpAmp``."""

    id = fields.String(load_default=None, allow_none=True, validate=Length(max=80))
    description = fields.String(load_default="", validate=Length(max=400))
    manufacturer = fields.String(load_default="", validate=Length(max=80))
    mpn = fields.String(load_default="", validate=Length(max=80))
    gbw_hz = StrictFloat(required=True, validate=Range(min=1.0, max=1e11))
    slew_v_per_us = StrictFloat(required=True, validate=Range(min=1e-6, max=1e5))
    swing_to_pos_v = StrictFloat(required=True, validate=Range(min=0, max=100))
    swing_to_neg_v = StrictFloat(required=True, validate=Range(min=0, max=100))
    supply_min_v = StrictFloat(required=True, validate=Range(min=0, max=1000))
    supply_max_v = StrictFloat(required=True, validate=Range(min=0, max=1000,
                                                              min_inclusive=False))
    a0_db = StrictFloat(load_default=100.0, validate=Range(min=20, max=200))
    cm_to_pos_v = StrictFloat(load_default=0.0, validate=Range(min=-100, max=100))
    cm_to_neg_v = StrictFloat(load_default=0.0, validate=Range(min=-100, max=100))
    en_v_per_rthz = StrictFloat(load_default=0.0, validate=Range(min=0, max=1e-3))
    in_a_per_rthz = StrictFloat(load_default=0.0, validate=Range(min=0, max=1e-3))
    ib_a = StrictFloat(load_default=0.0, validate=Range(min=-1, max=1))
    vos_v = StrictFloat(load_default=0.0, validate=Range(min=-1, max=1))
    iq_a = StrictFloat(load_default=0.0, validate=Range(min=0, max=10))
    channels_per_package = StrictInteger(load_default=1, validate=OneOf([1, 2, 4]))
    min_stable_gain = StrictFloat(load_default=1.0, validate=Range(min=1.0, max=1e4))
    psrr_db = StrictFloat(load_default=None, allow_none=True, validate=Range(min=0, max=300))
    output_current_max_a = StrictFloat(load_default=None, allow_none=True,
                                       validate=Range(min=0, max=100, min_inclusive=False))

    @validates_schema
    def _supply_range(self, data, **kwargs):
        if data.get("supply_min_v", 0) > data.get("supply_max_v", float("inf")):
            raise ValidationError("supply_min_v must not exceed supply_max_v", "supply_min_v")
        message = swing_window_error(data.get("swing_to_pos_v", 0.0),
                                     data.get("swing_to_neg_v", 0.0),
                                     data.get("supply_max_v", float("inf")),
                                     "its largest supply span (supply_max_v)")
        if message:
            raise ValidationError(message, "swing_to_pos_v")

    @post_load
    def _make(self, data, **kwargs) -> OpAmp:
        return OpAmp(**data)


class OpAmpOutSchema(Schema):
    """Dump schema of an op-amp (catalog listings, embedded circuits)."""

    id = fields.String(allow_none=True)
    description = fields.String()
    manufacturer = fields.String()
    mpn = fields.String()
    gbw_hz = fields.Float()
    slew_v_per_us = fields.Float()
    swing_to_pos_v = fields.Float()
    swing_to_neg_v = fields.Float()
    supply_min_v = fields.Float()
    supply_max_v = fields.Float()
    a0_db = fields.Float()
    cm_to_pos_v = fields.Float()
    cm_to_neg_v = fields.Float()
    en_v_per_rthz = fields.Float()
    in_a_per_rthz = fields.Float()
    ib_a = fields.Float()
    vos_v = fields.Float()
    iq_a = fields.Float()
    channels_per_package = fields.Integer()
    min_stable_gain = fields.Float()
    psrr_db = OutFloat()
    output_current_max_a = OutFloat()


class OpAmpListSchema(Schema):
    opamps = fields.List(fields.Nested(OpAmpOutSchema), required=True)


class OpAmpField(fields.Field):
    """A catalog id (string) or an inline op-amp object."""

    default_error_messages = {"invalid": "Give a catalog id (string) or an op-amp object."}

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, str):
            if not value or len(value) > 80:
                raise self.make_error("invalid")
            return value
        if isinstance(value, dict):
            return OpAmpSchema().load(value)
        raise self.make_error("invalid")
