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

    parameter: str = Field(
        description="Name of the model parameter the manager moves, e.g. the external P load."
    )
    label: Label = Field(
        default="", description="Name of the control shown on axes (default: the parameter)."
    )
    unit: Label = Field(
        default="",
        description='Unit of the control, e.g. "g P / m2 / yr" for a load (default: none).',
    )
    range: Pair[float, float] = Field(
        description="Lowest and highest control value shown and searched, in the control's unit."
    )
    lowest_achievable: float | None = Field(
        default=None,
        description="Lowest control value any schedule can reach, in the control's unit "
        "(default: the lower end of range).",
    )
    max_change_per_year: Positive | None = Field(
        default=None,
        description="Fastest the control can change, in control units per year "
        "(default: no limit).",
    )

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

    variable: str = Field(
        description="State variable that measures water quality, e.g. the lake's P."
    )
    regime: Literal["lowest", "highest"] = Field(
        default="lowest",
        description='Desired regime: "lowest" (clear water, low P) or "highest" (default: lowest).',
    )
    threshold: float | None = Field(
        default=None,
        description="Value of the target variable the lake must reach, in its unit "
        "(default: none, the regime alone counts).",
    )

    def meets(self, value: float) -> bool:
        """Whether a value of the target variable meets the threshold (True when none is set)."""
        if self.threshold is None:
            return True
        return value <= self.threshold if self.regime == "lowest" else value >= self.threshold


class Simulation(Strict):
    """Time settings, in years."""

    horizon: PositiveYears = Field(
        default=50.0,
        description=f"Years simulated under each schedule (default: 50, at most {MAX_YEARS:g}).",
    )
    settle_cap: Positive = Field(
        default=20000.0,
        le=MAX_SETTLE_YEARS,
        description="Most years to wait, control held, for the state to settle before the "
        "verdict (default: 20000).",
    )
    state_limit: Positive = Field(
        default=1.0e6,
        description="A state whose magnitude exceeds this, in state units, is reported as "
        "diverged (default: 1,000,000).",
    )


class Measure(Strict):
    """One abatement measure: removes up to ``capacity`` control units per year."""

    name: Name = Field(description="Name of the measure, e.g. a treatment works upgrade.")
    capacity: Positive = Field(
        description="Most this measure can reduce the control by, in the control's unit "
        "(e.g. g P / m2 / yr)."
    )
    unit_cost: NonNegative = Field(
        description="Cost per year, in the currency, for each control unit of reduction it "
        "provides."
    )


class Costs(Strict):
    """Abatement cost curve, discounting and damages.

    Reductions are measured from ``baseline`` (default: the control's current value); measures
    are used cheapest first. ``damage_per_year`` accrues while the target is not met.
    """

    currency: Label = Field(
        default="EUR", description="Currency of every cost, e.g. EUR or USD (default: EUR)."
    )
    discount_rate: float = Field(
        default=0.03,
        ge=0.0,
        lt=1.0,
        description="Discount rate per year, as a fraction: 0.03 is 3% (default: 0.03).",
    )
    baseline: float | None = Field(
        default=None,
        description="Control value reductions are measured from, in the control's unit "
        "(default: the control's current value).",
    )
    damage_per_year: NonNegative = Field(
        default=0.0,
        description="Damage, in the currency per year, for each year the target is not met "
        "(default: 0).",
    )
    measures: FrozenList[Measure] = Field(
        default=(),
        max_length=MAX_MEASURES,
        description="Abatement measures, used cheapest first (default: none).",
    )

    @property
    def cheapest_first(self) -> list[Measure]:
        return sorted(self.measures, key=lambda measure: measure.unit_cost)
