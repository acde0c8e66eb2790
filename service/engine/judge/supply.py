"""DC supply current of a circuit as built (what the positive rail delivers).

``I = U x iq_a + I_divider + I_load`` (common practice: a budget of quiescent currents and
resistive DC paths, signal currents left out):

* ``U``: every op-amp unit on the board, spare units of the last package included (they are
  powered, and wired to REF: :mod:`service.engine.model.spares`), i.e. packages x
  ``channels_per_package``; ``iq_a`` is the op-amp's quiescent current per unit (0 when
  the op-amp does not give it);
* ``I_divider = v_pos / (r_top_ohm + r_bottom_ohm)`` (Ohm's law) on a single supply, 0 on a
  dual one (no bias network);
* ``I_load``: the DC across the load over ``load_ohm``. With an output capacitor the load
  sees no DC; without one it returns to REF from the last stage's output, which sits at REF
  (README "The circuit model"), so the DC across it is 0 as well. The feedback, gain and
  bias resistors of the stages likewise join nodes at the same DC level (REF) and carry none.
"""

from __future__ import annotations

from service.engine.model.circuit import Circuit


def supply_current_a(circuit: Circuit) -> float:
    """Total DC current from the positive rail in amperes (module docstring)."""
    units = circuit.opamp_packages * circuit.opamp.channels_per_package
    current = units * circuit.opamp.iq_a
    if circuit.bias is not None:
        current += circuit.supply.v_pos / (circuit.bias.r_top_ohm + circuit.bias.r_bottom_ohm)
    return current  # the load carries no DC in this model (module docstring)
