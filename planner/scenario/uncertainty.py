"""The ``[uncertainty]`` block: priors on model parameters, year-to-year load swings, process
noise on the state, and how many ensemble members to draw with which seed.

Priors (``[[uncertainty.priors]]``, one per parameter, tagged by ``kind``):

- ``normal``: ``mean``, ``sd`` (``sd = 0`` is a point mass);
- ``lognormal``: ``median`` and ``sigma``, the standard deviation of the natural log
  (``sigma = 0`` is a point mass);
- ``uniform``: ``low`` to ``high`` (``low = high`` is a point mass);
- ``triangular``: ``low``, ``mode``, ``high``.

Optional ``lower`` / ``upper`` truncate a prior: values are drawn from the prior restricted to
[lower, upper], by inverting the cumulative distribution on that interval, which gives the same
distribution as redrawing until a value falls inside (never clipping, which would pile
probability onto the bounds). A parameter with a physical lower bound (a rate cannot be negative)
needs ``lower`` whenever its prior reaches below that bound.

Load variability (``[uncertainty.load_variability]``) multiplies the schedule's control in each
calendar year by a lognormal factor with mean one: log factor = sigma z_k - sigma^2 / 2, where
z_k is a stationary AR(1) series with lag-1 autocorrelation ``autocorrelation`` and unit
variance. Give either ``sigma`` (standard deviation of the log factor) or ``cv`` (coefficient of
variation of the factor; sigma^2 = ln(1 + cv^2)).

Process noise (``[uncertainty.process_noise]``) adds sigma dW to each named state variable
(additive noise; sigma in state units per square-root year), making the model a stochastic
differential equation.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Annotated, Literal

from pydantic import Field, model_validator

from planner.scenario._base import (
    FrozenDict,
    FrozenList,
    Loc,
    NonNegative,
    Positive,
    Strict,
    raise_problems,
)

MIN_TRUNCATED_MASS = 1e-6
"""Least prior probability the truncation interval must keep (below it the draw is all tail)."""

MAX_MEMBERS = 10_000_000


def _normal_cdf(z: float) -> float:
    return 0.5 * math.erfc(-z / math.sqrt(2.0))


class _Prior(Strict):
    parameter: str
    lower: float | None = None
    upper: float | None = None

    def cdf(self, value: float) -> float:  # pragma: no cover - every kind overrides it
        raise NotImplementedError

    @property
    def point(self) -> float | None:
        """The value of a point-mass prior, None for a spread prior."""
        raise NotImplementedError  # pragma: no cover

    @property
    def support(self) -> tuple[float, float]:
        """Smallest and largest value the untruncated prior can take."""
        raise NotImplementedError  # pragma: no cover

    @property
    def truncated_support(self) -> tuple[float, float]:
        low, high = self.support
        if self.lower is not None:
            low = max(low, self.lower)
        if self.upper is not None:
            high = min(high, self.upper)
        return low, high

    def mass_within_bounds(self) -> float:
        """Prior probability of [lower, upper] (1 without bounds)."""
        if self.point is not None:
            inside = (self.lower is None or self.point >= self.lower) and (
                self.upper is None or self.point <= self.upper
            )
            return 1.0 if inside else 0.0
        high = 1.0 if self.upper is None else self.cdf(self.upper)
        low = 0.0 if self.lower is None else self.cdf(self.lower)
        return max(high - low, 0.0)

    def _own_problems(self) -> list[tuple[Loc, str]]:
        return []

    @model_validator(mode="after")
    def _check_bounds(self):
        problems = self._own_problems()
        if self.lower is not None and self.upper is not None and not self.lower < self.upper:
            problems.append((("upper",), f"must be above lower ({self.lower:g})"))
        elif not problems:
            mass = self.mass_within_bounds()
            if self.point is not None and mass == 0.0:
                problems.append(
                    (
                        ("lower",) if self.lower is not None else ("upper",),
                        f"the point value {self.point:g} lies outside [lower, upper]",
                    )
                )
            elif mass < MIN_TRUNCATED_MASS:
                problems.append(
                    (
                        ("lower",) if self.lower is not None else ("upper",),
                        f"[lower, upper] keeps only {mass:.2g} of the prior's probability; "
                        "widen the bounds or move the prior",
                    )
                )
        raise_problems("prior", problems, self.parameter)
        return self


class NormalPrior(_Prior):
    """Normal with ``mean`` and standard deviation ``sd`` (0: a point mass at ``mean``)."""

    kind: Literal["normal"]
    mean: float
    sd: NonNegative

    def cdf(self, value: float) -> float:
        return _normal_cdf((value - self.mean) / self.sd)

    @property
    def point(self) -> float | None:
        return self.mean if self.sd == 0 else None

    @property
    def support(self) -> tuple[float, float]:
        return (self.mean, self.mean) if self.sd == 0 else (-math.inf, math.inf)


class LognormalPrior(_Prior):
    """Lognormal: ln(value) is normal with mean ln(``median``) and standard deviation ``sigma``."""

    kind: Literal["lognormal"]
    median: Positive
    sigma: NonNegative

    def cdf(self, value: float) -> float:
        if value <= 0:
            return 0.0
        return _normal_cdf((math.log(value) - math.log(self.median)) / self.sigma)

    @property
    def point(self) -> float | None:
        return self.median if self.sigma == 0 else None

    @property
    def support(self) -> tuple[float, float]:
        return (self.median, self.median) if self.sigma == 0 else (0.0, math.inf)


class _IntervalPrior(_Prior):
    low: float
    high: float

    @property
    def point(self) -> float | None:
        return self.low if self.low == self.high else None

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)


class UniformPrior(_IntervalPrior):
    """Uniform on [``low``, ``high``] (equal ends: a point mass)."""

    kind: Literal["uniform"]

    def _own_problems(self) -> list[tuple[Loc, str]]:
        if self.high < self.low:
            return [(("high",), f"must be at least low ({self.low:g})")]
        return []

    def cdf(self, value: float) -> float:
        return min(max((value - self.low) / (self.high - self.low), 0.0), 1.0)


class TriangularPrior(_IntervalPrior):
    """Triangular on [``low``, ``high``] with its peak at ``mode``."""

    kind: Literal["triangular"]
    mode: float

    def _own_problems(self) -> list[tuple[Loc, str]]:
        if not self.low <= self.mode:
            return [(("mode",), f"must be at least low ({self.low:g})")]
        if not self.mode <= self.high:
            return [(("high",), f"must be at least mode ({self.mode:g})")]
        return []

    def cdf(self, value: float) -> float:
        a, c, b = self.low, self.mode, self.high
        if value <= a:
            return 0.0
        if value >= b:
            return 1.0
        if value <= c:
            return (value - a) ** 2 / ((b - a) * (c - a))
        return 1.0 - (b - value) ** 2 / ((b - a) * (b - c))


Prior = Annotated[
    NormalPrior | LognormalPrior | UniformPrior | TriangularPrior, Field(discriminator="kind")
]
PRIOR_KINDS = ("normal", "lognormal", "uniform", "triangular")


class LoadVariability(Strict):
    """Year-to-year multiplicative swings of the control (wet and dry years).

    Give ``sigma`` (standard deviation of the log factor) or ``cv`` (coefficient of variation
    of the factor), not both. ``autocorrelation`` is the lag-1 autocorrelation of the log factor
    from one year to the next, in [0, 1).
    """

    sigma: NonNegative | None = None
    cv: NonNegative | None = None
    autocorrelation: float = Field(default=0.0, ge=0.0, lt=1.0)

    @model_validator(mode="after")
    def _check_one(self) -> LoadVariability:
        problems: list[tuple[Loc, str]] = []
        if self.sigma is None and self.cv is None:
            problems.append((("sigma",), "give sigma (of the log factor) or cv (of the factor)"))
        elif self.sigma is not None and self.cv is not None:
            problems.append((("cv",), "give either sigma or cv, not both"))
        raise_problems("load_variability", problems, self.sigma)
        return self

    @property
    def sigma_log(self) -> float:
        """Standard deviation of the natural log of the yearly factor."""
        if self.sigma is not None:
            return float(self.sigma)
        return math.sqrt(math.log1p(float(self.cv) ** 2))


class Uncertainty(Strict):
    """What is uncertain, and the size and seed of the ensemble that samples it."""

    members: int = Field(default=1000, ge=1, le=MAX_MEMBERS)
    seed: int = Field(default=0, ge=0, lt=2**63)
    priors: FrozenList[Prior] = Field(default=(), max_length=200)
    load_variability: LoadVariability | None = None
    process_noise: FrozenDict[str, NonNegative] = Field(
        default={},
        validate_default=True,
        description="Additive noise sigma dW on each named state variable "
        "(state units per square-root year).",
    )
    steps_per_year: int | None = Field(
        default=None,
        ge=1,
        le=10_000,
        description="Fixed integration steps per year (default: the engine's choice).",
    )


def prior_problems(
    uncertainty: Uncertainty,
    *,
    parameters: Mapping[str, float],
    control: str,
    variables: tuple[str, ...],
    physical_lower,
) -> list[tuple[Loc, str]]:
    """Links between ``[uncertainty]`` and the rest of the scenario, at exact locations.

    Priors name model parameters other than the control (the control's swings are
    ``load_variability``), once each; their truncated range respects the parameter's physical
    bound (``physical_lower(name)`` gives (bound, strict) or None); process noise names model
    variables. Locations are relative to the scenario root.
    """
    problems: list[tuple[Loc, str]] = []
    seen: dict[str, int] = {}
    for index, prior in enumerate(uncertainty.priors):
        where: Loc = ("uncertainty", "priors", index)
        name = prior.parameter
        if name == control:
            problems.append(
                (
                    (*where, "parameter"),
                    f"{name!r} is the control, set by each schedule; describe its year-to-year "
                    "swings with [uncertainty.load_variability]",
                )
            )
            continue
        if name not in parameters:
            problems.append(
                (
                    (*where, "parameter"),
                    f"{name!r} is not a model parameter (parameters: {', '.join(parameters)})",
                )
            )
            continue
        if name in seen:
            problems.append(
                ((*where, "parameter"), f"same parameter as uncertainty.priors.{seen[name]}")
            )
            continue
        seen[name] = index
        bound = physical_lower(name)
        if bound is None:
            continue
        lowest, strict = bound
        low, _ = prior.truncated_support
        below = low < lowest or (strict and low == lowest and prior.point is not None)
        if below:
            relation = "greater than" if strict else "at least"
            if prior.point is not None:
                field = next(f for f in ("mean", "median", "low") if f in type(prior).model_fields)
                reason = (
                    f"a point mass at {prior.point:g}, but {name!r} must be {relation} {lowest:g}"
                )
                problems.append(((*where, field), reason))
            else:
                reason = (
                    f"the prior reaches below {lowest:g}, the physical bound of {name!r}; "
                    f"set lower to {lowest:g} or more (values outside [lower, upper] are never "
                    "drawn)"
                )
                problems.append(((*where, "lower"), reason))
    for name in uncertainty.process_noise:
        if name not in variables:
            problems.append(
                (
                    ("uncertainty", "process_noise", name),
                    f"not a model variable (variables: {', '.join(variables)})",
                )
            )
    return problems
