"""Tests for schedules as control paths, their limits, and their in-lake actions."""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy
from hypothesis import given, settings
from hypothesis import strategies as st

from planner.scenario import (
    OvershootSchedule,
    ParameterPulse,
    PathSchedule,
    ScaleState,
    StaircaseSchedule,
)
from planner.schedules import (
    ControlPath,
    action_timeline,
    check_limits,
    control_path,
)

GRID_SAMPLES = 200_001
"""Samples of the fine grid used as an independent numerical estimate."""
EXAMPLES = 60
"""Hypothesis examples per property (keeps the file fast)."""


def _overshoot(**changes: float) -> OvershootSchedule:
    fields = dict(start=1, floor=0.4, down_years=3, hold_years=8, relax_to=2, up_years=4)
    fields.update(changes)
    return OvershootSchedule(kind="overshoot", name="a", **fields)


# --------------------------------------------------------------------------------------------
# values of u(t) for each kind


def test_path_moves_linearly_from_current_then_holds() -> None:
    """Worked by hand from the definition: 5 -> 3 over 2 years, 3 -> 1 over 4 years, held."""
    schedule = PathSchedule(kind="path", name="p", points=[(2, 3), (6, 1)])
    path = control_path(schedule, current=5)
    times = [0, 1, 2, 4, 6, 10, 1000]
    assert path(np.array(times)) == pytest.approx([5, 4, 3, 2, 1, 1, 1], rel=1e-12)
    assert path.slope(0.5) == pytest.approx(-1)
    assert path.slope(2) == pytest.approx(-0.5)
    assert path.slope(7) == 0
    assert list(path.kinks(4)) == [0, 2]


def test_path_point_at_zero_is_a_jump_only_when_it_differs() -> None:
    """Worked by hand from the definition: a first point at time 0 jumps there from current."""
    schedule = PathSchedule(kind="path", name="p", points=[(0, 2), (4, 1)])
    jumped = control_path(schedule, current=5)
    assert jumped(0) == 2
    assert jumped(2) == pytest.approx(1.5)
    smooth = control_path(schedule, current=2)
    assert list(smooth.times) == [0, 4]
    assert check_limits(smooth, horizon=10, lowest=0, max_change_per_year=0.25) is None
    broken = check_limits(jumped, horizon=10, lowest=0, max_change_per_year=0.25)
    assert broken is not None and broken.time == 0 and "infinite" in broken.message


def test_staircase_with_jumps() -> None:
    """Worked by hand from the definition: 10 until year 2, then 8, then 5 from year 6."""
    schedule = StaircaseSchedule(kind="staircase", name="s", start=2, levels=[8, 5], step_years=4)
    path = control_path(schedule, current=10)
    times = [0, 1.999, 2, 5.999, 6, 100]
    assert path(np.array(times)) == pytest.approx([10, 10, 8, 8, 5, 5], rel=1e-12)


def test_staircase_with_ramps_starting_at_each_step() -> None:
    """Worked by hand from the definition: each 2-year ramp begins at start + k * step_years."""
    schedule = StaircaseSchedule(
        kind="staircase", name="s", start=2, levels=[8, 5], step_years=4, ramp_years=2
    )
    path = control_path(schedule, current=10)
    times = [2, 3, 4, 6, 7, 8, 20]
    assert path(np.array(times)) == pytest.approx([10, 9, 8, 8, 6.5, 5, 5], rel=1e-12)


def test_overshoot_values() -> None:
    """Worked by hand from the definition: 3 held to year 1, down to 0.4 by year 4, held to 12,
    up to 2 by year 16."""
    path = control_path(_overshoot(), current=3)
    times = [0, 1, 2.5, 4, 12, 14, 16, 30]
    expected = [3, 3, 3 - 2.6 * 1.5 / 3, 0.4, 0.4, 1.2, 2, 2]
    assert path(np.array(times)) == pytest.approx(expected, rel=1e-12)
    assert path.minimum(30) == pytest.approx(0.4)
    assert path.minimum(2.5) == pytest.approx(expected[2])


def test_jumps_are_right_continuous_and_vectorised() -> None:
    """Worked by hand from the definition: at a jump time the value after the jump."""
    path = control_path(_overshoot(down_years=0, up_years=0), current=3)
    assert path(1.0) == 0.4
    assert path(np.nextafter(1.0, 0.0)) == 3
    assert path(9.0) == 2
    assert path(np.nextafter(9.0, 0.0)) == 0.4
    assert path.left_limit(9.0) == 0.4 and path.left_limit(1.0) == 3
    grid = np.array([[0.0, 1.0], [8.5, 9.0]])
    values = path(grid)
    assert isinstance(values, np.ndarray) and values.shape == (2, 2)
    assert isinstance(path(0.5), float)


def test_zero_length_overshoot_never_takes_the_floor() -> None:
    """Worked by hand from the definition: with no ramps and no hold the floor lasts no time."""
    path = control_path(_overshoot(down_years=0, hold_years=0, up_years=0), current=3)
    assert path(1.0) == 2
    assert path.minimum(10) == 2


def test_bad_paths_are_refused() -> None:
    """Worked by hand from the definition: times start at 0 and do not go back."""
    with pytest.raises(ValueError):
        ControlPath(np.array([1.0, 2.0]), np.array([0.0, 1.0]))
    with pytest.raises(ValueError):
        ControlPath(np.array([0.0, 2.0, 1.0]), np.array([0.0, 1.0, 2.0]))


# --------------------------------------------------------------------------------------------
# time below a level


@pytest.mark.parametrize("level", [0.5, 1.0, 1.9])
def test_time_below_overshoot_matches_sympy(level: float) -> None:
    """Reference library: sympy (sympy.solve for the two crossing times of the ramps)."""
    t = sympy.Symbol("t")
    current, start, floor, down, hold, relax, up = (
        sympy.Rational(3),
        sympy.Rational(1),
        sympy.Rational(2, 5),
        sympy.Rational(3),
        sympy.Rational(8),
        sympy.Rational(2),
        sympy.Rational(4),
    )
    lvl = sympy.nsimplify(level)
    down_ramp = current + (floor - current) * (t - start) / down
    up_start = start + down + hold
    up_ramp = floor + (relax - floor) * (t - up_start) / up
    (enter,) = sympy.solve(sympy.Eq(down_ramp, lvl), t)
    (leave,) = sympy.solve(sympy.Eq(up_ramp, lvl), t)
    path = control_path(_overshoot(), current=3)
    assert path.time_below(level, 30) == pytest.approx(float(leave - enter), rel=1e-12)
    cut = float(enter) + 2.0  # a horizon inside the stretch below the level
    assert path.time_below(level, cut) == pytest.approx(2.0, rel=1e-12)


def test_time_below_held_level_counts_to_horizon() -> None:
    """Worked by hand from the definition: a level above relax_to is undercut from the crossing
    on the way down until the horizon."""
    path = control_path(_overshoot(), current=3)
    enter = 1 + 3 * (3 - 2.5) / 2.6
    assert path.time_below(2.5, 40) == pytest.approx(40 - enter, rel=1e-12)
    assert path.time_below(0.4, 40) == 0.0


times_st = st.floats(0.0, 10.0, allow_nan=False)
values_st = st.floats(0.0, 10.0, allow_nan=False)


@st.composite
def schedules(draw: st.DrawFn):
    kind = draw(st.sampled_from(["path", "staircase", "overshoot"]))
    if kind == "overshoot":
        floor = draw(values_st)
        return OvershootSchedule(
            kind="overshoot",
            name="o",
            start=draw(times_st),
            floor=floor,
            down_years=draw(times_st),
            hold_years=draw(times_st),
            relax_to=floor + draw(values_st),
            up_years=draw(times_st),
        )
    if kind == "staircase":
        step = draw(st.floats(0.5, 5.0))
        return StaircaseSchedule(
            kind="staircase",
            name="s",
            start=draw(times_st),
            levels=draw(st.lists(values_st, min_size=1, max_size=6)),
            step_years=step,
            ramp_years=step * draw(st.floats(0.0, 1.0)),
        )
    gaps = draw(st.lists(st.floats(0.01, 8.0), min_size=1, max_size=8))
    first = draw(st.sampled_from([0.0, 0.5]))
    times = np.cumsum([first, *gaps])[:-1]
    values = draw(st.lists(values_st, min_size=len(times), max_size=len(times)))
    return PathSchedule(
        kind="path", name="p", points=[(float(a), v) for a, v in zip(times, values, strict=True)]
    )


@settings(max_examples=EXAMPLES, deadline=None)
@given(
    schedules(),
    values_st,
    st.floats(1.0, 60.0),
    values_st,
)
def test_time_below_and_minimum_match_a_fine_grid(schedule, current, horizon, level) -> None:
    """Independent numerical estimate (numpy, fine grid of 200001 samples): the exact measure
    differs from the grid count by at most one grid step per crossing of the level."""
    path = control_path(schedule, current=current)
    grid, step = np.linspace(0.0, horizon, GRID_SAMPLES, retstep=True)
    u = path(grid)
    estimate = float(np.count_nonzero(u[:-1] < level)) * step
    crossings_bound = (path.times.size + 2) * step
    assert abs(path.time_below(level, horizon) - estimate) <= crossings_bound + 1e-12 * horizon
    finite = np.abs(np.diff(path.values)) / np.maximum(np.diff(path.times), 1e-300)
    steepest = float(np.max(finite[np.diff(path.times) > 0], initial=0.0))
    lowest = path.minimum(horizon)
    assert lowest <= float(u.min()) + 1e-12
    assert float(u.min()) - lowest <= steepest * step + 1e-9


# --------------------------------------------------------------------------------------------
# limits


def test_first_violation_is_a_rate() -> None:
    """Worked by hand from the definition: slope 0.5 until year 4 (allowed), slope 2 from year 4
    (too fast), below 1 only after year 4.5."""
    schedule = PathSchedule(kind="path", name="p", points=[(4, 8), (6, 4), (10, 0)])
    path = control_path(schedule, current=10)
    found = check_limits(path, horizon=20, lowest=1, max_change_per_year=1, unit="t P / yr")
    assert found is not None
    assert found.limit == "largest yearly change"
    assert found.time == 4
    assert "2 t P / yr per year" in found.message and "1 t P / yr per year" in found.message


def test_first_violation_is_the_lowest_value() -> None:
    """Worked by hand from the definition: 3 - 0.3 t reaches 1 at t = 20/3; a slope equal to the
    largest yearly change is allowed."""
    schedule = PathSchedule(kind="path", name="p", points=[(10, 0)])
    path = control_path(schedule, current=3)
    found = check_limits(path, horizon=20, lowest=1, max_change_per_year=0.3, unit="t P / yr")
    assert found is not None
    assert found.limit == "lowest achievable"
    assert found.time == pytest.approx(20 / 3, rel=1e-12)
    assert "1 t P / yr" in found.message and "0 t P / yr" in found.message
    faster = check_limits(path, horizon=20, lowest=1, max_change_per_year=0.29)
    assert faster is not None and faster.limit == "largest yearly change" and faster.time == 0
    assert check_limits(path, horizon=6, lowest=1, max_change_per_year=None) is None
    assert path.values[-1] == 0  # nothing clipped


def test_jump_counts_as_infinite_rate() -> None:
    """Worked by hand from the definition: a staircase without ramps jumps at year 2."""
    schedule = StaircaseSchedule(kind="staircase", name="s", start=2, levels=[8], step_years=4)
    path = control_path(schedule, current=10)
    found = check_limits(path, horizon=20, lowest=0, max_change_per_year=1000)
    assert found is not None
    assert found.limit == "largest yearly change" and found.time == 2
    assert "infinite" in found.message
    assert check_limits(path, horizon=20, lowest=0, max_change_per_year=None) is None
    assert check_limits(path, horizon=1.5, lowest=0, max_change_per_year=1000) is None


def test_jump_below_lowest_is_reported_at_the_jump() -> None:
    """Worked by hand from the definition: the jump at year 1 lands on 0.4 < 0.5."""
    path = control_path(_overshoot(down_years=0), current=3)
    found = check_limits(path, horizon=20, lowest=0.5, max_change_per_year=None)
    assert found is not None and found.limit == "lowest achievable" and found.time == 1


# --------------------------------------------------------------------------------------------
# actions


def _actions_schedule() -> PathSchedule:
    return PathSchedule(
        kind="path",
        name="p",
        points=[(5, 1)],
        actions=[
            ScaleState(kind="scale-state", time=6, variable="S", factor=0.5, cost=200),
            ParameterPulse(
                kind="parameter-pulse",
                parameter="r",
                factor=0.5,
                start=2,
                duration=3,
                decay_years=2,
                cost=50,
            ),
            ParameterPulse(
                kind="parameter-pulse", parameter="r", factor=0.8, start=4, duration=2, cost=10
            ),
            ScaleState(kind="scale-state", time=1, variable="P", factor=0.9),
        ],
    )


def test_action_multipliers_with_decay() -> None:
    """Worked by hand from the definition: factor on [start, end), then exponential relaxation
    with the given e-folding time, or straight back to 1 without decay; pulses multiply."""
    timeline = action_timeline(_actions_schedule())
    assert timeline.multipliers(1.0) == {"r": 1.0}
    assert timeline.multipliers(2.0)["r"] == 0.5
    assert timeline.multipliers(4.5)["r"] == pytest.approx(0.5 * 0.8)
    assert timeline.multipliers(5.0)["r"] == pytest.approx(0.5 * 0.8)
    assert timeline.multipliers(6.0)["r"] == pytest.approx(1 - 0.5 * math.exp(-0.5))
    assert timeline.multipliers(7.0)["r"] == pytest.approx(1 - 0.5 * math.exp(-1))


def test_action_events_costs_and_kinks() -> None:
    """Worked by hand from the definition: events sorted by time; a pulse's cost at its start."""
    timeline = action_timeline(_actions_schedule())
    assert timeline.state_events == ((1.0, "P", 0.9), (6.0, "S", 0.5))
    assert len(timeline.pulses) == 2
    assert timeline.one_off_costs == ((1.0, 0.0), (2.0, 50.0), (4.0, 10.0), (6.0, 200.0))
    assert list(timeline.kinks(5.5)) == [1, 2, 4, 5]
    empty = action_timeline(PathSchedule(kind="path", name="q", points=[(1, 1)]))
    assert empty.multipliers(3.0) == {} and empty.kinks(10).size == 0
