"""POST /v1/explorations: one design request tried across op-amps and stage counts.

For every op-amp (the whole catalog when ``opamp`` is omitted, sorted by id; else the
listed catalog ids and op-amp objects, in request order) and every stage count (the given
list, ascending; with "auto" the count POST /v1/designs picks for that op-amp), the
candidate's design is made by :func:`service.pipeline.run_design` from the same body with
that ``opamp`` and an explicit ``stages``, so it is byte for byte what POST /v1/designs
returns for that request (same ``design_id``).

Each candidate is summarised (part count of the board as exported, noise, supply current,
yield, BOM cost); ``pareto`` marks the meeting candidates no other meeting candidate
dominates on part count, input-referred noise, supply current and, when the parts library
gives prices, BOM cost (``service.engine.judge.pareto``). Candidates come in rank order:
meeting first, Pareto first among them, then by part count, input noise, supply current,
cost, and request order. A request an op-amp cannot serve (e.g. a supply outside its range)
is listed under ``skipped`` with the reason (once per op-amp, ``stage_count`` null, when the
op-amp cannot serve the request at any stage count).
"""

from __future__ import annotations

from marshmallow import ValidationError

from schemas.request import ExplorationRequestSchema
from service.engine.errors import EngineError
from service.engine.judge.pareto import pareto_flags, rank_order
from service.engine.judge.supply import supply_current_a
from service.engine.model.circuit import Circuit
from service.engine.synthesis import design as design_mod
from service.ops import budget
from service.pipeline import _catalog, _library, board_of, load_design_request, run_design

_SCHEMA = ExplorationRequestSchema()


def _opamp_choices(data: dict, body: dict, catalog) -> list[tuple[str | None, object]]:
    """(opamp_id, the ``opamp`` value of a candidate body) in exploration order."""
    if data["opamp"] is None:
        return [(key, key) for key in sorted(catalog)]
    out, errors, seen = [], {}, {}
    for i, (raw, loaded) in enumerate(zip(body["opamp"], data["opamp"], strict=True)):
        if isinstance(loaded, str):
            if loaded not in catalog:
                errors[i] = [f"Unknown catalog id {loaded!r}; GET /v1/opamps lists the catalog."]
                continue
            opamp_id = loaded
        else:
            opamp_id = loaded.id
        if opamp_id is not None and opamp_id in seen:
            errors[i] = [f"op-amp {opamp_id!r} is already listed at {seen[opamp_id]}."]
            continue
        if opamp_id is not None:
            seen[opamp_id] = i
        out.append((opamp_id, raw))
    if errors:
        raise ValidationError({"opamp": errors})
    return out


def _auto_count(body: dict) -> int:
    """The stage count POST /v1/designs picks for this body ("auto")."""
    req, _ = load_design_request(body)
    return design_mod.design(req, check_deadline=budget.checker()).synthesis.circuit.n_stages


def _candidate(opamp_id, n: int, design: dict, body: dict) -> dict:
    circuit = Circuit.from_dict(design["circuit"])
    req, _ = load_design_request(body)
    board = board_of(circuit, req)
    noise = design.get("noise") or {}
    return {
        "opamp_id": opamp_id,
        "stage_count": n,
        "status": design["status"],
        "shortfalls": design["shortfalls"],
        "design_id": design["design_id"],
        "part_count": len(board.parts),
        "opamp_packages": circuit.opamp_packages,
        "output_noise_rms_v": (noise.get("output_rms_v") or {}).get("band"),
        "input_noise_rms_v": noise.get("input_rms_v"),
        "supply_current_a": supply_current_a(circuit),  # the supply_current check's figure
        "yield": design.get("yield"),
        "bom_cost": design.get("bom_cost"),
    }


def explore(body) -> dict:
    """The exploration response (see the module docstring).

    :raise ValidationError: the body breaks the schema (422).
    """
    if not isinstance(body, dict):
        raise ValidationError({"_schema": ["The body must be a JSON object."]})
    data = _SCHEMA.load(body)
    catalog = _catalog(None)
    choices = _opamp_choices(data, body, catalog)
    candidates, skipped = [], []
    for opamp_id, opamp in choices:
        base = {**body, "opamp": opamp, "stages": "auto"}
        counts = data["stages"]
        try:
            design_mod.check_request(load_design_request(base)[0])  # e.g. the supply range
            if counts is None:
                budget.check("exploration")
                counts = [_auto_count(base)]
        except EngineError as err:
            skipped.append({"opamp_id": opamp_id, "stage_count": None, "detail": err.message})
            continue
        for n in counts:
            budget.check("exploration")
            one = {**base, "stages": n}
            try:
                design = run_design(one)
            except EngineError as err:
                skipped.append({"opamp_id": opamp_id, "stage_count": n, "detail": err.message})
                continue
            candidates.append(_candidate(opamp_id, n, design, one))
    library = _library()
    with_cost = library is not None and library.has_prices
    meets = [c["status"] == "meets_target" for c in candidates]

    def criteria(c):
        cost = ((c["bom_cost"] or {}).get("total"),) if with_cost else ()
        return (c["part_count"], c["input_noise_rms_v"], c["supply_current_a"]) + cost

    points = [criteria(c) for c in candidates]
    pareto = pareto_flags(points, meets)
    order = rank_order(meets, pareto, points)
    ranked = []
    for rank, i in enumerate(order, start=1):
        ranked.append({**candidates[i], "pareto": pareto[i], "rank": rank})
    return {"target": data["target"].to_dict(), "candidates": ranked, "skipped": skipped}
