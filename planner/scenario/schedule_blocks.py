"""The ``[[schedules]]`` blocks: candidate control paths and their in-lake actions, as data."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field, model_validator

from planner.scenario._base import (
    FrozenList,
    Label,
    Name,
    NonNegative,
    Pair,
    PositiveYears,
    Strict,
    Years,
    raise_problems,
)

MAX_ACTIONS = 50
"""Most in-lake actions one schedule may carry."""
MAX_POINTS = 500
MAX_LEVELS = 200


class ScaleState(Strict):
    """At ``time`` multiply a state variable by ``factor`` (P inactivation, dredging)."""

    kind: Literal["scale-state"]
    name: Label = ""
    time: Years
    variable: str
    factor: NonNegative
    cost: NonNegative = 0.0


class ParameterPulse(Strict):
    """Multiply a parameter by ``factor`` from ``start`` for ``duration`` years.

    With ``decay_years`` > 0 the multiplier then relaxes back to 1 exponentially with that
    e-folding time; otherwise it ends at once.
    """

    kind: Literal["parameter-pulse"]
    name: Label = ""
    parameter: str
    factor: NonNegative
    start: Years
    duration: PositiveYears
    decay_years: Years = 0.0
    cost: NonNegative = 0.0


Action = Annotated[ScaleState | ParameterPulse, Field(discriminator="kind")]


class _Schedule(Strict):
    name: Name
    actions: FrozenList[Action] = Field(default=(), max_length=MAX_ACTIONS)


class PathSchedule(_Schedule):
    """Piecewise-linear (time, control) points; the first value before, the last value after."""

    kind: Literal["path"]
    points: FrozenList[Pair[Years, float]] = Field(min_length=1, max_length=MAX_POINTS)

    @model_validator(mode="after")
    def _check_times(self) -> PathSchedule:
        problems = [
            (("points", i, 0), f"time {b[0]:g} must come after the previous time {a[0]:g}")
            for i, (a, b) in enumerate(zip(self.points, self.points[1:], strict=False), start=1)
            if not b[0] > a[0]
        ]
        raise_problems("path", problems, self.points)
        return self


class StaircaseSchedule(_Schedule):
    """From year ``start``, hold each of ``levels`` for ``step_years``; held after the last.

    Each change of level takes ``ramp_years`` (0: a jump, which breaks any rate limit).
    """

    kind: Literal["staircase"]
    start: Years = 0.0
    levels: FrozenList[float] = Field(min_length=1, max_length=MAX_LEVELS)
    step_years: PositiveYears
    ramp_years: Years = 0.0

    @model_validator(mode="after")
    def _check_ramp(self) -> StaircaseSchedule:
        problems = []
        if self.ramp_years > self.step_years:
            problems.append((("ramp_years",), "must not exceed step_years"))
        raise_problems("staircase", problems, self.ramp_years)
        return self


class OvershootSchedule(_Schedule):
    """From year ``start`` ramp down to ``floor`` over ``down_years``, hold it ``hold_years``,
    ramp up to ``relax_to`` over ``up_years``, then hold ``relax_to``."""

    kind: Literal["overshoot"]
    start: Years = 0.0
    floor: float
    down_years: Years
    hold_years: Years
    relax_to: float
    up_years: Years

    @model_validator(mode="after")
    def _check_order(self) -> OvershootSchedule:
        problems = []
        if self.relax_to < self.floor:
            problems.append((("relax_to",), f"must be at least the floor {self.floor:g}"))
        raise_problems("overshoot", problems, self.relax_to)
        return self


Schedule = Annotated[
    PathSchedule | StaircaseSchedule | OvershootSchedule, Field(discriminator="kind")
]
SCHEDULE_KINDS = ("path", "staircase", "overshoot")
ACTION_KINDS = ("scale-state", "parameter-pulse")
