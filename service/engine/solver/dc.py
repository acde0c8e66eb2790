"""DC solution of the circuit model: the operating point and the offset sensitivities.

At DC (``s = 0``) every capacitor of the model is open and the MNA matrix is its real part
``G`` (:mod:`service.engine.solver.mna`). The operating point solves ``G x = b`` with the
supply source at ``v_pos`` (single supply) and the signal source at 0 V.

Offsets are DC sources of the same linear circuit, so their effect on any node is a sum of
sensitivities (superposition). For every op-amp unit ``u`` of the model:

* input offset voltage: a source ``vos`` in series with the + input, the ``e`` of the
  unit's defining row ``Vo (1/A0) - V+ + V- = e``;
* input bias currents: ``ib`` drawn *out of* the + and - input nodes (a current injection
  ``-ib`` at each).

The sensitivities of a set of output nodes to every right-hand-side entry come from one
adjoint solve ``G^T y = c`` per output (J. Vlach and K. Singhal, *Computer Methods for
Circuit Analysis and Design*, 2nd ed., 1994, ch. 7; cited from memory).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from service.engine.solver.mna import GND, MnaSystem


def dc_rhs(system: MnaSystem, v_pos: float) -> np.ndarray:
    """``b`` of the operating point: the supply source at ``v_pos``, everything else 0."""
    b = np.zeros(system.size)
    if "VCC" in system.rows:
        b[system.rows["VCC"]] = v_pos
    return b


def operating_point(system: MnaSystem, v_pos: float) -> dict[str, float]:
    """Nominal DC node voltages (no offsets): node name -> volts, GND included."""
    x = np.linalg.solve(system.g, dc_rhs(system, v_pos))
    out = {name: float(x[i]) for name, i in system.nodes.items()}
    out[GND] = 0.0
    return out


@dataclass(frozen=True)
class OffsetSensitivity:
    """DC change of one node per unit of each offset source.

    :ivar vos: per op-amp unit (in ``system.units`` order), volts per volt of ``vos``;
    :ivar ib_plus, ib_minus: per unit, volts per ampere of bias current *into* the pin.
    """

    vos: np.ndarray
    ib_plus: np.ndarray
    ib_minus: np.ndarray

    def worst_case_v(self, vos_v: float, ib_a: float) -> float:
        """``sum |S_vos| |vos| + sum (|S_ib+| + |S_ib-|) |ib|``: every source at full size
        with the sign that adds (no cancellation assumed; common practice when no offset
        current is given)."""
        return float(np.abs(self.vos).sum() * abs(vos_v)
                     + (np.abs(self.ib_plus).sum() + np.abs(self.ib_minus).sum()) * abs(ib_a))


def offset_sensitivities(system: MnaSystem, nodes: list[str]) -> dict[str, OffsetSensitivity]:
    """Sensitivities of the DC voltage of each node in ``nodes`` to every offset source."""
    sel = np.zeros((system.size, len(nodes)))
    for j, name in enumerate(nodes):
        if name != GND:
            sel[system.nodes[name], j] = 1.0
    y = np.linalg.solve(system.g.T, sel)  # column j: transfer of every RHS entry to node j
    rows = [system.rows[u.name] for u in system.units]

    def node_col(name: str) -> np.ndarray:
        if name == GND:
            return np.zeros(len(nodes))
        # a bias current into the pin is a current -ib injected into the node
        return -y[system.nodes[name], :]

    vos = np.array([y[r, :] for r in rows]).reshape(len(rows), len(nodes))
    plus = np.array([node_col(u.plus) for u in system.units]).reshape(len(rows), len(nodes))
    minus = np.array([node_col(u.minus) for u in system.units]).reshape(len(rows), len(nodes))
    return {name: OffsetSensitivity(vos[:, j], plus[:, j], minus[:, j])
            for j, name in enumerate(nodes)}
