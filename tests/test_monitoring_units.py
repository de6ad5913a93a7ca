"""Monitoring records as a limnologist keeps them: lake TP in ug/L (or mg/L, mg/m3), loads in
kg/yr, t/yr or mg/m2/yr, ISO dates, several samples a year with years missing.

Outside references used below:
- unit definitions, checked with pint's own registry and by hand: 1 L = 1e-3 m3, 1 ha = 1e4 m2,
  1 t = 1e3 kg, micro = 1e-6, milli = 1e-3 (BIPM 2019, The International System of Units, 9th
  edition, SI prefixes and the non-SI units accepted for use with the SI; from memory);
- mean depth = volume / area (Wetzel 2001, Limnology, 3rd edition, chapter on lake
  morphometry), so a concentration times the mean depth is the areal store of the water column;
- dates: the proleptic Gregorian calendar of Python's datetime and pandas' Timestamp (day of
  the year, leap years), which the ISO 8601 dates YYYY-MM-DD count in;
- yearly means: pandas groupby means of the same CSV text, read by pandas.read_csv;
- the growing season May to September (common practice, no source).
"""

from __future__ import annotations

import contextlib
import datetime
import importlib.util
import io
import json
from functools import cache
from pathlib import Path

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.calibration import fit_record, fit_text, observations_for
from planner.cli import main
from planner.errors import InputError
from planner.integrate import Problem, Save, integrate
from planner.monitoring import (
    GROWING_SEASON,
    column_conversion,
    parse_record,
    read_record,
    same_unit,
    yearly_means,
)
from planner.scenario import load_scenario, parse_scenario
from planner.scenario.lake import Lake
from planner.schedules import ControlPath

ROOT = Path(__file__).resolve().parent.parent
ALDER = ROOT / "scenarios" / "alder-mere.toml"
SAMPLES = ROOT / "scenarios" / "data" / "alder-mere-samples.csv"
DEMO_SCRIPT = ROOT / "scenarios" / "data" / "make_demo_record.py"

AREA_HA, DEPTH_M = 180.0, 2.5  # the invented test lake: 180 ha = 1.8e6 m2, mean depth 2.5 m
AREA_M2 = AREA_HA * 1e4
LAKE = Lake(area=f"{AREA_HA:g} ha", mean_depth=f"{DEPTH_M:g} m")
SCENARIO_TEXT = f"""
name = "Test Mere (invented)"
[model]
kind = "recycling"
[model.parameters]
L = 2.0
s = 1.1
r = 5.5
m = 4.0
q = 8.0
[control]
parameter = "L"
unit = "g P / m2 / yr"
range = [0.0, 5.0]
[state]
P = 2.0
[state_units]
P = "g P / m2"
[lake]
area = "{AREA_HA:g} ha"
mean_depth = "{DEPTH_M:g} m"
[target]
variable = "P"
[simulation]
horizon = 30.0
"""
TRUE = {"s": 1.2, "r": 6.0}
UREG = pint.UnitRegistry()


@cache
def _scenario():
    return parse_scenario(SCENARIO_TEXT, "test-mere.toml")


def _run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


# ---------------------------------------------------------------------------------------------
# Units through pint


@pytest.mark.parametrize(
    "unit, pint_unit, by_hand",
    [
        # C [ug/L] x depth [m]: 1 ug/L = 1e-6 g / 1e-3 m3 = 1e-3 g/m3, times 2.5 m
        ("ug/L", "microgram / liter", 1e-3 * DEPTH_M),
        ("mg/L", "milligram / liter", 1.0 * DEPTH_M),
        ("mg/m3", "milligram / meter**3", 1e-3 * DEPTH_M),
        ("µg/L", "microgram / liter", 1e-3 * DEPTH_M),
        ("g P / m2", "gram / meter**2", 1.0),
        ("mg P/m2", "milligram / meter**2", 1e-3),
    ],
)
def test_lake_tp_columns_read_as_the_areal_store_against_pint_and_by_hand(unit, pint_unit, by_hand):
    """Lake TP in ug/L, mg/L or mg/m3 times the mean depth is g P / m2 (Wetzel 2001; BIPM
    2019), the factor as pint's own registry computes it and as worked by hand; the
    reverse conversion multiplies back to 1 (a round trip)."""
    record = parse_record(f"year,TP [{unit}]\n2000,1\n2001,2\n", "tp.csv")
    there = column_conversion(record, "TP", "g P / m2", LAKE, reads_as="P")
    quantity = UREG.Quantity(1.0, pint_unit)
    if quantity.dimensionality == UREG.Quantity(1.0, "g/L").dimensionality:
        quantity = quantity * UREG.Quantity(DEPTH_M, "meter")
    assert there.factor == pytest.approx(quantity.to("gram / meter**2").magnitude, rel=1e-12)
    assert there.factor == pytest.approx(by_hand, rel=1e-12)
    back = parse_record("year,P [g P / m2]\n2000,1\n2001,2\n", "p.csv")
    reverse = column_conversion(back, "P", unit, LAKE, reads_as="TP")
    assert there.factor * reverse.factor == pytest.approx(1.0, rel=1e-12)


@pytest.mark.parametrize(
    "unit, by_hand",
    [
        ("t/yr", 1e6 / AREA_M2),  # 1 t = 1e6 g, over 1.8e6 m2
        ("kg/yr", 1e3 / AREA_M2),
        ("kg P / yr", 1e3 / AREA_M2),
        ("mg/m2/yr", 1e-3),
        ("g P / m2 / yr", 1.0),
        ("kg / ha / yr", 1e3 / 1e4),
    ],
)
def test_load_columns_read_as_the_areal_load_and_back(unit, by_hand):
    """Loads in t/yr or kg/yr divided by the lake area, and areal loads in other prefixes, are
    g P / m2 / yr as worked by hand (BIPM 2019: 1 t = 1e3 kg, 1 ha = 1e4 m2); converting back
    to the column's unit gives a factor of exactly its inverse (round trip through pint)."""
    record = parse_record(f"year,load [{unit}]\n2000,1\n2001,2\n", "load.csv")
    there = column_conversion(record, "load", "g P / m2 / yr", LAKE, reads_as="L")
    assert there.factor == pytest.approx(by_hand, rel=1e-12)
    back = parse_record("year,L [g P / m2 / yr]\n2000,1\n2001,2\n", "l.csv")
    reverse = column_conversion(back, "L", unit, LAKE, reads_as="load")
    assert there.factor * reverse.factor == pytest.approx(1.0, rel=1e-12)


@settings(max_examples=40, deadline=None)
@given(st.floats(min_value=1e-3, max_value=1e4, allow_nan=False, allow_infinity=False))
def test_concentration_round_trip_through_a_scenario_reading(value):
    """Any ug/L value read into the model's g P / m2 and shown back as ug/L by the scenario's
    own conversion (planner.units) is unchanged (pint round trip)."""
    from planner.units import scenario_lake_conversion

    record = parse_record(f"year,TP [ug/L]\n2000,{value!r}\n2001,1\n", "tp.csv")
    factor = column_conversion(record, "TP", "g P / m2", LAKE, reads_as="P").factor
    shown = scenario_lake_conversion(_scenario()).tp(value * factor)
    assert shown == pytest.approx(value, rel=1e-12)


def test_units_are_compared_by_pint_not_by_spelling():
    """Same unit: a conversion factor of exactly 1 in pint (ug/L = mg/m3: 1e-6 g / 1e-3 m3 =
    1e-3 g / 1 m3, BIPM 2019); substances must agree (P and TP both weigh phosphorus)."""
    assert same_unit("ug/L", "mg/m3") and same_unit("ug / L", "µg/L")
    assert not same_unit("mg/L", "ug/L") and not same_unit("kg/yr", "t/yr")
    assert same_unit("g P / m2", "g TP/m2") and not same_unit("g P / m2", "g N / m2")
    record = parse_record("year,TP [ug/L],TP [g P / m2]\n2000,30,1\n2001,31,1.1\n", "two.csv")
    assert record.find("TP [mg/m3]") == 0 and record.find("TP (g/m2)") == 1


# ---------------------------------------------------------------------------------------------
# Dates


def _pandas_decimal_year(text: str) -> float:
    stamp = pd.Timestamp(text)
    return stamp.year + (stamp.day_of_year - 1) / (366 if stamp.is_leap_year else 365)


@settings(max_examples=60, deadline=None)
@given(st.dates(min_value=datetime.date(1800, 1, 1), max_value=datetime.date(2200, 12, 30)))
def test_iso_dates_are_decimal_years_counted_in_days(day):
    """YYYY-MM-DD is year + (day of the year - 1) / (days in that year), with the day of the
    year and leap years from pandas' Timestamp and the month from Python's datetime."""
    following = day + datetime.timedelta(days=1)
    record = parse_record(f"date,TP\n{day.isoformat()},1\n{following.isoformat()},2\n", "d.csv")
    expected = [_pandas_decimal_year(day.isoformat()), _pandas_decimal_year(following.isoformat())]
    np.testing.assert_allclose(record.times, expected, rtol=0, atol=1e-9)
    assert record.months.tolist() == [day.month, following.month]
    assert record.dated and record.dates == (day.isoformat(), following.isoformat())


def test_month_dates_are_evenly_spaced_twelfths():
    """YYYY-MM stands for the month, dated at its middle: year + (month - 0.5) / 12, so a
    monthly series is evenly spaced (months from datetime)."""
    months = [datetime.date(2003, m, 1) for m in range(1, 13)] + [datetime.date(2004, 1, 1)]
    text = "date,TP\n" + "".join(f"{d:%Y-%m},{i}\n" for i, d in enumerate(months))
    record = parse_record(text, "monthly.csv")
    expected = [d.year + (d.month - 0.5) / 12 for d in months]
    np.testing.assert_allclose(record.times, expected, rtol=0, atol=1e-12)
    np.testing.assert_allclose(np.diff(record.times), 1 / 12, rtol=1e-9)
    assert record.months.tolist() == [d.month for d in months]


@pytest.mark.parametrize(
    "cells, expected",
    [
        (["2001-02-29", "2001-03-01"], "row 2, column date: date '2001-02-29' is not a calendar"),
        (["2001-13-01", "2001-12-01"], "row 2, column date: date '2001-13-01' is not a calendar"),
        (["2001-05-01", "2001.5"], "row 3, column date: '2001.5' is a decimal year but row 2"),
        (["2001-05-01", "2001-05-01"], "row 3, column date: date 2001-05-01 appears twice"),
        (["2001-06-01", "2001-05-01"], "row 3, column date: date 2001-05-01 comes after"),
        (["05/06/2001", "2001-05-01"], "row 2, column date: time '05/06/2001' is not a number"),
    ],
)
def test_bad_dates_are_refused_naming_the_row_and_the_column(cells, expected):
    text = "date,TP\n" + "".join(f"{cell},1\n" for cell in cells)
    with pytest.raises(InputError) as error:
        parse_record(text, "dates.csv")
    assert f"dates.csv: {expected}" in str(error.value)


# ---------------------------------------------------------------------------------------------
# Yearly means against pandas


def _sampling_text(rng: np.random.Generator, *, season_line: str = "") -> str:
    """An invented sampling record: 2 to 6 dates a year from April to October (some outside
    the growing season), a winter date in some years, years 2005 and 2009 without any
    sample, the year's load on one row of the year only, a few TP gaps."""
    lines = [season_line] if season_line else []
    lines.append("date,load [kg/yr],TP [ug/L]")
    for year in range(2001, 2013):
        if year in (2005, 2009):
            continue
        days = rng.choice(np.arange(91, 304), size=rng.integers(2, 7), replace=False)
        if year % 3 == 0:
            days = np.append(days, rng.integers(10, 50))
        dates = sorted(datetime.date(year, 1, 1) + datetime.timedelta(days=int(d)) for d in days)
        for index, date in enumerate(dates):
            load = f"{rng.uniform(2000, 6000):.1f}" if index == len(dates) // 2 else ""
            tp = "" if rng.random() < 0.1 else f"{rng.uniform(40, 400):.1f}"
            lines.append(f"{date.isoformat()},{load},{tp}")
    return "\n".join(lines) + "\n"


def _pandas_means(text: str, season: str) -> pd.DataFrame:
    frame = pd.read_csv(io.StringIO(text), comment="#")
    stamp = pd.to_datetime(frame["date"])
    frame["year"] = stamp.dt.year
    first, last = GROWING_SEASON if season == "growing" else (1, 12)
    in_season = stamp.dt.month.between(first, last)
    tp = frame[in_season].groupby("year")["TP [ug/L]"].mean()
    load = frame.groupby("year")["load [kg/yr]"].mean()
    return pd.DataFrame({"load": load, "TP": tp}).dropna(how="all")


@pytest.mark.parametrize("season", ["annual", "growing"])
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_yearly_means_are_pandas_groupby_means(season, seed):
    """Each year's mean of the season's TP samples and of all the year's load values equals
    pandas' groupby mean of the same CSV; years without a sample are missing, not filled in,
    and listed."""
    text = _sampling_text(np.random.default_rng(seed))
    record = parse_record(text, "samples.csv")
    means, summary = yearly_means(record, season, whole_year=["load"])
    expected = _pandas_means(text, season)
    assert means.times.tolist() == [float(y) for y in expected.index]
    np.testing.assert_allclose(means.column("load"), expected["load"], rtol=1e-12)
    np.testing.assert_allclose(means.column("TP"), expected["TP"], rtol=1e-12)
    assert summary.season == season
    with_tp = expected["TP"].dropna().index
    span = set(range(int(with_tp.min()), int(with_tp.max()) + 1))
    assert set(summary.missing) == span - set(with_tp)
    assert {2005, 2009} <= set(summary.missing)
    assert f"no TP sample in {', '.join(str(y) for y in summary.missing)}" in summary.words()


def test_season_line_chooses_the_means_and_is_stated(tmp_path):
    """`# season: growing` in the file gives growing-season means (May to September, common
    practice, no source), said in the fit's reading; an unknown season is refused naming the
    row; decimal years with several rows a year are taken as they stand, and said so."""
    rng = np.random.default_rng(5)
    text = _sampling_text(rng, season_line="# season: growing")
    record = parse_record(text, "grow.csv")
    assert (record.season, record.season_row) == ("growing", 1)
    means, summary = yearly_means(record, record.season, whole_year=["load"])
    np.testing.assert_allclose(means.column("TP"), _pandas_means(text, "growing")["TP"], rtol=1e-12)
    assert "over the growing season, May to September" in summary.words()
    with pytest.raises(InputError, match=r"bad.csv: row 1, season: 'summer' is not a season"):
        parse_record("# season: summer\nyear,TP\n2000,1\n2001,2\n", "bad.csv")
    decimal = "year,load,P\n2000.2,2,1\n2000.6,2,1.1\n2001.4,2,1.2\n2002.5,2,1.3\n2003.5,2,1.2\n"
    observations = observations_for(parse_record(decimal, "dec.csv"), _scenario())
    assert observations.reading.means is None
    assert "taken as they stand" in observations.reading.note
    observations = observations_for(
        parse_record("# season: annual\n" + decimal, "dec.csv"), _scenario()
    )
    assert observations.record.times.tolist() == [2000.0, 2001.0, 2002.0, 2003.0]
    np.testing.assert_allclose(observations.values[:2], [1.05, 1.2])
    yearly = "# season: growing\nyear,load,P\n2000,2,1\n2001,2,1.1\n2002,2,1.2\n"
    observations = observations_for(parse_record(yearly, "yearly.csv"), _scenario())
    assert observations.reading.means is None
    assert "one row a year, taken as it stands" in observations.reading.note
    np.testing.assert_array_equal(observations.values, [1.0, 1.1, 1.2])


def test_dated_samples_without_a_season_line_get_annual_means():
    """Dated samples are always reduced to yearly means; without a season line, of every
    sample of the year (the default, said as such), equal to pandas' groupby means."""
    text = _sampling_text(np.random.default_rng(8))
    observations = observations_for(parse_record(text, "dated.csv"), _scenario())
    means = observations.reading.means
    assert (means.season, means.chosen_by) == ("annual", "the default for dated samples")
    expected = _pandas_means(text, "annual")["TP"].dropna() * DEPTH_M * 1e-3
    np.testing.assert_allclose(observations.values, expected, rtol=1e-12)


# ---------------------------------------------------------------------------------------------
# The fit on a dated record in ug/L against the fit on the same values as yearly areal means


def _dated_record_text(seed: int) -> str:
    """A sampling record of the test lake from the recycling model with TRUE parameters: four
    dates from May to September a year plus a February date every fourth year, two lapsed
    years; TP at each date (engine) in ug/L, times 4% log-normal error; loads in t/yr."""
    rng = np.random.default_rng(seed)
    years = np.arange(2000, 2026)
    plan = np.interp(years, [2000, 2006, 2012, 2018, 2025], [2.9, 1.0, 2.8, 0.95, 2.4])
    loads = plan * np.exp(0.05 * rng.standard_normal(years.size))  # g P / m2 / yr
    dates = []
    for year in years:
        if year in (2008, 2017):
            continue
        days = rng.choice(np.arange(121, 273), size=4, replace=False)
        if year % 4 == 0:
            days = np.append(days, 40)
        dates += sorted(datetime.date(year, 1, 1) + datetime.timedelta(int(d)) for d in days)
    times = np.array([_pandas_decimal_year(d.isoformat()) for d in dates]) - years[0]
    system = _scenario().system(**TRUE)
    knots = years - years[0] + 0.5  # a yearly load applies at the middle of its year
    path = ControlPath(np.concatenate([[0.0], knots]), np.concatenate([[loads[0]], loads]))
    problem = Problem(system, np.array([7.0]), path, float(times[-1]))
    areal = integrate(problem, save=Save(at=tuple(times))).samples[:, 0, 0]
    areal = areal * np.exp(0.04 * rng.standard_normal(areal.size))
    tp = areal / DEPTH_M * 1e3  # g/m2 over the depth is g/m3; 1 g/m3 = 1e3 ug/L
    tonnes = dict(zip(years.tolist(), loads * AREA_M2 / 1e6, strict=True))
    lines = ["# season: growing", "date,load [t/yr],TP [ug/L]"]
    lines += [
        f"{d.isoformat()},{float(tonnes[d.year])!r},{float(value)!r}"
        for d, value in zip(dates, tp, strict=True)
    ]
    return "\n".join(lines) + "\n"


def _areal_equivalent(text: str) -> str:
    """The same record as a yearly record in the model's units, worked out with pandas and by
    hand: growing-season TP means times the depth (ug/L x m x 1e-3 = g/m2), load means
    divided by the area (t/yr x 1e6 g/t / m2 = g/m2/yr)."""
    frame = pd.read_csv(io.StringIO(text), comment="#")
    stamp = pd.to_datetime(frame["date"])
    frame["year"] = stamp.dt.year
    tp = frame[stamp.dt.month.between(5, 9)].groupby("year")["TP [ug/L]"].mean()
    load = frame.groupby("year")["load [t/yr]"].mean()
    lines = ["year,load [g P / m2 / yr],P [g P / m2]"]
    for year in load.index:
        lines.append(
            f"{year},{float(load[year] * 1e6 / AREA_M2)!r},{float(tp[year] * DEPTH_M * 1e-3)!r}"
        )
    return "\n".join(lines) + "\n"


def test_fit_on_dated_ug_per_litre_samples_equals_the_fit_on_yearly_areal_means():
    """The fit reads the dated record (ug/L, t/yr, growing season) as the yearly areal record
    worked out independently (pandas means, hand conversions): the same estimates, intervals
    and thresholds to 1e-6, and the reading is stated once in the summary (the same data in
    other units give the same least-squares fit; common practice, no source)."""
    scenario = _scenario()
    text = _dated_record_text(3)
    dated = observations_for(parse_record(text, "dated.csv"), scenario)
    areal = observations_for(parse_record(_areal_equivalent(text), "areal.csv"), scenario)
    np.testing.assert_array_equal(dated.record.times, areal.record.times)
    np.testing.assert_allclose(dated.values, areal.values, rtol=1e-12)
    fits = [
        fit_record(scenario, observations, fit=["s", "r"], log=True, bootstrap=0)
        for observations in (dated, areal)
    ]
    for name in ("s", "r"):
        first, second = (fit.parameter(name) for fit in fits)
        assert first.value == pytest.approx(second.value, rel=1e-6)
        np.testing.assert_allclose(first.interval, second.interval, rtol=1e-5)
    for kind in ("recovery", "collapse"):
        assert fits[0].thresholds[kind].value == pytest.approx(
            fits[1].thresholds[kind].value, rel=1e-6
        )
    summary = fit_text(fits[0])
    assert summary.count("1 ug/L = 0.0025 g P / m2 (times the mean depth 2.5 m)") == 1
    assert summary.count("1 t/yr = 0.5556 g P / m2 / yr (divided by the area 180 ha)") == 1
    assert summary.count("no TP sample in 2008, 2017") == 1
    assert "yearly means" not in fit_text(fits[1]) and "read:" not in fit_text(fits[1])


# ---------------------------------------------------------------------------------------------
# Refusals that name the file and the column


@pytest.mark.parametrize(
    "header, scenario_text, expected",
    [
        ("year,load,TP [ppb]", SCENARIO_TEXT, "column TP: cannot read the unit 'ppb'"),
        ("year,load [ug/L],TP", SCENARIO_TEXT, "column load: 'ug/L' is a concentration"),
        ("year,load,TP [kg/yr]", SCENARIO_TEXT, "column TP: 'kg/yr' is a load"),
        ("year,load,TP [g N / m2]", SCENARIO_TEXT, "column TP: 'g N / m2' weighs N"),
        (
            "year,load,TP [ug/L]",
            SCENARIO_TEXT.split("[lake]")[0] + "[target]" + SCENARIO_TEXT.split("[target]")[1],
            "column TP: 'ug/L' is a concentration (mass per volume) and P is an areal store "
            "(mass per area) ('g P / m2'): converting needs the lake's mean depth; add a [lake]",
        ),
        (
            "year,load [t/yr],TP",
            SCENARIO_TEXT.split("[lake]")[0] + "[target]" + SCENARIO_TEXT.split("[target]")[1],
            "column load: 't/yr' is a load (mass per time) and the load L is an areal load",
        ),
    ],
)
def test_units_that_cannot_be_read_for_the_model_exit_2_naming_file_and_column(
    tmp_path, header, scenario_text, expected
):
    base = tmp_path / "base.toml"
    base.write_text(scenario_text, encoding="utf-8")
    data = tmp_path / "record.csv"
    rows = [f"{2000 + i},2.0,{1.5 + 0.1 * i}" for i in range(12)]
    data.write_text("\n".join([header, *rows]) + "\n", encoding="utf-8")
    code, _, stderr = _run(["fit", str(data), "--scenario", str(base), "--bootstrap", "0"])
    assert code == 2, stderr
    assert f"{data}: {expected}" in stderr


# ---------------------------------------------------------------------------------------------
# The demo sampling record


def _demo_module():
    spec = importlib.util.spec_from_file_location("make_demo_record", DEMO_SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_samples_are_what_the_script_writes_and_fit_back_to_their_true_values():
    """The committed sampling record (ug/L, dates, gaps) is exactly what its script writes from
    the scenario's model and [lake]; `planner fit` reads it (conversions and growing-season
    means stated) and finds the script's true s, r and m within 5% (synthetic data from a known
    model; the tolerance covers the noise and the spread of sampling days within a season)."""
    demo = _demo_module()
    assert SAMPLES.read_text(encoding="utf-8") == demo.build_samples()
    record = read_record(SAMPLES)
    assert record.dated and record.season == "growing"
    code, stdout, stderr = _run(
        ["fit", str(SAMPLES), "--scenario", str(ALDER), "--log", "--bootstrap", "0", "--json"]
    )
    assert code == 0, stderr
    result = json.loads(stdout)
    means = result["reading"]["yearly_means"]
    assert means["season"] == "growing" and means["months"] == list(GROWING_SEASON)
    assert set(means["missing_years"]) == set(demo.SAMPLE_GAPS)
    assert means["left_out"] == len(demo.WINTER_YEARS)
    units = {c["unit"]: c["model_unit"] for c in result["reading"]["conversions"]}
    scenario = load_scenario(ALDER)
    assert units == {"kg/yr": scenario.control.unit, "ug/L": scenario.state_units["P"]}
    for name in ("s", "r", "m"):
        value = result["parameters"][name]["value"]
        assert value == pytest.approx(demo.TRUE_PARAMETERS[name], rel=0.05), name
