"""The ``[[schedules]]`` blocks: candidate control paths and their in-lake actions, as data."""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import Field, model_validator

from planner.scenario._base import (
    MAX_YEARS,
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
LAKE_TYPE_NAMES = ("shallow", "deep")
"""Lake types the catalogue of in-lake measures tells apart (see planner.measures)."""
LakeType = Literal["shallow", "deep"]
MAX_DOSES = 20
"""Most doses one in-lake measure may repeat."""
MAX_POINTS = 500
MAX_LEVELS = 200


class ScaleState(Strict):
    """At ``time`` multiply a state variable by ``factor`` (P inactivation, dredging)."""

    kind: Literal["scale-state"] = Field(
        description='"scale-state": multiply a state variable once, e.g. P inactivation.'
    )
    name: Label = Field(default="", description="Label of the action on reports (default: none).")
    time: Years = Field(description="When the action happens, in years from the start.")
    variable: str = Field(description="State variable multiplied, e.g. the sediment P.")
    factor: NonNegative = Field(
        description="Multiplier applied to the variable: 0.4 removes 60% of it."
    )
    cost: NonNegative = Field(
        default=0.0, description="One-off cost of the action, in the currency (default: 0)."
    )


class ParameterPulse(Strict):
    """Multiply a parameter by ``factor`` from ``start`` for ``duration`` years.

    With ``decay_years`` > 0 the multiplier then relaxes back to 1 exponentially with that
    e-folding time; otherwise it ends at once.
    """

    kind: Literal["parameter-pulse"] = Field(
        description='"parameter-pulse": multiply a model parameter for a while.'
    )
    name: Label = Field(default="", description="Label of the action on reports (default: none).")
    parameter: str = Field(description="Model parameter multiplied (not the control).")
    factor: NonNegative = Field(description="Multiplier applied to the parameter during the pulse.")
    start: Years = Field(description="When the pulse begins, in years from the start.")
    duration: PositiveYears = Field(description="How long the full multiplier lasts, in years.")
    decay_years: Years = Field(
        default=0.0,
        description="E-folding time, in years, of the return to normal after the pulse "
        "(default: 0, it ends at once).",
    )
    cost: NonNegative = Field(
        default=0.0, description="One-off cost of the action, in the currency (default: 0)."
    )


class InLakeMeasure(Strict):
    """A measure from the catalogue of in-lake measures (:mod:`planner.measures`), e.g. an
    aluminium treatment: from ``start`` it multiplies ``parameter`` by the measure's effect
    factor for as long as the measure works, dose after dose (``doses``, ``every_years``
    apart). Effect and longevity come from the catalogue for the lake type (medians in one
    run, a draw per member in an ensemble) unless fixed here."""

    kind: Literal["in-lake-measure"] = Field(
        description='"in-lake-measure": a catalogue measure such as an aluminium treatment.'
    )
    name: Label = Field(default="", description="Label of the action on reports (default: none).")
    measure: str = Field(
        description='Catalogue entry: "aluminium", "hypolimnetic-oxygenation" or "dredging".'
    )
    lake_type: LakeType = Field(
        description='"shallow" (polymictic) or "deep" (stratified): picks the catalogue\'s figures.'
    )
    parameter: str = Field(
        description='Model parameter it multiplies: internal loading, "r" in the recycling '
        'models, "RR" in internal-load.'
    )
    start: Years = Field(description="Year of the first dose, in years from the start.")
    doses: int = Field(default=1, ge=1, le=MAX_DOSES, description="Number of doses (default: 1).")
    every_years: PositiveYears | None = Field(
        default=None,
        description="Years from one dose to the next (default: none; needed with doses > 1).",
    )
    effect: NonNegative | None = Field(
        default=None,
        description="Fixed multiplier while a dose works, 0.2 leaves 20% (default: none, the "
        "catalogue's spread).",
    )
    longevity_years: PositiveYears | None = Field(
        default=None,
        description="Fixed years each dose works (default: none, the catalogue's spread).",
    )
    capital_cost: NonNegative = Field(
        default=0.0,
        description="Cost of each dose, in the currency, paid at the dose (default: 0).",
    )
    running_cost: NonNegative = Field(
        default=0.0,
        description="Cost per year while the measure works, in the currency (default: 0).",
    )

    @model_validator(mode="after")
    def _check_entry(self) -> InLakeMeasure:
        from planner.measures import entry_problems  # the catalogue imports the priors' module

        problems = entry_problems(
            self.measure,
            self.lake_type,
            doses=self.doses,
            every_years=self.every_years,
            longevity_years=self.longevity_years,
        )
        if self.doses > 1 and self.every_years is not None:
            last = self.start + (self.doses - 1) * self.every_years
            if last > MAX_YEARS:
                problems.append(
                    (
                        ("every_years",),
                        f"the last dose would come at year {last:g}, after {MAX_YEARS:g}",
                    )
                )
        raise_problems("in-lake-measure", problems, self.measure)
        return self

    @property
    def dose_times(self) -> tuple[float, ...]:
        """Years of the doses: start, start + every_years, ..."""
        step = self.every_years or 0.0
        return tuple(self.start + k * step for k in range(self.doses))


Action = Annotated[ScaleState | ParameterPulse | InLakeMeasure, Field(discriminator="kind")]


class _Schedule(Strict):
    name: Name = Field(description="Name of the schedule, unique within the scenario.")
    actions: FrozenList[Action] = Field(
        default=(),
        max_length=MAX_ACTIONS,
        description="In-lake actions taken alongside, e.g. P inactivation (default: none).",
    )


class PathSchedule(_Schedule):
    """Piecewise-linear (time, control) points; the first value before, the last value after."""

    kind: Literal["path"] = Field(description='"path": straight lines between given points.')
    points: FrozenList[Pair[Years, float]] = Field(
        min_length=1,
        max_length=MAX_POINTS,
        description="[time in years, control value] pairs, times increasing.",
    )

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

    kind: Literal["staircase"] = Field(description='"staircase": a sequence of held levels.')
    start: Years = Field(
        default=0.0, description="Year the first level begins (default: 0, at once)."
    )
    levels: FrozenList[float] = Field(
        min_length=1,
        max_length=MAX_LEVELS,
        description="Control values held in turn, in the control's unit; the last is kept.",
    )
    step_years: PositiveYears = Field(description="Years each level is held.")
    ramp_years: Years = Field(
        default=0.0,
        description="Years each change of level takes (default: 0, a jump).",
    )

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

    kind: Literal["overshoot"] = Field(
        description='"overshoot": cut deep, hold, then relax to a lasting level.'
    )
    start: Years = Field(
        default=0.0, description="Year the ramp down begins (default: 0, at once)."
    )
    floor: float = Field(description="Lowest control value reached, in the control's unit.")
    down_years: Years = Field(description="Years taken to ramp down to the floor.")
    hold_years: Years = Field(description="Years the floor is held.")
    relax_to: float = Field(
        description="Control value kept in the end, in the control's unit; at least the floor."
    )
    up_years: Years = Field(description="Years taken to ramp up from the floor to relax_to.")

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
ACTION_KINDS = ("scale-state", "parameter-pulse", "in-lake-measure")
