"""EDA value notation, natural reference order, and the text neutralisers.

References: E-series values from the PyPI package ``eseries`` (an independent IEC 60063
implementation); KiCad's BOM conventions from the KiCad schematic-editor manual (BOM export);
OWASP's CSV-injection guidance for formula leads; sexpdata 1.0.2 for S-expression escaping.
"""

from __future__ import annotations

import re

import eseries
import pytest
import sexpdata

from exporters.names import DEFAULT_NAME, cell_text, safe_filename, spice_title, sx
from exporters.values import eda_value, join_refs, natural_key, spice_number

PREFIX = {"G": 1e9, "M": 1e6, "k": 1e3, "": 1.0, "m": 1e-3, "u": 1e-6, "n": 1e-9, "p": 1e-12}


def parse_eda(text: str) -> float:
    m = re.fullmatch(r"(\d+(?:\.\d+)?)([GMkmunp]?)", text)
    assert m, text
    return float(m.group(1)) * PREFIX[m.group(2)]


@pytest.mark.parametrize("value, text", [
    # common practice (KiCad value notation): the prefix letter replaces the unit
    (10e3, "10k"), (4.7e-6, "4.7u"), (100e-9, "100n"), (1e6, "1M"), (49.9, "49.9"),
    (2.2e-12, "2.2p"), (1.21e3, "1.21k"), (0.47, "470m"), (999.96e3, "1M")])
def test_eda_value_examples(value, text):
    assert eda_value(value) == text


@pytest.mark.parametrize("series", [eseries.E12, eseries.E96])
def test_eda_value_round_trips_every_eseries_value(series):
    """Every E12/E96 value from 1 pF to 10 MOhm (eseries package) reads back exactly."""
    for scale in (1e-12, 1e-9, 1e-6, 1e-3, 1.0, 1e3, 1e6):
        for v in eseries.erange(series, scale, scale * 9.99):
            text = eda_value(v)
            assert len(text) <= 5 and parse_eda(text) == pytest.approx(v, rel=1e-9)


@pytest.mark.parametrize("bad", [0.0, -1.0, float("nan"), float("inf")])
def test_eda_value_refuses_nonsense(bad):
    with pytest.raises(ValueError):
        eda_value(bad)


def test_spice_numbers_have_no_suffix():
    # SPICE reads "1M" as milli (ngspice manual, scale factors): only mantissa + exponent is written
    for v in (1e6, 4.7e-6, 100e-9, 12.0, 0.05, 1.59154943092e-3):
        text = spice_number(v)
        assert re.fullmatch(r"-?\d(\.\d+)?e[+-]\d\d", text)
        assert float(text) == pytest.approx(v, rel=1e-11)


def test_natural_sort_matches_kicad_bom_order():
    refs = ["R10", "R2", "R1", "C3", "U1", "R21", "C12"]
    assert sorted(refs, key=natural_key) == ["C3", "C12", "R1", "R2", "R10", "R21", "U1"]
    assert join_refs(["R10", "R2", "R1"]) == "R1,R2,R10"  # KiCad joins with a bare comma


@pytest.mark.parametrize("name, expected", [
    ("Rx amp (v2)", "Rx-amp--v2-"), ("", DEFAULT_NAME), (None, DEFAULT_NAME),
    ("a.b_c-D9", "a.b_c-D9"), ("../../etc/passwd", "etc-passwd"),
    ('x"; rm -rf /', "x---rm--rf--"), ("ümlaut", "mlaut"), ("x" * 100, "x" * 64),
    ("\r\n", DEFAULT_NAME), (".bashrc", "bashrc"), ("-rf", "rf"), ("--.-", DEFAULT_NAME),
    ("-" + "y" * 100, "y" * 64)])
def test_safe_filename_rules(name, expected):
    """Issue 3: keep [A-Za-z0-9._-], others -> '-', cut to 64, default gainchain-design.
    Issue 10: never a leading '.' (hidden file) or '-' (read as a command option): common
    practice for download names."""
    assert safe_filename(name) == expected
    assert re.fullmatch(r"[A-Za-z0-9_][A-Za-z0-9._-]{0,63}", safe_filename(name))


@pytest.mark.parametrize("text, expected", [
    ("=cmd|' /C calc'!A0", "'=cmd|' /C calc'!A0"), ("+1", "'+1"), ("-1", "'-1"),
    ("@SUM(A1)", "'@SUM(A1)"), ("\t=1+1", "'=1+1"), ("\r\n@x", "'@x"), ("10k", "10k"),
    ("a\nb", "ab")])
def test_cell_text_neutralises_formula_leads(text, expected):
    """OWASP CSV injection: leads = + - @ tab CR are quoted with an apostrophe."""
    assert cell_text(text) == expected


@pytest.mark.parametrize("text", ["amp\n.control\nshell touch x\n.endc", ".endc", "+ cont",
                                  "*comment", "", "  ", "ok title 1", "=cmd|' /C calc'!A0", "-1"])
def test_spice_title_is_one_safe_line(text):
    title = spice_title(text)
    assert re.fullmatch(r"[A-Za-z0-9 _.,:+=/-]{1,80}", title)
    assert re.match(r"[A-Za-z0-9]", title)  # never ".", "+", "*", "=" first


@pytest.mark.parametrize("text", ['say "hi"', "back\\slash", "new\nline", "cr\rhere",
                                  "(paren) )(", "utf-8 µ"])
def test_sx_round_trips_through_sexpdata(text):
    """sexpdata undoes the escapes as KiCad's lexer does (KiCad file-format documentation)."""
    assert sexpdata.loads(f"(x {sx(text)})")[1] == text
    assert "\n" not in sx(text) and "\r" not in sx(text)
