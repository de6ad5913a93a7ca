"""The ``[control]``, ``[target]``, ``[simulation]`` and ``[costs]`` blocks."""

from __future__ import annotations

from typing import Literal

from pydantic import Field, model_validator

from planner.scenario._base import (
    MAX_YEARS,
    FrozenList,
    Label,
    Name,
    NonNegative,
    Pair,
    Positive,
    PositiveYears,
    Strict,
    raise_problems,
)

MAX_SETTLE_YEARS = 1_000_000.0
"""Longest wait for the state to settle (years); the default is far below it."""
MAX_MEASURES = 100


class Control(Strict):
    """The parameter the manager moves, its units and what is achievable.

    ``range`` is shown and searched; ``lowest_achievable`` (default: the lower end of ``range``)
    and ``max_change_per_year`` are limits a schedule must respect or be reported infeasible.
    """

    parameter: str
    label: Label = ""
    unit: Label = ""
    range: Pair[float, float]
    lowest_achievable: float | None = None
    max_change_per_year: Positive | None = None

    @model_validator(mode="after")
    def _check_range(self) -> Control:
        low, high = self.range
        problems = []
        if not low < high:
            problems.append((("range",), f"lower end {low:g} must be below upper end {high:g}"))
        elif self.lowest_achievable is not None and not low <= self.lowest_achievable <= high:
            problems.append((("lowest_achievable",), f"must lie within range [{low:g}, {high:g}]"))
        raise_problems("control", problems, self.range)
        return self

    @property
    def least(self) -> float:
        """The lowest control value any schedule can reach."""
        return self.range[0] if self.lowest_achievable is None else self.lowest_achievable

    @property
    def axis_title(self) -> str:
        text = self.label or self.parameter
        return f"{text} ({self.unit})" if self.unit else text


class Target(Strict):
    """The desired regime and an optional water-quality threshold on one state variable."""

    variable: str
    regime: Literal["lowest", "highest"] = "lowest"
    threshold: float | None = None

    def meets(self, value: float) -> bool:
        """Whether a value of the target variable meets the threshold (True when none is set)."""
        if self.threshold is None:
            return True
        return value <= self.threshold if self.regime == "lowest" else value >= self.threshold


class Simulation(Strict):
    """Time settings, in years."""

    horizon: PositiveYears = Field(
        default=50.0, description=f"Years simulated under each schedule (at most {MAX_YEARS:g})."
    )
    settle_cap: Positive = Field(
        default=20000.0,
        le=MAX_SETTLE_YEARS,
        description="Most years to wait, control held, for the state to settle before the verdict.",
    )
    state_limit: Positive = Field(
        default=1.0e6,
        description="A state whose magnitude exceeds this is reported as diverged.",
    )


class Measure(Strict):
    """One abatement measure: removes up to ``capacity`` control units per year."""

    name: Name
    capacity: Positive
    unit_cost: NonNegative


class Costs(Strict):
    """Abatement cost curve, discounting and damages.

    Reductions are measured from ``baseline`` (default: the control's current value); measures
    are used cheapest first. ``damage_per_year`` accrues while the target is not met.
    """

    currency: Label = "EUR"
    discount_rate: float = Field(default=0.03, ge=0.0, lt=1.0)
    baseline: float | None = None
    damage_per_year: NonNegative = 0.0
    measures: FrozenList[Measure] = Field(default=(), max_length=MAX_MEASURES)

    @property
    def cheapest_first(self) -> list[Measure]:
        return sorted(self.measures, key=lambda measure: measure.unit_cost)
