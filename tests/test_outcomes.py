"""Verdicts and metrics of schedules, checked against independent scipy integrations."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from planner.cli import main
from planner.equilibria import diagram_for
from planner.outcomes import Verdict, compare, evaluate
from planner.scenario import OvershootSchedule, load_scenario, scenario_from_data

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "scenarios" / "alder-mere.toml"


def _recycling_rhs(p, load, s, r, m, q):
    return load - s * p + r * p**q / (m**q + p**q)


def _independent_recovered(params, p0, schedule, current, horizon):
    """Classify with scipy alone: integrate dP/dt = L(t) - s P + r P^q/(m^q + P^q)
    (Carpenter, Ludwig & Brock 1999) with solve_ivp(Radau, rtol 1e-10) across the overshoot
    path written out here, hold the final load 5000 years, and call it recovered when P ends
    below the unstable equilibrium (the basin boundary, found with brentq)."""
    s, r, m, q = params["s"], params["r"], params["m"], params["q"]
    t1 = schedule.start
    t2 = t1 + schedule.down_years
    t3 = t2 + schedule.hold_years
    t4 = t3 + schedule.up_years
    load = lambda t: float(  # noqa: E731
        np.interp(
            t,
            [0.0, t1, t2, t3, t4],
            [current, current, schedule.floor, schedule.floor, schedule.relax_to],
        )
    )
    stops = sorted({0.0, t1, t2, t3, t4, horizon})
    stops = [t for t in stops if t <= horizon]
    p = np.array([p0])
    for a, b in zip(stops[:-1], stops[1:], strict=True):
        if b > a:
            p = solve_ivp(
                lambda t, y: _recycling_rhs(y, load(t), s, r, m, q),
                (a, b),
                p,
                method="Radau",
                rtol=1e-10,
                atol=1e-12,
            ).y[:, -1]
    final = load(horizon)
    p = solve_ivp(
        lambda t, y: _recycling_rhs(y, final, s, r, m, q),
        (0, 5000),
        p,
        method="Radau",
        rtol=1e-10,
        atol=1e-12,
    ).y[0, -1]
    grid = np.linspace(1e-9, 4.0, 40001)
    values = _recycling_rhs(grid, final, s, r, m, q)
    roots = [
        brentq(lambda x: _recycling_rhs(x, final, s, r, m, q), grid[i], grid[i + 1])
        for i in np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    ]
    assert len(roots) == 3, "relax_to must lie inside the bistable window for this check"
    return p < roots[1]


def test_verdicts_near_the_recovery_boundary_agree_with_independent_integration():
    """20 overshoot schedules whose hold duration lies close to the least duration that recovers
    (found here by bisection on the independent classifier) get the same verdict from the planner
    as from the independent scipy classification."""
    scenario = load_scenario(DEMO)
    params = scenario.model.parameters
    current, p0, horizon = (
        scenario.current_control,
        scenario.state["P"],
        scenario.simulation.horizon,
    )
    diagram = diagram_for(scenario)

    def make(floor, hold):
        return OvershootSchedule(
            kind="overshoot",
            name=f"{floor:.3f}/{hold:.3f}",
            start=0.0,
            floor=floor,
            down_years=4.0,
            hold_years=hold,
            relax_to=0.15,
            up_years=2.0,
        )

    rng = np.random.default_rng(7)
    checked = 0
    for floor in (0.05, 0.06, 0.07, 0.075):
        low, high = 0.0, 20.0
        for _ in range(30):
            middle = 0.5 * (low + high)
            if _independent_recovered(params, p0, make(floor, middle), current, horizon):
                high = middle
            else:
                low = middle
        for offset in rng.uniform(0.05, 0.6, size=5) * rng.choice([-1, 1], size=5):
            schedule = make(floor, max(high + offset, 0.0))
            expected = _independent_recovered(params, p0, schedule, current, horizon)
            outcome = evaluate(scenario, diagram, schedule)
            assert outcome.recovered == bool(expected), schedule.name
            checked += 1
    assert checked == 20


def test_overshoot_depth_and_duration():
    """Depth = recovery threshold - lowest control; duration = time below the threshold, which
    for a linear ramp down, hold and ramp up follows from similar triangles (worked by hand)."""
    scenario = load_scenario(DEMO)
    comparison = compare(scenario)
    recovery = comparison.diagram.recovery_threshold
    outcome = next(
        o for o in comparison.outcomes if o.kind == "overshoot" and o.name.startswith("Deep")
    )
    schedule = next(s for s in scenario.schedules if s.name == outcome.name)
    assert outcome.overshoot_depth == pytest.approx(recovery - schedule.floor, rel=1e-12)
    down_rate = (scenario.current_control - schedule.floor) / schedule.down_years
    up_rate = (schedule.relax_to - schedule.floor) / schedule.up_years
    expected = (
        (recovery - schedule.floor) / down_rate
        + schedule.hold_years
        + (recovery - schedule.floor) / up_rate
    )
    assert outcome.time_below_threshold == pytest.approx(expected, rel=1e-9)


def test_divergence_is_its_own_outcome_never_recovered(tmp_path):
    """x' = mu + x^2 with mu raised above 0 has no equilibrium left: the state runs off to
    infinity (Strogatz 2015, section 3.1) and the verdict is divergence, with its time."""
    data = {
        "name": "Runaway",
        "model": {"kind": "formula", "equations": {"x": "mu + x**2"}, "parameters": {"mu": -1.0}},
        "control": {"parameter": "mu", "range": [-1.0, 1.0]},
        "state": {"x": -1.0},
        "target": {"variable": "x", "threshold": 0.0},
        "simulation": {"horizon": 20.0},
        "schedules": [{"name": "up", "kind": "path", "points": [[0.0, -1.0], [2.0, 1.0]]}],
    }
    scenario = scenario_from_data(data)
    outcome = compare(scenario).outcomes[0]
    assert outcome.verdict is Verdict.DIVERGED
    assert not outcome.recovered
    # mu = 1 from year 2: from x(2) the blow-up time is bounded by pi/sqrt(1) (Strogatz 4.3)
    assert 2.0 < outcome.diverged_at < 2.0 + np.pi


def test_compare_json_contract(capsys):
    """`planner compare --json` prints the fields of DESIGN.md section 5 for every schedule."""
    assert main(["compare", str(DEMO), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    scenario = load_scenario(DEMO)
    assert [s["name"] for s in data["schedules"]] == [s.name for s in scenario.schedules]
    for entry in data["schedules"]:
        assert isinstance(entry["recovered"], bool)
        assert isinstance(entry["relapsed"], bool)
        assert entry["meets_target_at"] is None or 0 <= entry["meets_target_at"] <= 40
        assert set(entry["overshoot"]) >= {"depth", "duration"}
        assert set(entry["cost"]) >= {"total", "present_value"}
        assert entry["cost"]["present_value"] <= entry["cost"]["total"]
    by_name = {s["name"]: s for s in data["schedules"]}
    assert by_name["Cut to 0.12 and hold"]["recovered"] is False
    assert by_name["Overnight cut (breaks the rate limit)"]["feasible"] is False
    assert by_name["Overnight cut (breaks the rate limit)"]["infeasible"]["time"] == 0.0


def test_meets_target_time_is_the_last_crossing():
    """meets_target_at is the first time after which P stays at or below the threshold: the
    planner's value is checked on its own trajectory by dense sampling (numpy)."""
    scenario = load_scenario(DEMO)
    comparison = compare(scenario, dense=True)
    threshold = scenario.target.threshold
    for outcome in comparison.outcomes:
        run = outcome.trajectory
        if outcome.meets_target_at is None:
            assert run.states[0, -1] > threshold or outcome.relapsed
            continue
        t = np.linspace(outcome.meets_target_at + 1e-6, run.t_end, 20001)
        assert np.all(run.state_at(t)[0] <= threshold + 1e-9)
        before = np.linspace(
            max(outcome.meets_target_at - 0.5, 0), outcome.meets_target_at - 1e-6, 101
        )
        if outcome.meets_target_at > 0:
            assert np.any(run.state_at(before)[0] > threshold)


def test_compare_csv_and_briefing(tmp_path):
    """The CSV has one row per schedule and the briefing is HTML carrying the caution."""
    csv, html = tmp_path / "t.csv", tmp_path / "b.html"
    assert main(["compare", str(DEMO), "--csv", str(csv), "--html", str(html)]) == 0
    import pandas as pd

    table = pd.read_csv(csv)
    assert len(table) == len(load_scenario(DEMO).schedules)
    text = html.read_text()
    assert (
        text.startswith("<!DOCTYPE html>")
        and "screening tool" in text
        and "licensed professionals" in text
    )


def test_relaxing_above_the_collapse_threshold_is_not_recovery():
    """Above the collapse threshold only the turbid equilibrium of the recycling model exists
    (the upper branch of the S-shaped curve; Carpenter, Ludwig & Brock 1999): a schedule that
    ends there has not recovered, even though that equilibrium is the lowest one left. The
    collapse fold is derived here from dL/dP = 0 with brentq."""
    scenario = load_scenario(DEMO)
    p = scenario.model.parameters
    s, r, m, q = p["s"], p["r"], p["m"], p["q"]
    slope = lambda x: s - r * q * m**q * x ** (q - 1) / (m**q + x**q) ** 2  # noqa: E731
    x_fold = brentq(slope, 0.1, m)
    collapse = s * x_fold - r * x_fold**q / (m**q + x_fold**q)
    diagram = diagram_for(scenario)
    schedule = OvershootSchedule(
        kind="overshoot",
        name="back up",
        start=0.0,
        floor=0.05,
        down_years=5.0,
        hold_years=6.0,
        relax_to=collapse + 0.05,
        up_years=8.0,
    )
    assert evaluate(scenario, diagram, schedule).verdict is Verdict.NOT_RECOVERED
    assert diagram.desired_attractor(collapse + 0.05) is None
    assert diagram.desired_attractor(collapse - 0.05) is not None
