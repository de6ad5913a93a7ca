"""The search for the cheapest recovering schedule: against brute force, the Pareto front by its
definition, the year-by constraint, and writing the found schedule back."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

from planner.cli import main
from planner.equilibria import diagram_for
from planner.errors import InputError
from planner.outcomes import evaluate
from planner.scenario import (
    OvershootSchedule,
    StaircaseSchedule,
    load_scenario,
    scenario_from_data,
)
from planner.search import pareto_front, search, unique_name, with_schedule

ROOT = Path(__file__).resolve().parent.parent
ALDER = ROOT / "scenarios" / "alder-mere.toml"
RANDOM_SCHEDULES = 200


@pytest.fixture(scope="module")
def alder():
    scenario = load_scenario(ALDER)
    return scenario, diagram_for(scenario)


@pytest.fixture(scope="module")
def searched(alder):
    """One search per family (a few seconds each), shared by the tests below."""
    scenario, diagram = alder
    return {
        family: search(scenario, diagram=diagram, families=(family,))
        for family in ("overshoot", "staircase")
    }


def _random_schedule(scenario, family, floor, hold, relax_to, index):
    """A member of the family written out here: ramps at the largest yearly change."""
    current, rate = scenario.current_control, scenario.control.max_change_per_year
    if family == "overshoot":
        return OvershootSchedule(
            kind="overshoot",
            name=f"random {index}",
            floor=floor,
            down_years=(current - floor) / rate,
            hold_years=hold,
            relax_to=relax_to,
            up_years=(relax_to - floor) / rate,
        )
    ramp = max(current - floor, relax_to - floor) / rate
    return StaircaseSchedule(
        kind="staircase",
        name=f"random {index}",
        levels=[floor, relax_to],
        step_years=ramp + hold,
        ramp_years=ramp,
    )


@pytest.mark.parametrize("family", ["overshoot", "staircase"])
def test_cheapest_found_is_no_dearer_than_brute_force(alder, searched, family):
    """Brute force as the baseline (common practice, no source): draw floors uniformly between
    the lowest achievable load and the recovery threshold and holds uniformly between 0 and the
    longest that fits the horizon, until 200 schedules recover and keep every limit; the search's
    cheapest must cost no more (present value) than the cheapest of them, and itself recover."""
    scenario, diagram = alder
    result = searched[family]
    best = result.cheapest
    assert best is not None and best.family == family
    check = evaluate(scenario, diagram, best.schedule)
    assert check.recovered and check.feasible
    assert check.cost.present_value == pytest.approx(best.present_value, rel=1e-12)
    rng = np.random.default_rng(20260101)
    threshold, least = diagram.recovery_threshold, scenario.control.least
    current, rate = scenario.current_control, scenario.control.max_change_per_year
    horizon, relax_to = scenario.simulation.horizon, result.relax_to
    prices: list[float] = []
    index = 0
    while len(prices) < RANDOM_SCHEDULES:
        floor = rng.uniform(least, threshold)
        if family == "overshoot":
            ramps = (current - floor) / rate + (relax_to - floor) / rate
        else:
            ramps = 2 * max(current - floor, relax_to - floor) / rate
        hold = rng.uniform(0.0, horizon - ramps)
        outcome = evaluate(
            scenario, diagram, _random_schedule(scenario, family, floor, hold, relax_to, index)
        )
        index += 1
        if outcome.recovered and outcome.feasible:
            prices.append(outcome.cost.present_value)
    assert best.present_value <= min(prices)


@pytest.mark.parametrize("family", ["overshoot", "staircase"])
def test_pareto_front_is_the_set_of_non_dominated_candidates(searched, family):
    """Pareto optimality by definition (Pareto 1906, Manuale di economia politica; as in
    Miettinen 1999, Nonlinear Multiobjective Optimization, section 2.1; both from memory): a
    candidate is on the front when no other is at least as cheap and as early and better in one.
    Checked by an all-pairs numpy comparison over every admissible candidate the search
    evaluated."""
    result = searched[family]
    pool = [
        c for c in result.candidates if c.recovered and c.feasible and c.meets_target_at is not None
    ]
    cost = np.array([c.present_value for c in pool])
    time = np.array([c.meets_target_at for c in pool])
    dominated = (
        (cost[None, :] <= cost[:, None])
        & (time[None, :] <= time[:, None])
        & ((cost[None, :] < cost[:, None]) | (time[None, :] < time[:, None]))
    ).any(axis=1)
    expected = {(c.floor, c.hold) for c, d in zip(pool, dominated, strict=True) if not d}
    assert len(expected) >= 2
    assert {(c.floor, c.hold) for c in result.pareto} == expected
    assert {(c.floor, c.hold) for c in pareto_front(pool[::-1])} == expected


def test_found_schedule_meets_the_year_and_is_written_back(alder, tmp_path, capsys):
    """`planner search --by-year Y --save-to NEW.toml` finds a schedule that meets the target by
    year Y (checked by evaluating the saved file) and writes the scenario with it added; an
    existing file is never overwritten (exit code 2)."""
    scenario, diagram = alder
    by_year = 7.6
    new = tmp_path / "with-found.toml"
    arguments = ["search", str(ALDER), "--family", "overshoot", "--by-year", str(by_year)]
    arguments += ["--json", "--save-to", str(new)]
    assert main(arguments) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["cheapest"]["family"] == "overshoot"
    assert data["by_year"] == by_year
    assert isinstance(data["cheapest"]["present_value"], float)
    assert all(p["meets_target_at"] is not None for p in data["pareto"])
    saved = load_scenario(new)
    assert len(saved.schedules) == len(scenario.schedules) + 1
    added = saved.schedules[-1]
    assert added.name.startswith("Cheapest found")
    assert added.model_dump(exclude={"name"}) == scenario_from_data(
        {**scenario.model_dump(mode="json"), "schedules": [data["cheapest"]["schedule"]]}
    ).schedules[0].model_dump(exclude={"name"})
    outcome = evaluate(saved, diagram, added)
    assert outcome.recovered and outcome.feasible and outcome.meets_target_at <= by_year
    assert main(arguments) == 2
    assert "exists already" in capsys.readouterr().err
    assert unique_name(saved, added.name) == f"{added.name} (2)"
    with pytest.raises(InputError, match="same name"):
        with_schedule(saved, added)


def test_search_input_errors(capsys):
    """A year-by outside the horizon is a user error naming the field (exit code 2)."""
    assert main(["search", str(ALDER), "--by-year", "99"]) == 2
    assert ": by_year: " in capsys.readouterr().err
