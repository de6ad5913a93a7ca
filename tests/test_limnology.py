"""Trophic state against the published formulas and boundaries, computed here by hand."""

from __future__ import annotations

import json
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from planner.limnology import (
    CHLOROPHYLL_LINE_UPPER_TP,
    expected_chlorophyll,
    oecd_class,
    trophic_brief,
    trophic_state,
    trophic_words,
    tsi_chlorophyll,
    tsi_secchi,
    tsi_tp,
)


@pytest.mark.parametrize(
    "tp, expected",
    [
        (0.0, "oligotrophic"),
        (9.99, "oligotrophic"),
        (10.0, "oligotrophic"),
        (10.01, "mesotrophic"),
        (35.0, "mesotrophic"),
        (35.01, "eutrophic"),
        (100.0, "eutrophic"),
        (100.01, "hypertrophic"),
        (2500.0, "hypertrophic"),
    ],
)
def test_oecd_classes_at_their_boundaries(tp, expected):
    """Fixed boundaries on annual mean TP: up to 10 ug/L oligotrophic, 10-35 mesotrophic, 35-100
    eutrophic, above 100 hypertrophic (OECD 1982, Vollenweider & Kerekes, Eutrophication of
    waters, fixed boundary system)."""
    assert oecd_class(tp) == expected


@pytest.mark.parametrize("bad", [-1.0, math.nan, math.inf])
def test_oecd_class_refuses_what_is_not_a_concentration(bad):
    with pytest.raises(ValueError):
        oecd_class(bad)


def test_carlson_indices_against_the_published_formulas():
    """Carlson 1977 (Limnology and Oceanography 22:361-369): TSI(TP) = 14.42 ln TP + 4.15,
    TSI(Chl) = 9.81 ln Chl + 30.6, TSI(SD) = 60 - 14.41 ln SD. Each index is 50 at its
    published anchor values (TP 24 ug/L, Chl 7.3 ug/L, SD 2 m within rounding: the three were
    scaled to agree, Carlson 1977, table 2, from memory)."""
    for tp in (1.0, 10.0, 24.0, 100.0, 400.0):
        assert tsi_tp(tp) == pytest.approx(14.42 * math.log(tp) + 4.15, rel=1e-15)
    for chl in (0.5, 7.3, 60.0):
        assert tsi_chlorophyll(chl) == pytest.approx(9.81 * math.log(chl) + 30.6, rel=1e-15)
    assert tsi_secchi(2.0) == pytest.approx(60.0 - 14.41 * math.log(2.0), rel=1e-15)
    for value in (tsi_tp(24.0), tsi_chlorophyll(7.3), tsi_secchi(2.0)):
        assert abs(value - 50.0) < 1.0
    # one doubling of TP adds 10 units (14.42 ln 2 = 10.0), the index's design
    assert tsi_tp(48.0) - tsi_tp(24.0) == pytest.approx(10.0, abs=0.01)


def test_expected_chlorophyll_is_the_dillon_rigler_line():
    """log10 Chl = 1.449 log10 TP - 1.136 (Dillon & Rigler 1974, Limnology and Oceanography
    19:767-773; coefficients from memory): a straight line of that slope in log-log space."""
    tp = np.array([5.0, 20.0, 80.0, 300.0])
    chl = expected_chlorophyll(tp)
    slopes = np.diff(np.log10(chl)) / np.diff(np.log10(tp))
    np.testing.assert_allclose(slopes, 1.449, rtol=1e-12)
    assert math.log10(chl[0]) == pytest.approx(1.449 * math.log10(5.0) - 1.136, rel=1e-12)


@given(st.floats(min_value=0.01, max_value=5000.0))
def test_the_trophic_state_agrees_with_its_parts(tp):
    state = trophic_state(tp)
    assert state.oecd_class == oecd_class(tp)
    assert state.tsi_tp == pytest.approx(float(tsi_tp(tp)))
    assert state.tsi_chlorophyll == pytest.approx(float(tsi_chlorophyll(state.chlorophyll_ug_l)))
    assert state.oecd_class in trophic_words(state)


@pytest.mark.parametrize("tp, extrapolated", [(24.0, False), (100.0, False), (100.5, True)])
def test_chlorophyll_beyond_the_line_is_flagged(tp, extrapolated):
    """Above about 100 ug/L TP chlorophyll rises more slowly than the log-log line (Brown,
    Hoyer, Bachmann & Canfield 2000, Canadian Journal of Fisheries and Aquatic Sciences
    57:1574-1583, abstract: a lessening of slope above 100 ug/L; McCauley, Downing & Watson 1989,
    same journal 46:1171-1175: the relation is sigmoid)."""
    assert CHLOROPHYLL_LINE_UPPER_TP == 100.0
    state = trophic_state(tp)
    assert state.chlorophyll_extrapolated is extrapolated
    assert ("extrapolated" in trophic_words(state)) is extrapolated


def test_the_words_give_large_concentrations_in_full():
    """TP 2290.3 ug/L reads "2,290", never "2.29e+03"; TSI(TP) = 14.42 ln 2290.3 + 4.15 = 115.7
    (Carlson 1977), shown as 116."""
    words = trophic_words(trophic_state(2290.3))
    assert words.startswith("TP 2,290 ug/L: hypertrophic (OECD 1982); TSI(TP) 116;")
    assert "e+" not in words
    assert trophic_brief(trophic_state(24.0)) == "TP 24 ug/L, mesotrophic, TSI(TP) 50"


def test_no_phosphorus_has_no_index_and_dumps_as_strict_json():
    """ln 0 is undefined: TSI(TP) of TP 0 does not exist; JSON shows it as null."""
    state = trophic_state(0.0)
    data = state.as_json()
    assert data["tsi_tp"] is None and data["tsi_chlorophyll"] is None
    json.dumps(data, allow_nan=False)
    assert "TSI(TP) undefined" in trophic_words(state)
