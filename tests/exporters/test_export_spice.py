"""SPICE deck: ngspice (an independent simulator) reproduces the engine's numbers.

References: ngspice 39 (Debian package) in batch mode, reading the deck exactly as exported;
the engine's nodal solution ``service.engine.solver.chain.solve`` and corner finder
``service.engine.solver.corners.find_band``. Deck rules: the ngspice user manual (elements,
``.ac``, ``.print``).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from export_circuits import CIRCUITS, HOSTILE_NAMES, dual_dc, dual_inv, single_ni
from spice_run import band_from_table, parse_print_table, require_ngspice, run_deck

from exporters.board import build_board
from exporters.response import band_edges
from exporters.spice import spice_deck
from service.engine.solver.chain import solve

pytestmark = pytest.mark.ngspice


def _simulate(circuit, name="ngspice check"):
    require_ngspice()
    deck = spice_deck(build_board(circuit, name=name))
    stdout, _ = run_deck(deck)
    table = parse_print_table(stdout)
    start, stop, ppd = _ac_line(deck)
    expected_rows = int(round(np.log10(float(stop) / float(start)) * int(ppd))) + 1
    assert table.shape == (expected_rows, 3)
    return table


def _ac_line(deck):
    ppd, start, stop = re.search(r"^\.ac dec (\d+) (\S+) (\S+)$", deck, re.M).groups()
    return start, stop, ppd


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_ngspice_matches_engine_pointwise(key):
    """Every printed point: |Vout/Vs| in dB and its phase equal the engine's nodal solution."""
    circuit = CIRCUITS[key]()
    table = _simulate(circuit)
    f_hz, vdb, vp_rad = table.T
    h = solve(circuit, f_hz).vout
    # ngspice prints 6 significant digits: 1e-4 dB at 60 dB; 0.01 dB leaves ample margin.
    np.testing.assert_allclose(vdb, 20 * np.log10(np.abs(h)), atol=0.01)
    # Phases compared as unit vectors (ngspice wraps to (-pi, pi]).
    np.testing.assert_allclose(np.exp(1j * vp_rad), h / np.abs(h), atol=2e-3)


@pytest.mark.parametrize("key", sorted(CIRCUITS))
def test_ngspice_corners_match_engine_corners(key):
    """Issue 3: simulated midband gain within 0.05 dB, corners within 0.5 %."""
    circuit = CIRCUITS[key]()
    f_hz, vdb, _ = _simulate(circuit).T
    peak_db, f_low, f_high = band_from_table(f_hz, vdb)
    edges = band_edges(circuit)
    assert peak_db == pytest.approx(20 * np.log10(edges.gain), abs=0.05)
    assert f_high == pytest.approx(edges.f_high_hz, rel=5e-3)
    if edges.f_low_hz is None:
        assert np.isnan(f_low)
    else:
        assert f_low == pytest.approx(edges.f_low_hz, rel=5e-3)


@pytest.mark.parametrize("n", [1, 6])
@pytest.mark.parametrize("make", [single_ni, dual_inv, dual_dc])
def test_ngspice_one_to_six_stages(make, n):
    circuit = make(n)
    f_hz, vdb, _ = _simulate(circuit).T
    peak_db, _, f_high = band_from_table(f_hz, vdb)
    edges = band_edges(circuit)
    assert peak_db == pytest.approx(20 * np.log10(edges.gain), abs=0.05)
    assert f_high == pytest.approx(edges.f_high_hz, rel=5e-3)


@pytest.mark.parametrize("name", HOSTILE_NAMES)
def test_hostile_title_is_inert_in_ngspice(name):
    """A name carrying a newline + .control/shell runs nothing (ngspice manual)."""
    require_ngspice()
    deck = spice_deck(build_board(single_ni(1), name=name))
    stdout, listing = run_deck(deck)
    assert listing == "deck.cir"  # no file created by an injected `shell touch pwned`
    assert len(parse_print_table(stdout)) > 100


@pytest.mark.parametrize("name", HOSTILE_NAMES + [".control", "+cont", "*x"])
def test_deck_has_no_control_content(name):
    deck = spice_deck(build_board(dual_inv(2), name=name))
    lines = deck.splitlines()
    assert len(lines[0]) <= 80 and re.fullmatch(r"[A-Za-z0-9 _.,:+=/-]+", lines[0])
    assert not lines[0].startswith((".", "+", "*"))
    body = "\n".join(lines[1:]).lower()  # line 1 is always the title, never a statement
    for bad in (".control", ".endc", "shell", ".include", ".lib"):
        assert bad not in body
    # comment lines: single line each, only the safe set after "* "
    assert all(re.fullmatch(r"\* [A-Za-z0-9 _.,:;+=/*()-]*", ln) for ln in lines
               if ln.startswith("*"))


def test_deck_structure_rules():
    """ngspice manual (.ac, .print): one AC source, RLOAD at OUT, exponent numbers, .print
    of v(out)."""
    deck = spice_deck(build_board(single_ni(3, buffered=True)))
    statements = [ln for ln in deck.splitlines()[1:] if not ln.startswith("*")]
    sources = [ln for ln in statements if " AC " in ln.upper() and not ln.startswith(".")]
    assert sources == ["VS vs 0 DC 0 AC 1"]
    assert "RLOAD out 0 1e+04" in statements
    assert statements[-1] == ".end"
    assert ".print ac vdb(out) vp(out)" in statements
    # every number on an element line is plain: mantissa and exponent, no scale suffix
    for ln in statements:
        if ln[0] in "RC" and not ln.startswith("CPOLE"):
            assert re.fullmatch(r"-?\d(\.\d+)?e[+-]\d\d", ln.split()[-1]), ln
    names = [ln.split()[0].upper() for ln in statements if not ln.startswith(".")]
    assert len(names) == len(set(names) - {"E1", "E2", "RPOLE", "CPOLE"}) + 4


def test_load_returns_to_vmid_when_there_is_no_output_capacitor():
    import dataclasses

    c = dataclasses.replace(single_ni(2), c_out_f=None)
    deck = spice_deck(build_board(c))
    assert "RLOAD out vmid 1e+04" in deck
    assert ".print ac vdb(out,vmid) vp(out,vmid)" in deck
    f_hz, vdb, _ = _simulate(c).T
    h = solve(c, f_hz).vout
    np.testing.assert_allclose(vdb, 20 * np.log10(np.abs(h)), atol=0.01)


def test_ac_range_spans_a_decade_beyond_each_corner():
    c = single_ni(3)
    start, stop, _ = _ac_line(spice_deck(build_board(c)))
    edges = band_edges(c)
    assert float(start) <= edges.f_low_hz / 10 and float(stop) >= edges.f_high_hz * 10
