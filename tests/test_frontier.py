"""The recovery frontier: the bottleneck law near the fold, monotonicity, every point checked
by an independent scipy integration, ramps that follow the rate limit or a stated default, one
answer with compare for a user's own ramped schedule, and the output's names."""

from __future__ import annotations

import json
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from planner.cli import build_parser, main
from planner.equilibria import diagram_for
from planner.errors import InputError
from planner.frontier import (
    DEFAULT_RAMP_YEARS,
    DEFAULT_START_YEAR,
    HOLD_TOLERANCE,
    Verdicts,
    default_depths,
    frontier_json,
    frontier_rows,
    frontier_text,
    recovery_frontier,
)
from planner.outcomes import compare
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
    grid = np.linspace(1e-9, 4.0, 40001)
    values = _rhs(grid, final_load, s, r, m, q)
    roots = [
        brentq(lambda x: _rhs(x, final_load, s, r, m, q), grid[i], grid[i + 1])
        for i in np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    ]
    assert len(roots) == 3, "the final load must lie inside the bistable window for this check"
    return abs(p - roots[0]) < 1e-6 * max(roots[0], 1.0)


def _overshoot_recovered(scenario, floor, hold, relax_to, *, ramp_years=None, start=0.0):
    """The overshoot written out by hand: the current load held until ``start``, down to the
    floor, hold, up to relax_to, hold. Each ramp takes ``ramp_years``, or when None the years
    its change needs at the largest yearly change."""
    current = scenario.current_control
    if ramp_years is None:
        rate = scenario.control.max_change_per_year
        down, up = (current - floor) / rate, (relax_to - floor) / rate
    else:
        down = up = ramp_years
    times = [0.0, start, start + down, start + down + hold, start + down + hold + up]
    loads = [current, current, floor, floor, relax_to]
    return _independent_recovered(
        scenario.model.parameters,
        scenario.state["P"],
        times,
        loads,
        scenario.simulation.horizon,
        relax_to,
    )


def _alder_data(**control):
    """The Alder Mere demo as data, without its uncertainty block; ``control`` entries replace
    those of its [control] table (None removes one)."""
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data.pop("uncertainty", None)
    for key, value in control.items():
        if value is None:
            data["control"].pop(key, None)
        else:
            data["control"][key] = value
    return data


@pytest.fixture(scope="module")
def alder():
    scenario = load_scenario(ALDER)
    return scenario, diagram_for(scenario)


@pytest.fixture(scope="module")
def alder_without_limit():
    """Alder Mere with no largest yearly change (the diagram does not depend on it)."""
    scenario = scenario_from_data(_alder_data(max_change_per_year=None))
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
    assert relax_to == 0.15  # the demo's own overshoot schedules relax to 0.15
    holds = [p.hold_years for p in frontier.points]
    found = [d for d in holds if d is not None]
    assert len(found) >= 4 and holds[0] is None  # the shallowest cut needs beyond the horizon
    assert all(a is None or b is not None for a, b in zip(holds, holds[1:], strict=False))
    assert all(a >= b for a, b in zip(found, found[1:], strict=False))
    rate = scenario.control.max_change_per_year
    horizon = scenario.simulation.horizon
    for point in frontier.points:
        floor = threshold - point.depth
        ramps = (scenario.current_control - floor) / rate + (relax_to - floor) / rate
        if point.hold_years is None:
            assert not _overshoot_recovered(scenario, floor, horizon - ramps, relax_to)
            continue
        assert _overshoot_recovered(scenario, floor, point.hold_years + MARGIN, relax_to)
        if point.hold_years - MARGIN >= 0:
            assert not _overshoot_recovered(scenario, floor, point.hold_years - MARGIN, relax_to)


def test_converse_least_depth_checks_out_independently(alder):
    """For a given hold the least depth that recovers: an independent scipy integration
    recovers 0.0005 deeper and fails 0.0005 shallower (the depth is found to 5e-5)."""
    scenario, diagram = alder
    threshold = diagram.recovery_threshold
    frontier = recovery_frontier(
        scenario, diagram=diagram, depths=[0.02], hold_years=[2.0, 6.0], own_schedules=False
    )
    depths = [c.depth for c in frontier.converse]
    assert depths[0] > depths[1] > 0  # a shorter hold needs a deeper cut
    for point in frontier.converse:
        deeper, shallower = threshold - point.depth - 0.0005, threshold - point.depth + 0.0005
        assert _overshoot_recovered(scenario, deeper, point.hold_years, 0.15)
        assert not _overshoot_recovered(scenario, shallower, point.hold_years, 0.15)


def test_least_hold_follows_the_bottleneck_law_near_the_fold():
    """Near a saddle-node the time to pass the bottleneck of x' = a d + b x^2 is
    pi / sqrt(a b d) (Strogatz 2015, Nonlinear Dynamics and Chaos, section 4.3). With the control
    jumping to the floor and back (no yearly-change limit, instant jumps asked for with
    ramp_years 0), the least hold at depth d below the recovery fold of the one-variable
    recycling model is that passage time plus a bounded part.

    The fold (P*, L*) is found here with sympy (f = 0, df/dP = 0), a = |df/dL| and
    b = |d2f/dP2| / 2 there. Checks: the log-log slope of hold against depth is -0.5 +/- 0.05 and
    every hold is within 10 % of pi / sqrt(a b d) for depths 1e-5 .. 1e-3 of the range width.
    """
    parameters = {"L": 0.26, "s": 1.2, "r": 0.6, "m": 0.4, "q": 8.0}  # the Alder Mere demo's
    P, L = sympy.symbols("P L")
    f = L - parameters["s"] * P + parameters["r"] * P**8 / (parameters["m"] ** 8 + P**8)
    p_fold, l_fold = sympy.nsolve([f, sympy.diff(f, P)], [P, L], [0.5, 0.086])
    at_fold = {P: p_fold, L: l_fold}
    a = abs(float(sympy.diff(f, L).subs(at_fold)))
    b = abs(float(sympy.diff(f, P, 2).subs(at_fold))) / 2
    data = {
        "name": "Bottleneck check",
        "model": {"kind": "recycling", "parameters": parameters},
        "control": {"parameter": "L", "range": [0.0, 0.5]},
        "state": {"P": 0.71},
        "target": {"variable": "P"},
        "simulation": {"horizon": 2000.0},
    }
    scenario = scenario_from_data(data)
    depths = 0.5 * np.geomspace(1e-5, 1e-3, 5)
    frontier = recovery_frontier(
        scenario, relax_to=0.15, depths=depths, ramp_years=0.0, own_schedules=False
    )
    assert frontier.recovery_threshold == pytest.approx(float(l_fold), abs=1e-9)
    holds = np.array([p.hold_years for p in frontier.points], dtype=float)
    assert [p.time_below_threshold for p in frontier.points] == pytest.approx(holds)  # no ramps
    slope = np.polyfit(np.log(depths), np.log(holds), 1)[0]
    assert slope == pytest.approx(-0.5, abs=0.05)
    law = np.pi / np.sqrt(a * b * depths)
    assert np.all(np.abs(holds / law - 1) < 0.10)
    assert np.all(np.abs(holds - law) > HOLD_TOLERANCE)  # the check is not within the tolerance


def test_frontier_cli_json_and_html(tmp_path, capsys):
    """`planner frontier FILE --depths ... --json` prints the contract fields; --html writes a
    page that carries the caution."""
    out = tmp_path / "frontier.html"
    code = main(["frontier", str(ALDER), "--depths", "0.0004,0.03", "--json", "--html", str(out)])
    assert code == 0
    data = json.loads(capsys.readouterr().out)
    assert isinstance(data["recovery_threshold"], float)
    assert data["relax_to"] == 0.15
    assert [p["depth"] for p in data["points"]] == [0.0004, 0.03]
    assert data["points"][0]["hold_years"] is None
    assert isinstance(data["points"][1]["hold_years"], float)
    assert {o["name"] for o in data["own_schedules"]} == {
        s.name for s in load_scenario(ALDER).schedules if s.kind == "overshoot"
    }
    page = out.read_text(encoding="utf-8")
    assert "screening tool" in page and "Least hold at the floor (yr)" in page


@pytest.mark.parametrize(
    ("arguments", "field"),
    [
        ([str(TARNBY)], "control.range"),
        ([str(ALDER), "--relax-to", "0.35"], "relax_to"),
        ([str(ALDER), "--relax-to", "0.05"], "relax_to"),
        ([str(ALDER), "--depths", "0.01,x"], "depths.1"),
        ([str(ALDER), "--depths", "0.2"], "depths.0"),
    ],
)
def test_frontier_input_errors_exit_2_naming_the_field(arguments, field, capsys):
    """An irreversible lake, relax_to outside the bistable window and bad depths are user
    errors: exit code 2 and one line naming the source, the field and the reason."""
    assert main(["frontier", *arguments]) == 2
    message = capsys.readouterr().err
    assert f": {field}: " in message


# ---------------------------------------------------------------------------------------------
# Ramps: from the rate limit, a stated default, or asked; the start year


def _user_overshoot(floor, hold, ramp):
    return {
        "name": "User's own ramped overshoot",
        "kind": "overshoot",
        "start": 0.0,
        "floor": floor,
        "down_years": ramp,
        "hold_years": hold,
        "relax_to": 0.15,
        "up_years": ramp,
    }


def test_a_users_ramped_schedule_gets_one_answer_without_a_rate_limit(alder_without_limit):
    """With no largest yearly change the family ramps over the default years, never jumps: a
    user's overshoot with 2-year ramps (floor 0.06, hold 5 yr, relax to 0.15) is the family's
    schedule, field for field. compare, the frontier's verdict and an independent scipy
    integration (Radau, Carpenter, Ludwig & Brock 1999 model, brentq equilibria) agree on it,
    and the frontier's least hold at that floor is consistent: it is at most 5 yr, compare
    recovers with it (and just above it) and fails more than the tolerance below it; the
    independent integration recovers 0.05 yr above and fails 0.05 yr below."""
    scenario, diagram = alder_without_limit
    floor, ramp = 0.06, 2.0
    data = _alder_data(max_change_per_year=None)
    data["schedules"] = [_user_overshoot(floor, 5.0, ramp)]
    users = scenario_from_data(data)
    threshold = diagram.recovery_threshold
    frontier = recovery_frontier(
        users, diagram=diagram, relax_to=0.15, depths=[threshold - floor], own_schedules=True
    )
    family = frontier.family
    assert family.ramp_source == "default" and family.ramp == DEFAULT_RAMP_YEARS == ramp
    mine = users.schedules[0].model_dump(exclude={"name"})
    assert family.schedule(floor, 5.0).model_dump(exclude={"name"}) == mine
    verdicts = Verdicts(users, diagram, family)

    def compared(hold):
        data["schedules"] = [_user_overshoot(floor, hold, ramp)]
        return compare(scenario_from_data(data), diagram=diagram).outcomes[0].recovered

    (point,) = frontier.points
    least = point.hold_years
    assert (point.ramp_down_years, point.ramp_up_years) == (ramp, ramp)
    assert compared(5.0) and verdicts(floor, 5.0)
    assert _overshoot_recovered(users, floor, 5.0, 0.15, ramp_years=ramp)
    assert frontier.own[0].recovered and frontier.own[0].hold_years == 5.0
    assert least is not None and least <= 5.0
    for hold in (least, least + 0.5 * HOLD_TOLERANCE):
        assert compared(hold) and verdicts(floor, hold)
    below = least - 1.5 * HOLD_TOLERANCE
    assert not compared(below) and not verdicts(floor, below)
    assert _overshoot_recovered(users, floor, least + MARGIN, 0.15, ramp_years=ramp)
    assert not _overshoot_recovered(users, floor, least - MARGIN, 0.15, ramp_years=ramp)


def test_ramps_follow_the_rate_limit_and_keep_it(alder):
    """With a largest yearly change r the ramps take (start - floor) / r down and
    (relax_to - floor) / r up (time = change / rate for a linear ramp; common practice, no
    source); compare finds the family's schedule at the least hold feasible (every limit kept);
    time_below_threshold is the hold plus the linear ramps' share below the threshold,
    ramp * (threshold - floor) / (ramp's start - floor) each (common practice, no source)."""
    scenario, diagram = alder
    threshold = diagram.recovery_threshold
    frontier = recovery_frontier(
        scenario, diagram=diagram, depths=[0.015, 0.03, 0.045], own_schedules=False
    )
    family = frontier.family
    data = frontier_json(frontier)
    rate, current = scenario.control.max_change_per_year, scenario.current_control
    assert data["ramp"] == {
        "source": "rate limit",
        "years": None,
        "largest_yearly_change": rate,
    }
    assert data["start_year"] == 0.0
    assert family.ramp_source == "rate limit"
    for point in frontier.points:
        floor = point.floor
        down, up = (current - floor) / rate, (0.15 - floor) / rate
        assert point.ramp_down_years == pytest.approx(down, rel=1e-12)
        assert point.ramp_up_years == pytest.approx(up, rel=1e-12)
        assert point.hold_years is not None
        below_down = down * (threshold - floor) / (current - floor)
        below_up = up * (threshold - floor) / (0.15 - floor)
        below = point.hold_years + below_down + below_up
        assert point.time_below_threshold == pytest.approx(below, rel=1e-9)
        schedule = family.schedule(floor, point.hold_years)
        outcome = compare(scenario, diagram=diagram, schedules=[schedule]).outcomes[0]
        assert outcome.feasible and outcome.recovered


def test_a_later_start_shifts_the_schedule_not_the_least_hold():
    """Starting the descent later from the turbid equilibrium at the current load leaves the
    least hold unchanged (an autonomous system's solutions shift in time; common practice, no
    source): the start state is that equilibrium found here with brentq on the recycling model
    (Carpenter, Ludwig & Brock 1999). The family's schedule starts in the asked year, with the
    asked ramps, and compare agrees with the least hold found from that year."""
    data = _alder_data(max_change_per_year=None)
    params = data["model"]["parameters"]
    load = params["L"]
    turbid = brentq(
        lambda p: _rhs(p, load, params["s"], params["r"], params["m"], params["q"]), 0.5, 2.0
    )
    data["state"] = {"P": turbid}
    scenario = scenario_from_data(data)
    diagram = diagram_for(scenario)
    depth = diagram.recovery_threshold - 0.06
    holds = {}
    for start in (0.0, 3.0):
        frontier = recovery_frontier(
            scenario,
            diagram=diagram,
            relax_to=0.15,
            depths=[depth],
            start_year=start,
            ramp_years=1.5,
            own_schedules=False,
        )
        assert frontier_json(frontier)["start_year"] == start
        assert frontier.family.ramp_source == "asked" and frontier.family.ramp == 1.5
        holds[start] = frontier.points[0].hold_years
        schedule = frontier.family.schedule(0.06, holds[start])
        assert (schedule.start, schedule.down_years, schedule.up_years) == (start, 1.5, 1.5)
        outcome = compare(scenario, diagram=diagram, schedules=[schedule]).outcomes[0]
        assert outcome.recovered
    assert holds[3.0] == pytest.approx(holds[0.0], abs=HOLD_TOLERANCE)


@pytest.mark.parametrize(
    ("control", "horizon", "options", "field", "words"),
    [
        ({}, None, {"start_year": -1.0}, "start_year", "at least 0"),
        ({}, None, {"start_year": math.nan}, "start_year", "at least 0"),
        ({}, None, {"start_year": 40.0}, "start_year", "horizon"),
        ({}, None, {"ramp_years": -0.5}, "ramp_years", "at least 0"),
        ({}, None, {"ramp_years": math.inf}, "ramp_years", "at least 0"),
        ({}, None, {"ramp_years": 0.0}, "ramp_years", "largest yearly change"),
        ({}, None, {"ramp_years": 1.0}, "ramp_years", "largest yearly change"),
        ({}, None, {"start_year": 30.0, "ramp_years": 6.0}, "ramp_years", "horizon"),
        ({"max_change_per_year": None}, 3.0, {}, "ramp_years", "the default"),
        (
            {"max_change_per_year": None},
            None,
            {"hold_years": [1.0, -2.0]},
            "hold_years.1",
            "at least 0",
        ),
    ],
)
def test_bad_frontier_options_name_the_option(control, horizon, options, field, words):
    """Negative, non-finite or past-the-horizon start year and ramps, instant jumps or ramps
    too short for the deepest floor under a largest yearly change (0.05 per year: 0.26 down to
    0.04 needs 4.4 yr), default ramps that do not fit a 3-year horizon, and negative holds are
    InputErrors naming the option (common practice, no source)."""
    data = _alder_data(**control)
    if horizon is not None:
        data["simulation"]["horizon"] = horizon
    scenario = scenario_from_data(data)
    with pytest.raises(InputError) as caught:
        recovery_frontier(
            scenario, relax_to=0.15, own_schedules=False, source="lake.toml", **options
        )
    (problem,) = caught.value.problems
    assert (problem.source, problem.field) == ("lake.toml", field)
    assert words in problem.reason


def test_asked_ramps_that_keep_the_rate_limit_are_accepted(alder):
    """Ramps of 4.4 yr keep a largest yearly change of 0.05 per year down to the floor 0.04 from
    0.26 (0.22 / 4.4 = 0.05; common practice, no source): accepted, and compare finds the
    family's schedule there feasible."""
    scenario, diagram = alder
    depth = diagram.recovery_threshold - 0.04
    frontier = recovery_frontier(
        scenario, diagram=diagram, depths=[depth], ramp_years=4.4, own_schedules=False
    )
    (point,) = frontier.points
    assert (point.ramp_down_years, point.ramp_up_years) == (4.4, 4.4)
    assert point.hold_years is not None
    schedule = frontier.family.schedule(point.floor, point.hold_years)
    assert compare(scenario, diagram=diagram, schedules=[schedule]).outcomes[0].feasible


def _keys(value):
    if isinstance(value, dict):
        return set(value) | {k for v in value.values() for k in _keys(v)}
    if isinstance(value, list):
        return {k for v in value for k in _keys(v)}
    return set()


def test_outputs_name_hold_years_and_time_below_threshold(alder):
    """JSON, table and text call the hold ``hold_years`` and the years below the threshold
    ``time_below_threshold``; 'duration' appears nowhere (it means the time below the
    threshold in compare). The text states the ramps used (common practice, no source)."""
    scenario, diagram = alder
    frontier = recovery_frontier(scenario, diagram=diagram, depths=[0.03], hold_years=[4.0])
    data = frontier_json(frontier)
    assert "duration" not in _keys(data)
    for row in (*data["points"], *data["own_schedules"]):
        assert {"hold_years", "time_below_threshold"} <= set(row)
    assert set(data["converse"][0]) == {"hold_years", "depth", "floor"}
    header, _ = frontier_rows(frontier)
    assert "least hold_years" in header and "time_below_threshold (yr)" in header
    text = frontier_text(frontier)
    assert "duration" not in text and "hold_years" in text and "time_below_threshold" in text
    assert "largest yearly change, 0.05" in text


def test_cli_options_and_their_stated_defaults(capsys):
    """`planner frontier --start-year --ramp-years` reach the frontier; the help states the
    defaults the planner uses (common practice, no source)."""
    parsed = build_parser().parse_args(["frontier", str(ALDER)])
    assert parsed.start_year == DEFAULT_START_YEAR and parsed.ramp_years is None
    with pytest.raises(SystemExit):
        main(["frontier", "--help"])
    assert f"{DEFAULT_RAMP_YEARS:g} yr each" in " ".join(capsys.readouterr().out.split())
    arguments = ["--depths", "0.03", "--start-year", "2", "--ramp-years", "4.5", "--json"]
    assert main(["frontier", str(ALDER), *arguments]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["ramp"]["source"] == "asked" and data["ramp"]["years"] == 4.5
    assert data["start_year"] == 2.0
    assert main(["frontier", str(ALDER), "--ramp-years", "1"]) == 2
    assert ": ramp_years: " in capsys.readouterr().err
