"""The built-in op-amp catalog: generic archetypes with invented ids and typical figures.

None of these is a real part: each entry stands for a *class* of op-amp with figures of the
order a datasheet of that class gives (typical values, room temperature), rounded to one
or two significant digits so that no entry copies any single datasheet. Real part numbers
and manufacturers only ever come from an organisation's approved-parts file
(``GAINCHAIN_OPAMP_CATALOG``), loaded by ``service.catalog_state``.
"""

from __future__ import annotations

from service.engine.model.circuit import OpAmp

_NOTE = "Generic archetype, typical figures; not a real part."

BUILTIN_OPAMPS: tuple[OpAmp, ...] = (
    OpAmp(id="gc-jfet-4m", description=f"4 MHz JFET-input dual; input range stops 3 V short "
          f"of the negative rail. {_NOTE}",
          gbw_hz=4e6, slew_v_per_us=10.0, swing_to_pos_v=1.5, swing_to_neg_v=1.5,
          supply_min_v=8.0, supply_max_v=36.0, a0_db=100.0, cm_to_pos_v=0.5, cm_to_neg_v=3.0,
          en_v_per_rthz=20e-9, in_a_per_rthz=1e-14, ib_a=50e-12, vos_v=2e-3, iq_a=2e-3,
          channels_per_package=2, min_stable_gain=1.0),
    OpAmp(id="gc-cmos-rr-10m", description=f"10 MHz rail-to-rail input/output CMOS dual. {_NOTE}",
          gbw_hz=10e6, slew_v_per_us=8.0, swing_to_pos_v=0.05, swing_to_neg_v=0.05,
          supply_min_v=2.5, supply_max_v=5.5, a0_db=110.0, cm_to_pos_v=-0.1, cm_to_neg_v=-0.1,
          en_v_per_rthz=12e-9, in_a_per_rthz=1e-15, ib_a=1e-12, vos_v=1e-3, iq_a=1.1e-3,
          channels_per_package=2, min_stable_gain=1.0),
    OpAmp(id="gc-bjt-lownoise-8m", description=f"8 MHz low-noise bipolar dual. {_NOTE}",
          gbw_hz=8e6, slew_v_per_us=5.0, swing_to_pos_v=1.2, swing_to_neg_v=1.2,
          supply_min_v=10.0, supply_max_v=36.0, a0_db=120.0, cm_to_pos_v=2.0, cm_to_neg_v=2.0,
          en_v_per_rthz=4e-9, in_a_per_rthz=5e-13, ib_a=200e-9, vos_v=100e-6, iq_a=3e-3,
          channels_per_package=2, min_stable_gain=1.0),
    OpAmp(id="gc-micro-1m", description=f"1 MHz micropower rail-to-rail CMOS quad. {_NOTE}",
          gbw_hz=1e6, slew_v_per_us=0.6, swing_to_pos_v=0.02, swing_to_neg_v=0.02,
          supply_min_v=1.8, supply_max_v=5.5, a0_db=100.0, cm_to_pos_v=0.0, cm_to_neg_v=-0.1,
          en_v_per_rthz=35e-9, in_a_per_rthz=1e-15, ib_a=1e-12, vos_v=2e-3, iq_a=60e-6,
          channels_per_package=4, min_stable_gain=1.0),
    OpAmp(id="gc-fast-50m-g5", description=f"50 MHz decompensated bipolar single, stable only "
          f"at noise gains of 5 and above. {_NOTE}",
          gbw_hz=50e6, slew_v_per_us=80.0, swing_to_pos_v=1.0, swing_to_neg_v=1.0,
          supply_min_v=5.0, supply_max_v=12.0, a0_db=95.0, cm_to_pos_v=1.5, cm_to_neg_v=1.5,
          en_v_per_rthz=5e-9, in_a_per_rthz=1.5e-12, ib_a=2e-6, vos_v=0.5e-3, iq_a=6e-3,
          channels_per_package=1, min_stable_gain=5.0),
)
