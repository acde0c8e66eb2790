"""A test-local SPICE deck writer for the circuit model (independent of exporters/spice.py),
and a runner for ngspice in batch mode.

The deck follows the circuit model of issue 2 element by element: ideal source Vs behind the
source impedance, every stage's parts, the bias divider with its bypass and optional
follower, the output capacitor and load, and VCC as a voltage source. Each op-amp unit is a
single-pole macro model (common practice; E sources as in the ngspice user manual,
"Voltage-controlled voltage sources (VCVS)"): ``E1`` of gain A0 into an RC pole at GBW/A0
and a unity buffer ``E2``, no input resistance and zero output resistance. The pole's
resistor is marked ``noisy=0`` so ngspice's ``.noise`` counts only the circuit's resistors
(ngspice user manual, resistor instance parameters). Optional PSRR: an E source of gain
``10**(-psrr_db/20)`` from VCC in series with each + input.
"""

from __future__ import annotations

import math
import os
import re
import subprocess
import tempfile

from ngspice_support import NGSPICE, require_ngspice  # noqa: F401 (re-exported)

from service.engine.model.circuit import INVERTING, Circuit


def _n(x: float) -> str:
    return f"{x:.12e}"


def netlist(circuit: Circuit, *, signal_ac: float, supply_ac: float) -> tuple[list, str]:
    """Element lines and the output spec (``v(out)`` or ``v(a,b)``)."""
    amp = circuit.opamp
    lines = [
        ".subckt oa inp inn out params: a0=1e5 gbw=1e6",
        "e1 n1 0 inp inn {a0}",
        "rp n1 n2 1e3 noisy=0",
        "cp n2 0 {a0/(6.283185307179586*gbw*1e3)}",
        "e2 out 0 n2 0 1",
        ".ends oa",
    ]
    params = f"params: a0={_n(amp.a0)} gbw={_n(amp.gbw_hz)}"
    k_psrr = None if amp.psrr_db is None else 10 ** (-amp.psrr_db / 20)
    units = 0

    def opamp(plus, minus, out):
        nonlocal units
        units += 1
        if k_psrr is not None:
            lines.append(f"epsrr{units} pi{units} {plus} vcc 0 {_n(k_psrr)}")
            plus = f"pi{units}"
        lines.append(f"xu{units} {plus} {minus} {out} oa {params}")

    bias = circuit.bias
    if bias is None:
        ref = "0"
    else:
        vcc_dc = circuit.supply.v_pos
        lines.append(f"vcc vcc 0 dc {_n(vcc_dc)} ac {_n(supply_ac)}")
        lines.append(f"rtop vcc vdiv {_n(bias.r_top_ohm)}")
        lines.append(f"rbot vdiv 0 {_n(bias.r_bottom_ohm)}")
        lines.append(f"cbyp vdiv 0 {_n(bias.c_bypass_f)}")
        if bias.buffered:
            ref = "vmid"
            opamp("vdiv", "vmid", "vmid")
        else:
            ref = "vdiv"
    lines.append(f"vs vs 0 dc 0 ac {_n(signal_ac)}")
    lines.append(f"rsrc vs x1 {_n(circuit.source_impedance_ohm)}")
    x = "x1"
    for k, st in enumerate(circuit.stages, start=1):
        o, n = f"o{k}", f"n{k}"
        if circuit.topology == INVERTING:
            m = x
            if st.c_couple_f is not None:
                m = f"m{k}"
                lines.append(f"cc{k} {x} {m} {_n(st.c_couple_f)}")
            lines.append(f"rin{k} {m} {n} {_n(st.r_in_ohm)}")
            lines.append(f"rf{k} {o} {n} {_n(st.r_feedback_ohm)}")
            if st.c_feedback_f is not None:
                lines.append(f"cf{k} {o} {n} {_n(st.c_feedback_f)}")
            opamp(ref, n, o)
        else:
            p = x
            if st.c_couple_f is not None:
                p = f"p{k}"
                lines.append(f"cc{k} {x} {p} {_n(st.c_couple_f)}")
            if st.r_bias_ohm is not None:
                lines.append(f"rb{k} {p} {ref} {_n(st.r_bias_ohm)}")
            lines.append(f"rf{k} {o} {n} {_n(st.r_feedback_ohm)}")
            if st.c_feedback_f is not None:
                lines.append(f"cf{k} {o} {n} {_n(st.c_feedback_f)}")
            if st.c_gain_f is None:
                lines.append(f"rg{k} {n} {ref} {_n(st.r_gain_ohm)}")
            else:
                lines.append(f"rg{k} {n} g{k} {_n(st.r_gain_ohm)}")
                lines.append(f"cg{k} g{k} 0 {_n(st.c_gain_f)}")
            opamp(p, n, o)
        x = o
    if circuit.c_out_f is None:
        lines.append(f"rload {x} {ref} {_n(circuit.load_ohm)}")
        out = f"v({x})" if ref == "0" else f"v({x},{ref})"
    else:
        lines.append(f"cout {x} out {_n(circuit.c_out_f)}")
        lines.append(f"rload out 0 {_n(circuit.load_ohm)}")
        out = "v(out)"
    return lines, out


def noise_deck(circuit: Circuit, f_start_hz: float, f_stop_hz: float, per_decade: int = 50,
               temperature_c: float = 26.85) -> str:
    lines, out = netlist(circuit, signal_ac=1.0, supply_ac=0.0)
    return "\n".join(["gainchain noise cross-check", *lines, f".temp {temperature_c}",
                      ".control",
                      f"noise {out} vs dec {per_decade} {_n(f_start_hz)} {_n(f_stop_hz)}",
                      "setplot noise2", "print onoise_total", "quit", ".endc", ".end", ""])


def ripple_deck(circuit: Circuit, f_start_hz: float, f_stop_hz: float,
                per_decade: int = 20) -> str:
    lines, out = netlist(circuit, signal_ac=0.0, supply_ac=1.0)
    vdb = "vdb" + out[1:]
    return "\n".join(["gainchain supply ripple cross-check", *lines, ".control",
                      f"ac dec {per_decade} {_n(f_start_hz)} {_n(f_stop_hz)}",
                      f"print {vdb}", "quit", ".endc", ".end", ""])


def ac_deck(circuit: Circuit, f_start_hz: float, f_stop_hz: float,
            per_decade: int = 100) -> str:
    """``.ac`` of Vout/Vs (the signal source at 1 V AC, the supply quiet): prints vdb."""
    lines, out = netlist(circuit, signal_ac=1.0, supply_ac=0.0)
    vdb = "vdb" + out[1:]
    return "\n".join(["gainchain signal cross-check", *lines, ".control",
                      f"ac dec {per_decade} {_n(f_start_hz)} {_n(f_stop_hz)}",
                      f"print {vdb}", "quit", ".endc", ".end", ""])


def corners_db(f_hz, vdb) -> tuple[float, float, float]:
    """(peak dB, low and high -3 dB crossings nearest the peak) of a sampled response,
    interpolated linearly in dB against log f (nan where the sweep has no crossing)."""
    import numpy as np

    f_hz, vdb = np.asarray(f_hz, float), np.asarray(vdb, float)
    i = int(np.argmax(vdb))
    thr = vdb[i] - 10 * math.log10(2.0)

    def cross(j0, j1):
        x0, x1 = math.log(f_hz[j0]), math.log(f_hz[j1])
        y0, y1 = vdb[j0] - thr, vdb[j1] - thr
        return math.exp(x0 - y0 * (x1 - x0) / (y1 - y0))

    high = next((cross(j - 1, j) for j in range(i + 1, len(f_hz)) if vdb[j] < thr), math.nan)
    low = next((cross(j + 1, j) for j in range(i - 1, -1, -1) if vdb[j] < thr), math.nan)
    return float(vdb[i]), low, high


#: Element names of :func:`netlist` for the Monte Carlo's parts: (field, stage index) -> name.
_ELEMENT = {"c_couple_f": "cc{k}", "r_bias_ohm": "rb{k}", "r_feedback_ohm": "rf{k}",
            "c_feedback_f": "cf{k}", "r_gain_ohm": "rg{k}", "c_gain_f": "cg{k}",
            "r_in_ohm": "rin{k}", "c_out_f": "cout", "r_top_ohm": "rtop",
            "r_bottom_ohm": "rbot", "c_bypass_f": "cbyp"}


def monte_carlo_deck(circuit: Circuit, parts, values, f_start_hz: float, f_stop_hz: float,
                     per_decade: int = 40) -> str:
    """One ``.ac`` per trial in a ``.control`` block (test decks only): ``alter`` sets every
    varied part to its drawn value (``values[trial, i]`` for ``parts[i]``, as
    ``montecarlo.Part``), a gain-bandwidth through the pole capacitor of its unit's macro
    model (``C = A0 / (2 pi GBW 1 kohm)``), then the response is printed."""
    lines, out = netlist(circuit, signal_ac=1.0, supply_ac=0.0)
    vdb = "vdb" + out[1:]
    first_stage_unit = 2 if circuit.bias is not None and circuit.bias.buffered else 1
    a0 = circuit.opamp.a0
    control = [".control"]
    for row in values:
        for part, value in zip(parts, row, strict=True):
            if part.field == "gbw_hz":
                unit = first_stage_unit + part.index
                control.append(f"alter c.xu{unit}.cp = {_n(a0 / (2 * math.pi * value * 1e3))}")
            else:
                name = _ELEMENT[part.field].format(k=(part.index or 0) + 1)
                control.append(f"alter {name} = {_n(value)}")
        control += [f"ac dec {per_decade} {_n(f_start_hz)} {_n(f_stop_hz)}", f"print {vdb}"]
    control += ["quit", ".endc", ".end", ""]
    return "\n".join(["gainchain Monte Carlo cross-check", *lines, *control])


def parse_tables(stdout: str, columns: int) -> list:
    """Every ``print`` table of a run, in order (a table restarts at index 0)."""
    tables: list = []
    for line in stdout.splitlines():
        parts = line.split()
        if len(parts) == columns + 1 and parts[0].isdigit():
            try:
                row = [float(v) for v in parts[1:]]
            except ValueError:
                continue
            if parts[0] == "0":
                tables.append([])
            tables[-1].append(row)
    return tables


def run(deck: str, timeout_s: float = 120.0) -> str:
    """Run ``ngspice -b`` on the deck in a fresh folder (argument list, no shell); stdout."""
    with tempfile.TemporaryDirectory() as tmp:
        path = os.path.join(tmp, "deck.cir")
        with open(path, "w", encoding="utf-8") as fh:
            fh.write(deck)
        proc = subprocess.run([NGSPICE or "ngspice", "-b", "deck.cir"], cwd=tmp,
                              capture_output=True, text=True, timeout=timeout_s, check=False)
    out = proc.stdout + proc.stderr
    if proc.returncode != 0 or re.search(r"\berror\b", out, re.IGNORECASE):
        raise AssertionError(f"ngspice failed (rc={proc.returncode}):\n{out[-3000:]}")
    return proc.stdout


def parse_onoise_total(stdout: str) -> float:
    m = re.search(r"onoise_total\s*=\s*([-+0-9.eE]+)", stdout)
    assert m, f"no onoise_total in ngspice output:\n{stdout[-2000:]}"
    return float(m.group(1))


def parse_table(stdout: str, columns: int) -> list:
    """Rows of a ``print`` table: lines that start with an integer index."""
    rows = {}
    for line in stdout.splitlines():
        parts = line.split()
        if len(parts) == columns + 1 and parts[0].isdigit():
            try:
                rows[int(parts[0])] = [float(v) for v in parts[1:]]
            except ValueError:
                continue
    return [rows[i] for i in sorted(rows)]


def finite(x) -> bool:
    return x is not None and math.isfinite(x)
