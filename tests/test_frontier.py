"""The recovery frontier: the bottleneck law near the fold, monotonicity, and every point checked
by an independent scipy integration."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from planner.cli import main
from planner.equilibria import diagram_for
from planner.frontier import HOLD_TOLERANCE, default_depths, recovery_frontier
from planner.scenario import load_scenario, scenario_from_data

ROOT = Path(__file__).resolve().parent.parent
ALDER = ROOT / "scenarios" / "alder-mere.toml"
TARNBY = ROOT / "scenarios" / "tarnby-water.toml"
MARGIN = 0.05  # years either side of a found least hold


def _rhs(p, load, s, r, m, q):
    return load - s * p + r * p**q / (m**q + p**q)


def _independent_recovered(params, p0, times, loads, horizon, final_load):
    """Classify with scipy alone: integrate dP/dt = L(t) - s P + r P^q/(m^q + P^q) (Carpenter,
    Ludwig & Brock 1999) with solve_ivp(Radau, rtol 1e-10) along the piecewise-linear load
    (times, loads) written out by the caller, split at every breakpoint; hold ``final_load``
    5000 years; recovered when P ends at the lowest of the three equilibria (brentq roots)."""
    s, r, m, q = params["s"], params["r"], params["m"], params["q"]
    stops = sorted({0.0, horizon, *(t for t in times if t < horizon)})
    p = np.array([p0])
    for a, b in zip(stops[:-1], stops[1:], strict=True):
        if b > a:
            p = solve_ivp(
                lambda t, y: _rhs(y, np.interp(t, times, loads), s, r, m, q),
                (a, b),
                p,
                method="Radau",
                rtol=1e-10,
                atol=1e-12,
            ).y[:, -1]
    p = solve_ivp(
        lambda t, y: _rhs(y, final_load, s, r, m, q),
        (0.0, 5000.0),
        p,
        method="Radau",
        rtol=1e-10,
        atol=1e-12,
    ).y[0, -1]
    grid = np.linspace(1e-9, 40.0, 40001)
    values = _rhs(grid, final_load, s, r, m, q)
    roots = [
        brentq(lambda x: _rhs(x, final_load, s, r, m, q), grid[i], grid[i + 1])
        for i in np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    ]
    assert len(roots) == 3, "the final load must lie inside the bistable window for this check"
    return abs(p - roots[0]) < 1e-6 * max(roots[0], 1.0)


def _overshoot_recovered(scenario, floor, hold, relax_to):
    """The overshoot written out by hand: down from the current load to the floor at the
    largest yearly change, hold, up to relax_to at the same rate, hold."""
    current = scenario.current_control
    rate = scenario.control.max_change_per_year
    down, up = (current - floor) / rate, (relax_to - floor) / rate
    times = [0.0, down, down + hold, down + hold + up]
    loads = [current, floor, floor, relax_to]
    return _independent_recovered(
        scenario.model.parameters,
        scenario.state["P"],
        times,
        loads,
        scenario.simulation.horizon,
        relax_to,
    )


@pytest.fixture(scope="module")
def alder():
    scenario = load_scenario(ALDER)
    return scenario, diagram_for(scenario)


def test_frontier_is_non_increasing_and_each_point_checks_out_independently(alder):
    """Deeper cuts need no longer holds, and at every frontier point an independent scipy
    integration (Radau, our own path and basin test) recovers with the found hold + 0.05 yr and
    fails with - 0.05 yr; where no hold is found, the longest hold that fits the horizon fails."""
    scenario, diagram = alder
    threshold = diagram.recovery_threshold
    depths = default_depths(scenario, threshold, 7)
    frontier = recovery_frontier(scenario, diagram=diagram, depths=depths, own_schedules=False)
    relax_to = frontier.relax_to
    assert relax_to == 1.5  # the demo's own overshoot schedules relax to 1.5
    durations = [p.duration for p in frontier.points]
    found = [d for d in durations if d is not None]
    assert len(found) >= 4 and durations[0] is None  # the shallowest cut needs beyond the horizon
    assert all(a is None or b is not None for a, b in zip(durations, durations[1:], strict=False))
    assert all(a >= b for a, b in zip(found, found[1:], strict=False))
    rate = scenario.control.max_change_per_year
    horizon = scenario.simulation.horizon
    for point in frontier.points:
        floor = threshold - point.depth
        ramps = (scenario.current_control - floor) / rate + (relax_to - floor) / rate
        if point.duration is None:
            assert not _overshoot_recovered(scenario, floor, horizon - ramps, relax_to)
            continue
        assert _overshoot_recovered(scenario, floor, point.duration + MARGIN, relax_to)
        if point.duration - MARGIN >= 0:
            assert not _overshoot_recovered(scenario, floor, point.duration - MARGIN, relax_to)


def test_converse_least_depth_checks_out_independently(alder):
    """For a given hold the least depth that recovers: an independent scipy integration
    recovers 0.005 deeper and fails 0.005 shallower (the depth is found to 5e-4)."""
    scenario, diagram = alder
    threshold = diagram.recovery_threshold
    frontier = recovery_frontier(
        scenario, diagram=diagram, depths=[0.2], durations=[2.0, 6.0], own_schedules=False
    )
    depths = [c.depth for c in frontier.converse]
    assert depths[0] > depths[1] > 0  # a shorter hold needs a deeper cut
    for point in frontier.converse:
        deeper, shallower = threshold - point.depth - 0.005, threshold - point.depth + 0.005
        assert _overshoot_recovered(scenario, deeper, point.duration, 1.5)
        assert not _overshoot_recovered(scenario, shallower, point.duration, 1.5)


def test_least_hold_follows_the_bottleneck_law_near_the_fold():
    """Near a saddle-node the time to pass the bottleneck of x' = a d + b x^2 is
    pi / sqrt(a b d) (Strogatz 2015, Nonlinear Dynamics and Chaos, section 4.3). With the control
    jumping to the floor and back (no yearly-change limit), the least hold at depth d below the
    recovery fold of the one-variable recycling model is that passage time plus a bounded part.

    The fold (P*, L*) is found here with sympy (f = 0, df/dP = 0), a = |df/dL| and
    b = |d2f/dP2| / 2 there. Checks: the log-log slope of hold against depth is -0.5 +/- 0.05 and
    every hold is within 10 % of pi / sqrt(a b d) for depths 1e-5 .. 1e-3 of the range width.
    """
    parameters = {"L": 2.6, "s": 1.2, "r": 6.0, "m": 4.0, "q": 8.0}  # the Alder Mere demo's
    P, L = sympy.symbols("P L")
    f = L - parameters["s"] * P + parameters["r"] * P**8 / (parameters["m"] ** 8 + P**8)
    p_fold, l_fold = sympy.nsolve([f, sympy.diff(f, P)], [P, L], [5.0, 0.86])
    at_fold = {P: p_fold, L: l_fold}
    a = abs(float(sympy.diff(f, L).subs(at_fold)))
    b = abs(float(sympy.diff(f, P, 2).subs(at_fold))) / 2
    data = {
        "name": "Bottleneck check",
        "model": {"kind": "recycling", "parameters": parameters},
        "control": {"parameter": "L", "range": [0.0, 5.0]},
        "state": {"P": 7.1},
        "target": {"variable": "P"},
        "simulation": {"horizon": 2000.0},
    }
    scenario = scenario_from_data(data)
    depths = 5.0 * np.geomspace(1e-5, 1e-3, 5)
    frontier = recovery_frontier(scenario, relax_to=1.5, depths=depths, own_schedules=False)
    assert frontier.recovery_threshold == pytest.approx(float(l_fold), abs=1e-9)
    holds = np.array([p.duration for p in frontier.points], dtype=float)
    assert [p.time_below for p in frontier.points] == pytest.approx(holds)  # jumps: no ramps
    slope = np.polyfit(np.log(depths), np.log(holds), 1)[0]
    assert slope == pytest.approx(-0.5, abs=0.05)
    law = np.pi / np.sqrt(a * b * depths)
    assert np.all(np.abs(holds / law - 1) < 0.10)
    assert np.all(np.abs(holds - law) > HOLD_TOLERANCE)  # the check is not within the tolerance


def test_frontier_cli_json_and_html(tmp_path, capsys):
    """`planner frontier FILE --depths ... --json` prints the contract fields; --html writes a
    page that carries the caution."""
    out = tmp_path / "frontier.html"
    code = main(["frontier", str(ALDER), "--depths", "0.004,0.3", "--json", "--html", str(out)])
    assert code == 0
    data = json.loads(capsys.readouterr().out)
    assert isinstance(data["recovery_threshold"], float)
    assert data["relax_to"] == 1.5
    assert [p["depth"] for p in data["points"]] == [0.004, 0.3]
    assert data["points"][0]["duration"] is None
    assert isinstance(data["points"][1]["duration"], float)
    assert {o["name"] for o in data["own_schedules"]} == {
        s.name for s in load_scenario(ALDER).schedules if s.kind == "overshoot"
    }
    page = out.read_text(encoding="utf-8")
    assert "screening tool" in page and "Least hold at each depth" in page


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ([str(TARNBY)], "control.range"),
        ([str(ALDER), "--relax-to", "3.5"], "relax_to"),
        ([str(ALDER), "--relax-to", "0.5"], "relax_to"),
        ([str(ALDER), "--depths", "0.1,x"], "depths.1"),
        ([str(ALDER), "--depths", "2.0"], "depths.0"),
    ],
)
def test_frontier_input_errors_exit_2_naming_the_field(arguments, field, capsys):
    """An irreversible lake, relax_to outside the bistable window and bad depths are user
    errors: exit code 2 and one line naming the source, the field and the reason."""
    assert main(["frontier", *arguments]) == 2
    message = capsys.readouterr().err
    assert f": {field}: " in message
