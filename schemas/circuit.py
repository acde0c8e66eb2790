"""The circuit object (the exact contract of README "The circuit model")."""

from __future__ import annotations

from marshmallow import Schema, ValidationError, fields, post_load, validates_schema
from marshmallow.validate import Length, OneOf, Range

from schemas.fields import OutFloat, StrictBoolean, StrictFloat
from schemas.opamp import OpAmpOutSchema, OpAmpSchema, swing_window_error
from service.engine.model.circuit import (
    DUAL,
    SINGLE,
    STAGE_KEYS,
    TOPOLOGIES,
    Bias,
    Circuit,
    Stage,
    Supply,
)

#: Component values a circuit may carry (wide on purpose: a hand-edited circuit is analysed
#: as given; absurd values are refused).
R_RANGE = Range(min=1e-3, max=1e12)
C_RANGE = Range(min=1e-15, max=10.0)


class SupplySchema(Schema):
    kind = fields.String(required=True, validate=OneOf([SINGLE, DUAL]))
    v_pos = StrictFloat(required=True, validate=Range(min=0, max=1000, min_inclusive=False))
    v_neg = StrictFloat(validate=Range(min=-1000, max=0, max_inclusive=False))

    @validates_schema
    def _rails(self, data, **kwargs):
        if data.get("kind") == DUAL and "v_neg" not in data:
            raise ValidationError("a dual supply needs v_neg (negative volts)", "v_neg")
        if data.get("kind") == SINGLE and "v_neg" in data:
            raise ValidationError("a single supply has no v_neg (it is 0 V)", "v_neg")

    @post_load
    def _make(self, data, **kwargs) -> Supply:
        return Supply(kind=data["kind"], v_pos=data["v_pos"], v_neg=data.get("v_neg", 0.0))


class SupplyOutSchema(Schema):
    kind = fields.String()
    v_pos = fields.Float()
    v_neg = fields.Float()


class BiasSchema(Schema):
    r_top_ohm = StrictFloat(required=True, validate=R_RANGE)
    r_bottom_ohm = StrictFloat(required=True, validate=R_RANGE)
    c_bypass_f = StrictFloat(required=True, validate=C_RANGE)
    buffered = StrictBoolean(required=True)

    @post_load
    def _make(self, data, **kwargs) -> Bias:
        return Bias(**data)


class StageSchema(Schema):
    """One stage; which keys apply depends on the topology (checked by CircuitSchema)."""

    c_couple_f = StrictFloat(allow_none=True, validate=C_RANGE)
    r_bias_ohm = StrictFloat(allow_none=True, validate=R_RANGE)
    r_feedback_ohm = StrictFloat(required=True, validate=R_RANGE)
    c_feedback_f = StrictFloat(allow_none=True, validate=C_RANGE)
    r_gain_ohm = StrictFloat(allow_none=True, validate=R_RANGE)
    c_gain_f = StrictFloat(allow_none=True, validate=C_RANGE)
    r_in_ohm = StrictFloat(allow_none=True, validate=R_RANGE)


class StageOutSchema(Schema):
    c_couple_f = OutFloat()
    r_bias_ohm = OutFloat()
    r_feedback_ohm = fields.Float()
    c_feedback_f = OutFloat()
    r_gain_ohm = OutFloat()
    c_gain_f = OutFloat()
    r_in_ohm = OutFloat()


class CircuitSchema(Schema):
    topology = fields.String(required=True, validate=OneOf(TOPOLOGIES))
    supply = fields.Nested(SupplySchema, required=True)
    opamp = fields.Nested(OpAmpSchema, required=True)
    source_impedance_ohm = StrictFloat(required=True, validate=Range(min=0, max=1e9))
    load_ohm = StrictFloat(required=True, validate=R_RANGE)
    bias = fields.Nested(BiasSchema, required=True, allow_none=True)
    stages = fields.List(fields.Nested(StageSchema), required=True, validate=Length(min=1, max=12))
    c_out_f = StrictFloat(required=True, allow_none=True, validate=C_RANGE)

    @validates_schema
    def _consistent(self, data, **kwargs):
        topology = data.get("topology")
        supply = data.get("supply")
        stages = data.get("stages") or []
        errors: dict = {}
        if topology in STAGE_KEYS:
            allowed = set(STAGE_KEYS[topology])
            for i, st in enumerate(stages):
                extra = sorted(k for k in st if k not in allowed and st[k] is not None)
                if extra:
                    errors.setdefault("stages", {})[i] = {
                        k: [f"not a part of a {topology} stage"] for k in extra}
                    continue
                need = "r_gain_ohm" if topology == "non_inverting" else "r_in_ohm"
                if st.get(need) is None:
                    errors.setdefault("stages", {})[i] = {need: ["required, never null"]}
                elif (topology == "non_inverting" and st.get("r_bias_ohm") is None
                      and st.get("c_couple_f") is not None):
                    errors.setdefault("stages", {})[i] = {
                        "r_bias_ohm": ["may be null only when c_couple_f is null"]}
        if isinstance(supply, Supply):
            opamp = data.get("opamp")
            swing = opamp is not None and swing_window_error(
                opamp.swing_to_pos_v, opamp.swing_to_neg_v, supply.span_v, "the supply span")
            if swing:
                errors["opamp"] = {"swing_to_pos_v": [swing]}
            if supply.kind == SINGLE and data.get("bias") is None:
                errors["bias"] = ["a single supply needs the bias network"]
            if supply.kind == DUAL and data.get("bias") is not None:
                errors["bias"] = ["a dual supply has no bias network (REF is ground)"]
            if supply.kind == SINGLE:
                dc_paths = [st.get("c_couple_f") for st in stages]
                if any(c is None for c in dc_paths):
                    errors["stages"] = errors.get("stages") or [
                        "on a single supply every stage needs c_couple_f (no DC coupling)"]
        if errors:
            raise ValidationError(errors)

    @post_load
    def _make(self, data, **kwargs) -> Circuit:
        stages = tuple(Stage(**{k: v for k, v in st.items()}) for st in data["stages"])
        return Circuit(
            topology=data["topology"], supply=data["supply"], opamp=data["opamp"],
            source_impedance_ohm=data["source_impedance_ohm"], load_ohm=data["load_ohm"],
            bias=data["bias"], stages=stages, c_out_f=data["c_out_f"],
        )


class BiasOutSchema(Schema):
    r_top_ohm = fields.Float()
    r_bottom_ohm = fields.Float()
    c_bypass_f = fields.Float()
    buffered = fields.Boolean()


class CircuitOutSchema(Schema):
    topology = fields.String()
    supply = fields.Nested(SupplyOutSchema)
    opamp = fields.Nested(OpAmpOutSchema)
    source_impedance_ohm = fields.Float()
    load_ohm = fields.Float()
    bias = fields.Nested(BiasOutSchema, allow_none=True)
    stages = fields.List(fields.Nested(StageOutSchema))
    c_out_f = OutFloat()
