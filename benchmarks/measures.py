"""An ensemble whose in-lake measure lasts a different time in every member: longevities counted
in whole months (what the catalogue does) against longevities to the day (each member's end of
effect its own cut of the run), and against the same measure made certain.

Scenario: the Alder Mere demo (its priors on r, m and s and its noisy yearly loads), its
aluminium schedule with the treatment taken from the catalogue (shallow lake, Huser et al. 2016
longevity). Each side runs the whole run_ensemble (integration, settling, verdict, metrics),
given the diagram, best of --repeat runs. The recovery probabilities are printed beside the
times: whole months must not move them beyond their sampling error.

Run: python benchmarks/measures.py [--members N] [--repeat K]
"""

from __future__ import annotations

import argparse
import copy
import time
import tomllib
from pathlib import Path

import planner.measures
from planner.ensemble import run_ensemble
from planner.equilibria import diagram_for
from planner.scenario import scenario_from_data

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
ALUMINIUM = {
    "kind": "in-lake-measure",
    "name": "Aluminium treatment",
    "measure": "aluminium",
    "lake_type": "shallow",
    "parameter": "r",
    "start": 2.0,
    "capital_cost": 450000.0,
}


def scenario(members: int, **fixed):
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    schedule = copy.deepcopy(data["schedules"][3])
    schedule["actions"] = [{**ALUMINIUM, **fixed}]
    data["schedules"] = [schedule]
    data["uncertainty"]["members"] = members
    return scenario_from_data(data)


def best(run, repeat: int) -> tuple[float, object]:
    times, result = [], None
    for _ in range(repeat):
        start = time.perf_counter()
        result = run()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--members", type=int, default=2000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    drawn = scenario(args.members)
    certain = scenario(args.members, effect=0.4, longevity_years=6.0)
    diagram = diagram_for(drawn)
    run_ensemble(certain, diagram=diagram)  # compile and warm up

    def ensemble(which):
        return lambda: run_ensemble(which, diagram=diagram).schedules[0]

    months, by_months = best(ensemble(drawn), args.repeat)
    rounding = planner.measures.whole_months
    planner.measures.whole_months = lambda years: years  # each member's own end of effect
    try:
        exact, by_days = best(ensemble(drawn), args.repeat)
    finally:
        planner.measures.whole_months = rounding
    fixed, by_fixed = best(ensemble(certain), args.repeat)

    print(f"run_ensemble, {args.members} members, one schedule with an aluminium treatment")
    print(f"{'longevity':<34}{'seconds':>9}{'ratio':>8}{'P(recovery)':>14}")
    rows = [
        ("drawn, to the day (a cut each)", exact, by_days),
        ("drawn, whole months (catalogue)", months, by_months),
        ("certain (fixed in the action)", fixed, by_fixed),
    ]
    for label, seconds, summary in rows:
        interval = f"{summary.p_recovered:.3f}"
        print(f"{label:<34}{seconds:>9.2f}{exact / seconds:>8.1f}{interval:>14}")
    print("ratio: time to the day / time of the row (higher is faster)")


if __name__ == "__main__":
    main()
