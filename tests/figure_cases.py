"""Every figure of planner/figures.py drawn for one invented lake with twelve schedules, seven of
them with long names: what tests/test_figure_styles.py and tests/test_browser_figures.py check.
"""

from __future__ import annotations

import tomllib
from functools import cache
from pathlib import Path

import planner

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"
MONITORING = SCENARIOS / "data" / "alder-mere-monitoring.csv"
SCHEDULES = 12


def long_names_scenario():
    """Alder Mere (invented) with its own schedules and more whose names are long, up to
    twelve: paths from today's load down to a share of it (so they follow the demo's scale)."""
    from planner.units import significant

    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    control = data["control"]["parameter"]
    today = float(data["model"]["parameters"][control])
    extra = []
    for i in range(SCHEDULES - len(data["schedules"])):
        floor = today * (0.38 + 0.02 * i)
        extra.append(
            {
                "name": f"Schedule {len(data['schedules']) + i + 1}: cut the external load to "
                f"{significant(floor)} over {3 + i} years and hold it there for the rest of "
                "the horizon",
                "kind": "path",
                "points": [[0.0, today], [3.0 + i, floor]],
            }
        )
    data["schedules"] = [*data["schedules"], *extra]
    return planner.load(data)


@cache
def results() -> dict:
    """Every result a figure draws, computed once per test process."""
    scenario = long_names_scenario()
    comparison = planner.compare(scenario)
    recovery = comparison.diagram.recovery_threshold
    low, high = scenario.control.range
    return {
        "scenario": scenario,
        "comparison": comparison,
        "sweep": planner.hysteresis_sweep(scenario, step=(high - low) / 50).sweep,
        "frontier": planner.overshoot_frontier(
            scenario, depths=[0.06 * (recovery - low), 0.35 * (recovery - low)]
        ),
        "search": planner.cheapest_schedule(scenario).result,
        "ensemble": planner.chance_of_recovery(scenario, members=24, seed=3),
        "fit": planner.fit(MONITORING, scenario, bootstrap=0),
        "signals": planner.early_warnings(MONITORING.read_text(encoding="utf-8"), "TP"),
    }


def every_figure() -> dict:
    """Figure kind -> the figure, as the CLI report, the briefing and the app draw them."""
    from planner import figures
    from planner.equilibria import locate

    r = results()
    scenario, comparison = r["scenario"], r["comparison"]
    diagram = comparison.diagram
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    names = [o.name for o in comparison.outcomes]
    return {
        "diagram": figures.hysteresis_figure(
            scenario,
            diagram,
            standing=standing,
            trajectories=figures.trajectories_of(comparison),
        ),
        "time series": figures.time_series_figure(comparison),
        "sweep": figures.sweep_figure(scenario, r["sweep"], diagram),
        "side by side": figures.small_multiples_figure(comparison, names[-4:]),
        "frontier": figures.frontier_figure(scenario, r["frontier"]),
        "search": figures.pareto_figure(scenario, r["search"]),
        "ensemble": figures.recovery_by_year_figure(r["ensemble"]),
        "ensemble spread": figures.ensemble_fan_figure(r["ensemble"], names[1]),
        "fit": figures.fit_figure(r["fit"]),
        "fit diagram": figures.fit_hysteresis_figure(r["fit"]),
        "indicators": figures.signals_figure(r["signals"]),
    }
