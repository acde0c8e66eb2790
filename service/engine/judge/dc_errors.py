"""DC operating point and worst-case DC errors of every stage.

Nominal operating point: the DC solution of the circuit model with the supply on and no
offsets (:func:`service.engine.solver.dc.operating_point`): VMID from the divider, every
stage node at REF.

DC error of a node: its worst-case deviation from the nominal point when every op-amp unit
of the model (signal stages and the VMID follower) has an input offset ``+-vos_v`` and a
bias current ``|ib_a|`` into each input, each source with the sign that adds (common
practice when no offset current is given: no cancellation between the two inputs). The
circuit is linear, so the worst case is ``sum |sensitivity| x magnitude``
(:class:`service.engine.solver.dc.OffsetSensitivity`). The DC resistances each input sees
(source, bias and feedback resistors, the divider behind VMID) and the DC gain of
DC-coupled stages are all in the solve.
"""

from __future__ import annotations

from dataclasses import dataclass

from service.engine.model.circuit import Circuit
from service.engine.solver.dc import offset_sensitivities, operating_point
from service.engine.solver.mna import MnaSystem, build, stage_nodes


@dataclass(frozen=True)
class StageDc:
    """Stage k at DC: output and + input levels (V) and their worst-case errors (V)."""

    out_dc_v: float
    out_error_v: float
    plus_dc_v: float
    plus_error_v: float


def stage_dc_errors(circuit: Circuit, system: MnaSystem | None = None) -> list[StageDc]:
    """Operating point and worst-case DC error at each stage's output and + input."""
    system = system or build(circuit)
    op = circuit.opamp
    point = operating_point(system, circuit.supply.v_pos if circuit.bias is not None else 0.0)
    nodes = stage_nodes(circuit)
    names = sorted({nd.out for nd in nodes} | {nd.plus for nd in nodes})
    sens = offset_sensitivities(system, names)
    out = []
    for nd in nodes:
        out.append(StageDc(
            out_dc_v=point[nd.out],
            out_error_v=sens[nd.out].worst_case_v(op.vos_v, op.ib_a),
            plus_dc_v=point[nd.plus],
            plus_error_v=sens[nd.plus].worst_case_v(op.vos_v, op.ib_a),
        ))
    return out
