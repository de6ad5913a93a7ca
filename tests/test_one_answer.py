"""One question, one answer: compare, ensemble (no uncertainty) and the frontier's verdicts run
the same schedules through the one engine and the one verdict, and must agree, including
schedules whose in-lake action jumps the state across the target."""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pytest

from planner.ensemble import run_ensemble
from planner.equilibria import diagram_for
from planner.frontier import Verdicts, family_for
from planner.outcomes import compare
from planner.scenario import scenario_from_data
from planner.verdict import VERDICTS, Verdict

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"


def _scenario(schedules: list[dict]) -> object:
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data.pop("uncertainty", None)
    data["schedules"] = schedules
    return scenario_from_data(data)


def _overshoot(name, floor, hold, actions=()):
    return {
        "name": name,
        "kind": "overshoot",
        "start": 0.0,
        "floor": floor,
        "down_years": 2.0,
        "hold_years": hold,
        "relax_to": 0.15,
        "up_years": 1.0,
        "actions": list(actions),
    }


# A drastic P inactivation at year 5 takes P below the target at once: the target is met from
# that moment (a crossing caused by a jump, not by the flow).
JUMP = {
    "kind": "scale-state",
    "name": "Inactivation",
    "time": 5.0,
    "variable": "P",
    "factor": 0.2,
    "cost": 400000.0,
}
SCHEDULES = [
    _overshoot("Short hold with inactivation", 0.1, 1.0, [JUMP]),
    _overshoot("Long deep hold with inactivation", 0.06, 8.0, [JUMP]),
    _overshoot("Short shallow hold", 0.12, 1.0),
    _overshoot("Long deep hold", 0.06, 8.0),
]


def test_compare_and_ensemble_give_one_answer():
    """Every member of a no-uncertainty ensemble gets compare's verdict, target time (to the
    interpolation of a crossing, 1e-5 years) and present value (the damages follow the target
    record; 1e-6 relative); the jump across the target counts as meeting it at year 5 in both."""
    scenario = _scenario(SCHEDULES)
    comparison = compare(scenario)
    ensemble = run_ensemble(scenario, members=3, diagram=comparison.diagram)
    outcomes = {o.name: o for o in comparison.outcomes}
    assert outcomes["Long deep hold with inactivation"].meets_target_at == pytest.approx(5.0)
    verdicts = set()
    for summary in ensemble.schedules:
        outcome = outcomes[summary.name]
        verdicts.add(outcome.verdict)
        assert {VERDICTS[c] for c in summary.verdicts} == {outcome.verdict}, summary.name
        if outcome.meets_target_at is None:
            assert np.isnan(summary.meets_target_at).all(), summary.name
        else:
            np.testing.assert_allclose(summary.meets_target_at, outcome.meets_target_at, atol=1e-5)
        np.testing.assert_allclose(summary.present_value, outcome.cost.present_value, rtol=1e-6)
    assert verdicts == {Verdict.RECOVERED, Verdict.NOT_RECOVERED}


@pytest.mark.parametrize(("floor", "hold"), [(0.1, 1.0), (0.06, 8.0), (0.08, 3.0), (0.12, 1.0)])
def test_frontier_verdict_is_compares(floor, hold):
    """The frontier's fast verdict for (floor, hold) equals compare's verdict for the same
    schedule written out by the family (same engine, same settle, same attractor test)."""
    scenario = _scenario([_overshoot("probe", 0.1, 1.0)])
    diagram = diagram_for(scenario)
    family = family_for(scenario, "overshoot", 0.15)
    schedule = family.schedule(floor, hold)
    outcome = compare(scenario, diagram=diagram, schedules=[schedule]).outcomes[0]
    assert Verdicts(scenario, diagram, family)(floor, hold) == outcome.recovered


def test_a_relapse_after_a_jump_reads_the_same_in_compare_and_ensemble():
    """Water and sediment P (the Brellow demo): an inactivation at year 5 takes water P below
    the target at once; at a load of 0.175 the lake stays clear, at 0.3 the sediment brings it
    back (a relapse). compare and a no-uncertainty ensemble agree on both, member by member."""
    data = tomllib.loads((DEMO.parent / "brellow-reservoir.toml").read_text(encoding="utf-8"))
    data.pop("uncertainty", None)
    jump = {**JUMP, "variable": "X"}
    data["schedules"] = [
        {
            "name": f"Hold {load} with inactivation",
            "kind": "path",
            "actions": [jump],
            "points": [[0.0, 0.2], [3.0, load]],
        }
        for load in (0.175, 0.3)
    ]
    scenario = scenario_from_data(data)
    comparison = compare(scenario)
    clear, relapse = comparison.outcomes
    assert clear.recovered and clear.meets_target_at == pytest.approx(5.0) and not clear.relapsed
    assert not relapse.recovered and relapse.meets_target_at is None and relapse.relapsed
    assert 5.0 < relapse.years_meeting_target < scenario.simulation.horizon - 5.0
    ensemble = run_ensemble(scenario, members=2, diagram=comparison.diagram)
    for outcome, summary in zip(comparison.outcomes, ensemble.schedules, strict=True):
        assert {VERDICTS[c] for c in summary.verdicts} == {outcome.verdict}
        expected = np.nan if outcome.meets_target_at is None else outcome.meets_target_at
        np.testing.assert_allclose(summary.meets_target_at, expected, atol=1e-5)
        np.testing.assert_allclose(summary.present_value, outcome.cost.present_value, rtol=1e-6)


def test_one_variable_destinations_read_off_equal_long_integration():
    """In one variable the verdict reads each state's destination off the equilibria; it must
    equal where scipy's solve_ivp (LSODA, 2000 time units, reference library) takes the state,
    for states spread over both basins of the bistable recycling model x' = a - b x +
    x^2/(1 + x^2), b = 0.6, a = 0.095 (inside the window 0.0897..0.1021; Carpenter, Ludwig &
    Brock 1999, Ecological Applications 9:751-771, appendix), with b varying per member."""
    from scipy.integrate import solve_ivp

    from planner.models import compile_model, formula_spec
    from planner.verdict import Attractors, destinations_1d

    spec = formula_spec({"x": "a - b*x + x**2/(1 + x**2)"}, ("a", "b"))
    a = 0.095
    nominal = compile_model(spec, "a").bind({"a": a, "b": 0.6})
    grid = np.linspace(0.0, 3.0, 3001)
    values = nominal.rhs(grid[None], a)[0]
    roots = grid[:-1][np.sign(values[:-1]) != np.sign(values[1:])]
    assert roots.size == 3
    where = Attractors(a, roots[:1, None], 0, 1.0, np.array([1.0]), roots[:, None])
    rng = np.random.default_rng(5)
    b = rng.uniform(0.59, 0.61, 40)
    x0 = rng.uniform(0.0, 2.5, 40)
    members = compile_model(spec, "a").bind({"a": a, "b": b})
    goal, known = destinations_1d(where, members, x0[None])
    assert known.all()
    for i in range(40):
        end = solve_ivp(
            lambda t, x, bi=b[i]: a - bi * x + x**2 / (1 + x**2),
            (0.0, 2000.0),
            [x0[i]],
            method="LSODA",
            rtol=1e-10,
            atol=1e-12,
        ).y[0, -1]
        assert goal[0, i] == pytest.approx(end, abs=1e-6)
