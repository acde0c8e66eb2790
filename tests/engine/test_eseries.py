"""E-series tables and rounding against IEC 60063.

References: the PyPI package ``eseries`` (an independent implementation of IEC 60063), and
a few values quoted from memory of IEC 60063 (said so beside each check).
"""

from __future__ import annotations

import math

import eseries as ref  # PyPI "eseries": independent IEC 60063 tables
import numpy as np
import pytest

from service.engine.model import eseries

REF_SERIES = {"E6": ref.E6, "E12": ref.E12, "E24": ref.E24, "E48": ref.E48, "E96": ref.E96,
              "E192": ref.E192}


@pytest.mark.parametrize("name", sorted(REF_SERIES))
def test_table_matches_eseries_package(name):
    # PyPI eseries: series() gives the mantissas as integers (2 digits to E24, 3 above).
    theirs = ref.series(REF_SERIES[name])
    scale = 10.0 if name in ("E6", "E12", "E24") else 100.0
    ours = eseries.SERIES[name]
    assert len(ours) == len(theirs) == int(name[1:])
    assert [round(m * scale) for m in ours] == list(theirs)


@pytest.mark.parametrize("name", sorted(REF_SERIES))
def test_values_between_matches_eseries_erange(name):
    # PyPI eseries: erange lists every series value in [start, stop], across decades.
    theirs = list(ref.erange(REF_SERIES[name], 4.7e-9, 3.3e5))
    ours = eseries.values_between(name, 4.7e-9, 3.3e5)
    assert len(ours) == len(theirs)
    np.testing.assert_allclose(ours, theirs, rtol=1e-12)


def test_e12_from_memory():
    # From memory of IEC 60063: the twelve E12 values of a decade.
    assert eseries.SERIES["E12"] == (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)


@pytest.mark.parametrize("value", [2.7, 3.0, 3.3, 4.3, 9.1])
def test_e24_members_from_memory(value):
    # From memory of IEC 60063: E24 holds 2.7, 3.0, 3.3, 4.3 and 9.1 (historic roundings).
    assert value in eseries.SERIES["E24"]
    assert eseries.in_series("E24", value * 1e3)


@pytest.mark.parametrize("value", [1.02, 4.99, 9.76])
def test_e96_members_from_memory(value):
    # From memory of IEC 60063: E96 holds 1.02, 4.99 and 9.76.
    assert value in eseries.SERIES["E96"]
    assert eseries.in_series("E96", value * 1e-6)


def test_e192_exception_from_memory():
    # From memory of IEC 60063: E192 lists 9.20 where the formula gives 9.19.
    assert 9.20 in eseries.SERIES["E192"] and 9.19 not in eseries.SERIES["E192"]


def test_not_members():
    assert not eseries.in_series("E12", 3.0e3)
    assert not eseries.in_series("E96", 1.01e4)
    assert not eseries.in_series("E24", 4.8e-6)


def _random_values(seed=60063, count=400):
    rng = np.random.default_rng(seed)
    return 10.0 ** rng.uniform(-11, 7, count)


@pytest.mark.parametrize("name", sorted(REF_SERIES))
def test_round_up_down_match_eseries(name):
    series = REF_SERIES[name]
    for v in _random_values():
        # PyPI eseries: find_greater_than_or_equal / find_less_than_or_equal.
        assert eseries.round_up(name, v) == pytest.approx(
            ref.find_greater_than_or_equal(series, v), rel=1e-12)
        assert eseries.round_down(name, v) == pytest.approx(
            ref.find_less_than_or_equal(series, v), rel=1e-12)


@pytest.mark.parametrize("name", sorted(REF_SERIES))
def test_nearest_is_log_nearest_of_reference_values(name):
    for v in _random_values(seed=7):
        decade = 10.0 ** math.floor(math.log10(v))
        # Candidates from the PyPI eseries table around v; nearest on a log scale.
        cands = list(ref.erange(REF_SERIES[name], decade / 10.0, decade * 100.0))
        best = min(cands, key=lambda c: abs(math.log(c / v)))
        assert eseries.nearest(name, v) == pytest.approx(best, rel=1e-12)


@pytest.mark.parametrize("name", sorted(REF_SERIES))
def test_members_round_to_themselves(name):
    for m in eseries.SERIES[name]:
        for exponent in (-9, 0, 4):
            v = float(f"{m:.2f}e{exponent}")
            assert eseries.nearest(name, v) == v
            assert eseries.round_up(name, v) == v
            assert eseries.round_down(name, v) == v
            assert eseries.in_series(name, v)


def test_bad_values_refused():
    for bad in (0.0, -1.0, math.inf, math.nan):
        with pytest.raises(ValueError):
            eseries.nearest("E12", bad)
