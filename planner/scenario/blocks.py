"""The ``[control]``, ``[target]``, ``[simulation]`` and ``[costs]`` blocks.

A target's threshold may be given as lake TP (a concentration or an OECD trophic class); its
conversion to the model's state needs the ``[lake]`` block, so the scenario (root) resolves it
with :func:`target_problems` and :func:`resolved_target`.
"""

from __future__ import annotations

from typing import Annotated, Literal

from pydantic import BeforeValidator, Field, model_serializer, model_validator
from pydantic_core import PydanticCustomError

from planner.errors import listing, quote
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


def _concentration_text(value: object) -> object:
    """A target TP as "number unit" text of a concentration ("30 ug/L", "0.03 mg/L"), positive
    and finite (read without pint, as the [lake] values are)."""
    from planner.units import CONCENTRATION, UnitTextError, describe_dimension, read_quantity

    if value is None:
        return None
    if not isinstance(value, str):
        reason = f"expected a concentration as text in quotes such as '30 ug/L', got {quote(value)}"
    else:
        try:
            read = read_quantity(value)
        except UnitTextError as error:
            reason = f"{error}; give a concentration such as '30 ug/L' or '0.03 mg/L'"
        else:
            if read.unit.dimension != CONCENTRATION:
                found = describe_dimension(read.unit.dimension)
                reason = f"{quote(read.text)} is {found}, not a concentration such as '30 ug/L'"
            elif not read.magnitude > 0:
                reason = f"must be positive, got {quote(read.text)}"
            else:
                return read.text
    raise PydanticCustomError("quantity", "{reason}", {"reason": reason})


def _oecd_class(value: object) -> object:
    """One of the OECD (1982) trophic classes (the names live in :mod:`planner.limnology`)."""
    if value is None:
        return None
    from planner.limnology import OECD_CLASSES

    if value not in OECD_CLASSES:
        reason = f"{quote(value)} is not an OECD (1982) trophic class ({listing(OECD_CLASSES)})"
        raise PydanticCustomError("trophic_class", "{reason}", {"reason": reason})
    return value


class Target(Strict):
    """The desired regime and an optional water-quality threshold on one state variable.

    The threshold is given in the model's unit (``threshold``), or as lake TP: a concentration
    (``tp = "30 ug/L"``) or an OECD (1982) trophic class (``trophic_class = "mesotrophic"``:
    at most the class's upper boundary, 10, 35 or 100 ug/L annual mean TP, for the "lowest"
    regime; at least its lower boundary for "highest"). Lake TP is converted to the model's
    state through the [lake] block's mean depth (:func:`target_conversion`); the scenario then
    holds the converted value in ``threshold`` (:func:`resolved_target`).
    """

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
    tp: Annotated[str | None, BeforeValidator(_concentration_text)] = Field(
        default=None,
        description='Threshold as lake TP instead, e.g. "30 ug/L", converted through [lake] '
        "(default: none).",
    )
    trophic_class: Annotated[str | None, BeforeValidator(_oecd_class)] = Field(
        default=None,
        description='Threshold as an OECD (1982) trophic class instead, e.g. "mesotrophic" '
        "(default: none).",
    )

    @model_validator(mode="after")
    def _one_threshold(self) -> Target:
        given = [
            name for name in ("threshold", "tp", "trophic_class") if getattr(self, name) is not None
        ]
        problems = []
        if len(given) > 1:
            problems.append(
                (
                    (given[1],),
                    f"give one of threshold, tp and trophic_class, not {' and '.join(given)}",
                )
            )
        elif self.trophic_class is not None:
            from planner.limnology import OECD_CLASSES

            if self.regime == "lowest" and self.trophic_class == OECD_CLASSES[-1]:
                problems.append(
                    (
                        ("trophic_class",),
                        f"{self.trophic_class} has no upper boundary, so every lake meets it; "
                        f"choose {OECD_CLASSES[-2]} or a better class",
                    )
                )
            elif self.regime == "highest" and self.trophic_class == OECD_CLASSES[0]:
                problems.append(
                    (
                        ("trophic_class",),
                        f"{self.trophic_class} has no lower boundary above 0 for a target on "
                        "the highest regime; choose another class",
                    )
                )
        raise_problems("target", problems, self.variable)
        return self

    @model_serializer(mode="wrap")
    def _without_derived_threshold(self, handler):
        """A target given as lake TP is written as given: the threshold converted from it is
        derived (the scenario converts it again on reading), never a second way of saying it."""
        data = handler(self)
        if self.in_lake_tp and isinstance(data, dict):
            data.pop("threshold", None)
        return data

    @property
    def in_lake_tp(self) -> bool:
        """Whether the threshold is given as lake TP (tp or trophic_class)."""
        return self.tp is not None or self.trophic_class is not None

    def tp_ug_l(self) -> float | None:
        """The lake TP (ug/L) the target asks for, None when it is not given as lake TP: the
        concentration converted by pint, or the trophic class's boundary (OECD 1982, through
        :data:`planner.limnology.OECD_UPPER_TP`)."""
        if self.tp is not None:
            from planner.units import parse_quantity

            return float(parse_quantity(self.tp).to("ug / L").magnitude)
        if self.trophic_class is not None:
            from planner.limnology import OECD_CLASSES, OECD_UPPER_TP

            k = OECD_CLASSES.index(self.trophic_class)
            return float(OECD_UPPER_TP[k] if self.regime == "lowest" else OECD_UPPER_TP[k - 1])
        return None

    def asked_words(self) -> str:
        """How the target was given, in words: "TP 0.03 mg/L" or "mesotrophic or better (OECD
        1982)"; empty for a threshold in the model's unit."""
        if self.tp is not None:
            return f"TP {self.tp}"
        if self.trophic_class is not None:
            better = "better" if self.regime == "lowest" else "higher"
            return f"{self.trophic_class} or {better} (OECD 1982)"
        return ""

    def meets(self, value: float) -> bool:
        """Whether a value of the target variable meets the threshold (True when none is set)."""
        if self.threshold is None:
            return True
        return value <= self.threshold if self.regime == "lowest" else value >= self.threshold


def target_conversion(target: Target, lake, state_unit: str):
    """The target's lake TP converted to the model's state: (threshold in ``state_unit``, the
    :class:`planner.units.LakeConversion` that did it). Through pint, by the lake's mean depth
    for an areal store (store = concentration x mean depth: 30 ug/L over 3.1 m is 0.093 g/m2)
    or its volume for a lake-wide mass. Raises ValueError, the reason in words, when there is
    no [lake] block or the state is not a P amount; None for a threshold in the model's unit."""
    tp = target.tp_ug_l()
    if tp is None:
        return None
    field = "tp" if target.tp is not None else "trophic_class"
    if lake is None:
        raise ValueError(
            f"a target given as {field} is lake TP, converted to {target.variable} through the "
            "lake's mean depth: add the [lake] block (area, mean_depth), or give threshold in "
            f"{target.variable}'s own unit"
        )
    from planner.units import lake_conversion

    conversion = lake_conversion(lake, target.variable, state_unit, "", 0.0)
    if conversion.tp_per_state is None:
        raise ValueError(
            f"cannot convert lake TP to the model's state: {conversion.tp_unavailable}"
        )
    return tp / conversion.tp_per_state, conversion


def target_problems(target: Target, lake, state_unit: str) -> list[tuple[tuple[str, ...], str]]:
    """The target's conversion problems, at their field relative to the scenario root."""
    try:
        target_conversion(target, lake, state_unit)
    except ValueError as error:
        field = "tp" if target.tp is not None else "trophic_class"
        return [(("target", field), str(error))]
    return []


def resolved_target(target: Target, lake, state_unit: str) -> Target:
    """The target with ``threshold`` holding its lake TP converted to the model's state (the
    target itself when it is given in the model's unit). Call after :func:`target_problems`
    found none."""
    converted = target_conversion(target, lake, state_unit)
    if converted is None:
        return target
    return target.model_copy(update={"threshold": converted[0]})


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
