"""Write the invented monitoring records of Alder Mere (alder-mere-monitoring.csv and
alder-mere-samples.csv).

Both records are SYNTHETIC: they are generated here from a known model plus noise, with fixed
seeds, so that the fit can be checked against the values that made them. Alder Mere is an
invented lake; no real monitoring data are used.

Model: the one-variable recycling model of scenarios/alder-mere.toml,
dP/dt = L - s P + r P^q / (m^q + P^q), with the "true" parameters TRUE_PARAMETERS below (not
those of the scenario file, which play the manager's first guess).

alder-mere-monitoring.csv, a yearly record in the model's own units: the yearly external load
(g P / m2 / yr) follows an invented history (rising farm and town loads, a plateau, then cuts)
times a log-normal weather factor; the load is recorded exactly. Lake total phosphorus
(g P / m2) is the modelled state at each year, times a log-normal measurement error. Both are
written to 4 decimals (0.1 g P / m2 is 32 ug/L TP over the lake's mean depth of 3.1 m; 0.1 g P /
m2 / yr is 240 kg P / yr over its 2.4 km2). A few values are left out as gaps.

alder-mere-samples.csv, the same lake as a limnologist's sampling record, in the trade's units:

- one row per sampling date (ISO dates, YYYY-MM-DD), SAMPLES_PER_SEASON dates a year at random
  days from May to September, from SAMPLES_FIRST_YEAR to LAST_YEAR, plus a winter sample
  (January or February) in WINTER_YEARS; no sampling at all in SAMPLE_GAPS (those years are
  missing from the file, as in a real programme that lapsed);
- ``TP [ug/L]``: the modelled lake P at the sampling date, times a log-normal measurement error,
  converted to a concentration over the mean depth of the scenario's ``[lake]`` block with pint
  (planner.units: C = areal store / mean depth), rounded to whole ug/L;
- ``load [kg/yr]``: the year's external load estimate (its own weather draw on the invented
  history above), converted to a lake-wide load over the lake's area with pint, rounded to whole
  kg, repeated on each sampling date of the year; in the model the yearly load applies at the
  middle of its year (a yearly mean rate), linear in between;
- the line ``# season: growing`` asks the planner for growing-season means of TP (May to
  September, so the winter samples are left out); loads are averaged over each calendar year.

The conversions use the scenario's [lake] block at the time of writing: run the script again
whenever that block changes (the tests check that the file is what the script writes).

Run from the repository root:  python scenarios/data/make_demo_record.py
"""

from __future__ import annotations

import datetime
import sys
from pathlib import Path

import numpy as np

from planner.integrate import Problem, Save, integrate
from planner.monitoring import decimal_year
from planner.scenario import load_scenario
from planner.schedules import ControlPath
from planner.units import parse_quantity, quantity, total_load, tp_concentration

HERE = Path(__file__).resolve().parent
SCENARIO = HERE.parent / "alder-mere.toml"
OUTPUT = HERE / "alder-mere-monitoring.csv"
SAMPLES_OUTPUT = HERE / "alder-mere-samples.csv"
SEED = 20240611
FIRST_YEAR, LAST_YEAR = 1975, 2024
TRUE_PARAMETERS = {"s": 1.25, "r": 0.65, "m": 0.39, "q": 8.0}
INITIAL_P = 0.1  # g P / m2 in the first year (32 ug/L TP over the mean depth of 3.1 m)
WEATHER_SPREAD = 0.08  # standard deviation of the log of the yearly weather factor on the load
MEASUREMENT_SPREAD = 0.06  # standard deviation of the log of the TP measurement error
TP_GAPS = (1991, 2013)  # years without a TP sample
LOAD_GAPS = (2004,)  # a year without a load estimate (the planner interpolates it)
SAMPLES_SEED = 20250514
SAMPLES_FIRST_YEAR = 1986
SAMPLES_PER_SEASON = (3, 6)  # fewest and most sampling dates from May to September
SAMPLE_GAPS = (1996, 2003, 2004, 2012, 2019)  # years without any sampling
WINTER_YEARS = (1990, 1999, 2008, 2016)  # years with one extra sample in January or February


def load_history(years: np.ndarray) -> np.ndarray:
    """Invented trend of the yearly load (g P / m2 / yr): rising to 2000, a plateau, then cuts
    (over the lake's 2.4 km2, from 312 kg P / yr to 804, then down to 528)."""
    return np.interp(years, [1975, 2000, 2008, 2024], [0.13, 0.335, 0.33, 0.22])


def build_record() -> str:
    """The CSV text of the record (deterministic: fixed seed)."""
    rng = np.random.default_rng(SEED)
    scenario = load_scenario(SCENARIO)
    years = np.arange(FIRST_YEAR, LAST_YEAR + 1, dtype=float)
    loads = load_history(years) * np.exp(WEATHER_SPREAD * rng.standard_normal(years.size))
    t = years - years[0]
    system = scenario.system(**TRUE_PARAMETERS)
    problem = Problem(system, np.array([INITIAL_P]), ControlPath(t, loads), float(t[-1]))
    truth = integrate(problem, save=Save(at=tuple(t))).samples[:, 0, 0]
    measured = truth * np.exp(MEASUREMENT_SPREAD * rng.standard_normal(years.size))
    lines = [
        "# Alder Mere (an invented lake): SYNTHETIC monitoring record, not real data.",
        "# Generated by scenarios/data/make_demo_record.py from the recycling model with",
        "# s = {s}, r = {r}, m = {m}, q = {q} plus log-normal noise (seed {seed}).".format(
            **TRUE_PARAMETERS, seed=SEED
        ),
        "year,load [g P / m2 / yr],TP [g P / m2]",
    ]
    for year, load, tp in zip(years, loads, measured, strict=True):
        load_cell = "" if year in LOAD_GAPS else f"{load:.4f}"
        tp_cell = "" if year in TP_GAPS else f"{tp:.4f}"
        lines.append(f"{year:.0f},{load_cell},{tp_cell}")
    return "\n".join(lines) + "\n"


def _sampling_dates(rng: np.random.Generator, year: int) -> list[datetime.date]:
    """The sampling dates of one year: a few distinct days from May to September, plus a winter
    day in WINTER_YEARS; sorted."""
    low, high = SAMPLES_PER_SEASON
    first, last = datetime.date(year, 5, 1), datetime.date(year, 9, 30)
    days = rng.choice((last - first).days + 1, size=rng.integers(low, high + 1), replace=False)
    dates = [first + datetime.timedelta(days=int(d)) for d in days]
    if year in WINTER_YEARS:
        dates.append(datetime.date(year, 1, 1) + datetime.timedelta(days=int(rng.integers(59))))
    return sorted(dates)


def build_samples() -> str:
    """The CSV text of the sampling record (deterministic: fixed seed)."""
    rng = np.random.default_rng(SAMPLES_SEED)
    scenario = load_scenario(SCENARIO)
    area, depth = parse_quantity(scenario.lake.area), parse_quantity(scenario.lake.mean_depth)
    state_unit, load_unit = scenario.state_units["P"], scenario.control.unit
    years = np.arange(FIRST_YEAR, LAST_YEAR + 1)
    loads = load_history(years) * np.exp(WEATHER_SPREAD * rng.standard_normal(years.size))
    knots = years + 0.5 - FIRST_YEAR  # a yearly load applies at the middle of its year
    sampled = [y for y in range(SAMPLES_FIRST_YEAR, LAST_YEAR + 1) if y not in SAMPLE_GAPS]
    dates = [date for year in sampled for date in _sampling_dates(rng, year)]
    times = np.array([decimal_year(d.year, d.month, d.day) for d in dates]) - FIRST_YEAR
    system = scenario.system(**TRUE_PARAMETERS)
    path = ControlPath(np.concatenate([[0.0], knots]), np.concatenate([[loads[0]], loads]))
    problem = Problem(system, np.array([INITIAL_P]), path, float(times[-1]))
    truth = integrate(problem, save=Save(at=tuple(times))).samples[:, 0, 0]
    measured = truth * np.exp(MEASUREMENT_SPREAD * rng.standard_normal(times.size))
    tp = tp_concentration(measured, state_unit, depth=depth, area=area).to("ug / L").magnitude
    kilograms = total_load(quantity(loads, load_unit), area, "kg / yr").magnitude
    by_year = dict(zip(years.tolist(), kilograms, strict=True))
    gaps = ", ".join(str(y) for y in SAMPLE_GAPS)
    lines = [
        "# Alder Mere (an invented lake): SYNTHETIC sampling record, not real data.",
        "# Generated by scenarios/data/make_demo_record.py from the recycling model with",
        "# s = {s}, r = {r}, m = {m}, q = {q} plus log-normal noise (seed {seed}).".format(
            **TRUE_PARAMETERS, seed=SAMPLES_SEED
        ),
        f"# TP over the mean depth {scenario.lake.mean_depth}; loads over the area "
        f"{scenario.lake.area} (the scenario's [lake]).",
        "# load: the year's external load estimate, repeated on each sampling date of the year.",
        f"# No sampling in {gaps}.",
        "# season: growing",
        "date,load [kg/yr],TP [ug/L]",
    ]
    for date, value in zip(dates, tp, strict=True):
        lines.append(f"{date.isoformat()},{by_year[date.year]:.0f},{value:.0f}")
    return "\n".join(lines) + "\n"


def main() -> int:
    OUTPUT.write_text(build_record(), encoding="utf-8")
    print(f"wrote {OUTPUT}", file=sys.stderr)
    SAMPLES_OUTPUT.write_text(build_samples(), encoding="utf-8")
    print(f"wrote {SAMPLES_OUTPUT}", file=sys.stderr)
    return 0


if __name__ == "__main__":
    sys.exit(main())
