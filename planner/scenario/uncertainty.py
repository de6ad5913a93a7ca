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

Correlated parameters (``[uncertainty.joint]``): a multivariate normal prior on several
parameters at once, for estimates that move together (a fit to a monitoring record pins down a
combination of them better than each; ``planner fit --out`` writes this block from its bootstrap
replicates). Each parameter is normal on its own ``scales`` entry: ``"log"`` (the natural log of
the value is normal: a positive parameter with a multiplicative spread) or ``"linear"`` (the
value itself is normal)::

    [uncertainty.joint]
    parameters = ["s", "r", "m"]
    scales = ["log", "log", "log"]
    centre = [1.253, 6.673, 3.911]      # values; for a log-scale parameter, its median
    covariance = [                      # of ln(value) or value, as scales says
        [1.3e-4, 1.6e-4, -1.0e-4],
        [1.6e-4, 4.4e-4, -8.1e-5],
        [-1.0e-4, -8.1e-5, 1.0e-4],
    ]
    origin = "Priors of s, r, m: ... 200 bootstrap refits ..."   # free text, optional

The normal's mean is (ln centre_i or centre_i); ``covariance`` must be symmetric and positive
semi-definite (zero rows are allowed: a zero matrix is a point mass at ``centre``). A parameter
in ``joint`` has no prior of its own in ``priors``; other parameters keep their independent
priors. The control cannot be in it (its swings are ``load_variability``). Draws below a
parameter's physical lower bound are redrawn (a truncated multivariate normal); the prior may
put at most ``MAX_JOINT_OUTSIDE`` of its probability below a bound, so the truncation barely
changes it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Annotated, Literal

from pydantic import Field, model_validator

from planner.errors import listing, quote
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

MAX_MEMBERS = 1_000_000
"""Most ensemble members: 10^6 members peak at about 0.6 GB of memory and take about a minute
(benchmarks/ensemble.py); ten times more would not fit a laptop's memory."""
MAX_JOINT_PARAMETERS = 50
MAX_JOINT_OUTSIDE = 0.01
"""Most probability a joint prior may put below one parameter's physical bound (redrawn)."""
SYMMETRY_TOLERANCE = 1e-9  # |c_ij - c_ji| allowed, relative to sqrt(c_ii c_jj)
DEFINITENESS_TOLERANCE = 1e-9  # negative eigenvalue allowed, relative to the largest one
JointScale = Literal["log", "linear"]


def _normal_cdf(z: float) -> float:
    return 0.5 * math.erfc(-z / math.sqrt(2.0))


class _Prior(Strict):
    parameter: str = Field(description="Model parameter this prior is on (not the control).")
    lower: float | None = Field(
        default=None,
        description="No value below this is drawn, in the parameter's unit (default: no bound).",
    )
    upper: float | None = Field(
        default=None,
        description="No value above this is drawn, in the parameter's unit (default: no bound).",
    )

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

    kind: Literal["normal"] = Field(description='"normal": a bell curve around the mean.')
    mean: float = Field(description="Mean of the parameter, in its unit.")
    sd: NonNegative = Field(
        description="Standard deviation, in the parameter's unit (0: always the mean)."
    )

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

    kind: Literal["lognormal"] = Field(
        description='"lognormal": a positive value with a multiplicative spread.'
    )
    median: Positive = Field(description="Median of the parameter, in its unit.")
    sigma: NonNegative = Field(
        description="Standard deviation of the natural log of the value (0: always the median)."
    )

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
    low: float = Field(description="Smallest value the prior can take, in the parameter's unit.")
    high: float = Field(description="Largest value the prior can take, in the parameter's unit.")

    @property
    def point(self) -> float | None:
        return self.low if self.low == self.high else None

    @property
    def support(self) -> tuple[float, float]:
        return (self.low, self.high)


class UniformPrior(_IntervalPrior):
    """Uniform on [``low``, ``high``] (equal ends: a point mass)."""

    kind: Literal["uniform"] = Field(description='"uniform": every value from low to high alike.')

    def _own_problems(self) -> list[tuple[Loc, str]]:
        if self.high < self.low:
            return [(("high",), f"must be at least low ({self.low:g})")]
        return []

    def cdf(self, value: float) -> float:
        return min(max((value - self.low) / (self.high - self.low), 0.0), 1.0)


class TriangularPrior(_IntervalPrior):
    """Triangular on [``low``, ``high``] with its peak at ``mode``."""

    kind: Literal["triangular"] = Field(
        description='"triangular": most likely at mode, falling to zero at low and high.'
    )
    mode: float = Field(description="Most likely value, in the parameter's unit.")

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


def prior_quantiles(prior: _Prior, p):
    """Values of a prior at probabilities ``p`` (floats or an array in (0, 1)) of its truncated
    distribution: the inverse cumulative distribution, vectorised (numpy and scipy are imported
    here, on first use, so validating a scenario needs neither). Every draw from a prior, the
    ensemble's parameters and the in-lake measures' effects and longevities
    (:mod:`planner.measures`), goes through this one function."""
    import numpy as np
    from scipy.special import ndtri

    p = np.asarray(p, dtype=float)
    point = prior.point
    if point is not None:
        return np.full(p.shape, float(point))
    low = 0.0 if prior.lower is None else prior.cdf(prior.lower)
    high = 1.0 if prior.upper is None else prior.cdf(prior.upper)
    q = np.clip(low + p * (high - low), np.nextafter(low, 1.0), np.nextafter(high, 0.0))
    if isinstance(prior, NormalPrior):
        x = prior.mean + prior.sd * ndtri(q)
    elif isinstance(prior, LognormalPrior):
        x = prior.median * np.exp(prior.sigma * ndtri(q))
    elif isinstance(prior, UniformPrior):
        x = prior.low + q * (prior.high - prior.low)
    elif isinstance(prior, TriangularPrior):
        a, c, b = prior.low, prior.mode, prior.high
        peak = (c - a) / (b - a)
        x = np.where(
            q < peak,
            a + np.sqrt(q * (b - a) * (c - a)),
            b - np.sqrt((1.0 - q) * (b - a) * (b - c)),
        )
    else:  # pragma: no cover - the schema admits no other kind
        raise TypeError(type(prior).__name__)
    if prior.lower is not None or prior.upper is not None:
        x = np.clip(x, prior.lower, prior.upper)  # only rounding can reach past a bound
    return x


def prior_median(prior: _Prior) -> float:
    """The median of a prior (of its truncated distribution): its central value."""
    return float(prior_quantiles(prior, 0.5))


class LoadVariability(Strict):
    """Year-to-year multiplicative swings of the control (wet and dry years).

    Give ``sigma`` (standard deviation of the log factor) or ``cv`` (coefficient of variation
    of the factor), not both. ``autocorrelation`` is the lag-1 autocorrelation of the log factor
    from one year to the next, in [0, 1).
    """

    sigma: NonNegative | None = Field(
        default=None,
        description="Standard deviation of the log of the yearly load factor (default: none; "
        "give sigma or cv).",
    )
    cv: NonNegative | None = Field(
        default=None,
        description="Coefficient of variation of the yearly load factor, e.g. 0.3 (default: "
        "none; give sigma or cv).",
    )
    autocorrelation: float = Field(
        default=0.0,
        ge=0.0,
        lt=1.0,
        description="Lag-1 correlation from one year to the next, in [0, 1) (default: 0).",
    )

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


class JointPrior(Strict):
    """A multivariate normal prior on several parameters, each on its own scale ("log": the
    natural log of the value is normal, or "linear"); see the module docstring."""

    parameters: FrozenList[str] = Field(
        min_length=1,
        max_length=MAX_JOINT_PARAMETERS,
        description="Model parameters that vary together (not the control).",
    )
    scales: FrozenList[JointScale] = Field(
        description='Scale of each parameter: "log" (ln value is normal) or "linear".'
    )
    centre: FrozenList[float] = Field(
        description="Value of each parameter at the centre (a log-scale parameter's median)."
    )
    covariance: FrozenList[FrozenList[float]] = Field(
        description="Covariance of (ln value or value), as scales says; symmetric, positive "
        "semi-definite."
    )
    origin: str = Field(
        default="",
        max_length=2000,
        description="Where the numbers came from, free text (default: none).",
    )

    @model_validator(mode="after")
    def _check_shape(self) -> JointPrior:
        problems = self._shape_problems()
        k = len(self.parameters)
        if len(self.covariance) == k and all(len(row) == k for row in self.covariance):
            problems += self._matrix_problems()
        raise_problems("joint", problems, self.parameters)
        return self

    def _shape_problems(self) -> list[tuple[Loc, str]]:
        k = len(self.parameters)
        problems: list[tuple[Loc, str]] = []
        seen: dict[str, int] = {}
        for index, name in enumerate(self.parameters):
            if name in seen:
                problems.append(
                    (("parameters", index), f"same parameter as parameters.{seen[name]}")
                )
            seen.setdefault(name, index)
        for field, values in (("scales", self.scales), ("centre", self.centre)):
            if len(values) != k:
                problems.append(((field,), f"has {len(values)} entries for {k} parameters"))
        if len(self.covariance) != k:
            problems.append(
                (("covariance",), f"has {len(self.covariance)} rows for {k} parameters")
            )
        for index, row in enumerate(self.covariance):
            if len(row) != k:
                problems.append(
                    (("covariance", index), f"has {len(row)} entries for {k} parameters")
                )
        if len(self.scales) == k and len(self.centre) == k:
            for index, (scale, centre) in enumerate(zip(self.scales, self.centre, strict=True)):
                if scale == "log" and not centre > 0:
                    problems.append(
                        (
                            ("centre", index),
                            f"must be greater than 0: {quote(self.parameters[index])} is on "
                            "the log scale (its centre is the median of a positive value)",
                        )
                    )
        return problems

    def _matrix_problems(self) -> list[tuple[Loc, str]]:
        """Variances not negative, the matrix symmetric and positive semi-definite (numpy only
        here, so scenarios without a joint prior validate without it)."""
        import numpy as np

        matrix = np.array(self.covariance, dtype=float)
        k = matrix.shape[0]
        problems: list[tuple[Loc, str]] = []
        for i in range(k):
            if matrix[i, i] < 0:
                problems.append((("covariance", i, i), "a variance cannot be negative"))
        if problems:
            return problems
        spread = np.sqrt(np.outer(np.diag(matrix), np.diag(matrix)))
        for i in range(k):
            for j in range(i):
                allowed = SYMMETRY_TOLERANCE * max(spread[i, j], np.finfo(float).tiny)
                if abs(matrix[i, j] - matrix[j, i]) > allowed:
                    problems.append(
                        (
                            ("covariance", i, j),
                            f"{matrix[i, j]:g} differs from covariance.{j}.{i} "
                            f"({matrix[j, i]:g}): a covariance matrix is symmetric",
                        )
                    )
        if problems:
            return problems
        eigenvalues = np.linalg.eigvalsh(0.5 * (matrix + matrix.T))
        largest = float(np.max(np.abs(eigenvalues)))
        if eigenvalues[0] < -DEFINITENESS_TOLERANCE * largest:
            problems.append(
                (
                    ("covariance",),
                    f"not positive semi-definite (an eigenvalue is {eigenvalues[0]:.3g}): some "
                    "combination of the parameters would have a negative variance; a correlation "
                    "c_ij / sqrt(c_ii c_jj) must lie within [-1, 1], and so must every "
                    "combination of them",
                )
            )
        return problems

    def spread(self, index: int) -> float:
        """Standard deviation of parameter ``index`` on its scale."""
        return math.sqrt(max(self.covariance[index][index], 0.0))

    def mass_below(self, index: int, bound: float) -> float:
        """Probability that parameter ``index`` falls below ``bound`` (its marginal normal)."""
        centre, scale = self.centre[index], self.scales[index]
        if scale == "log":
            if bound <= 0:
                return 0.0
            centre, bound = math.log(centre), math.log(bound)
        sd = self.spread(index)
        if sd == 0:
            return 1.0 if centre < bound else 0.0
        return _normal_cdf((bound - centre) / sd)


class Uncertainty(Strict):
    """What is uncertain, and the size and seed of the ensemble that samples it."""

    members: int = Field(
        default=1000,
        ge=1,
        le=MAX_MEMBERS,
        description="Number of ensemble members (simulated lakes) to draw (default: 1000).",
    )
    seed: int = Field(
        default=0,
        ge=0,
        lt=2**63,
        description="Seed of the random draws; the same seed gives the same ensemble (default: 0).",
    )
    priors: FrozenList[Prior] = Field(
        default=(),
        max_length=200,
        description="One prior per uncertain model parameter (default: none).",
    )
    joint: JointPrior | None = Field(
        default=None,
        description="A correlated normal prior on several parameters at once (default: none).",
    )
    load_variability: LoadVariability | None = Field(
        default=None,
        description="Year-to-year swings of the control, wet and dry years (default: none).",
    )
    process_noise: FrozenDict[str, NonNegative] = Field(
        default={},
        validate_default=True,
        description="Additive noise sigma dW on each named state variable, in state units "
        "per square-root year (default: none).",
    )
    steps_per_year: int | None = Field(
        default=None,
        ge=1,
        le=10_000,
        description="Fixed integration steps per year (default: the engine's choice).",
    )


def _not_drawable(name: str, parameters: Mapping[str, float], control: str) -> str | None:
    """Why a prior cannot be on parameter ``name`` (None when it can)."""
    if name == control:
        return (
            f"{quote(name)} is the control, set by each schedule; describe its year-to-year swings "
            "with [uncertainty.load_variability]"
        )
    if name not in parameters:
        return f"{quote(name)} is not a model parameter (parameters: {listing(parameters)})"
    return None


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
    bound (``physical_lower(name)`` gives (bound, strict) or None); the joint prior's parameters
    have no independent prior and it puts at most MAX_JOINT_OUTSIDE of its probability below
    each bound; process noise names model variables. Locations are relative to the scenario
    root.
    """
    problems: list[tuple[Loc, str]] = []
    seen: dict[str, int] = {}
    for index, prior in enumerate(uncertainty.priors):
        where: Loc = ("uncertainty", "priors", index)
        name = prior.parameter
        if (reason := _not_drawable(name, parameters, control)) is not None:
            problems.append(((*where, "parameter"), reason))
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
                    f"a point mass at {prior.point:g}, but {quote(name)} must be "
                    f"{relation} {lowest:g}"
                )
                problems.append(((*where, field), reason))
            else:
                reason = (
                    f"the prior reaches below {lowest:g}, the physical bound of {quote(name)}; "
                    f"set lower to {lowest:g} or more (values outside [lower, upper] are never "
                    "drawn)"
                )
                problems.append(((*where, "lower"), reason))
    if uncertainty.joint is not None:
        problems += _joint_problems(uncertainty.joint, seen, parameters, control, physical_lower)
    for name in uncertainty.process_noise:
        if name not in variables:
            problems.append(
                (
                    ("uncertainty", "process_noise", name),
                    f"not a model variable (variables: {', '.join(variables)})",
                )
            )
    return problems


def _joint_problems(
    joint: JointPrior,
    independent: Mapping[str, int],
    parameters: Mapping[str, float],
    control: str,
    physical_lower,
) -> list[tuple[Loc, str]]:
    """Links between ``[uncertainty.joint]`` and the model and the independent priors."""
    problems: list[tuple[Loc, str]] = []
    where: Loc = ("uncertainty", "joint")
    for index, name in enumerate(joint.parameters):
        if (reason := _not_drawable(name, parameters, control)) is not None:
            problems.append(((*where, "parameters", index), reason))
            continue
        if name in independent:
            problems.append(
                (
                    (*where, "parameters", index),
                    f"{quote(name)} also has its own prior "
                    f"(uncertainty.priors.{independent[name]}); "
                    "give each parameter one prior: remove one of them",
                )
            )
            continue
        bound = physical_lower(name)
        if bound is None:
            continue
        lowest, strict = bound
        centre = joint.centre[index]
        relation = "greater than" if strict else "at least"
        if centre < lowest or strict and centre == lowest:
            problems.append(
                (
                    (*where, "centre", index),
                    f"{centre:g}, but {quote(name)} must be {relation} {lowest:g}",
                )
            )
            continue
        mass = joint.mass_below(index, lowest)
        if mass > MAX_JOINT_OUTSIDE:
            problems.append(
                (
                    (*where, "centre", index),
                    f"the joint prior puts {mass:.2g} of its probability below {lowest:g}, the "
                    f"physical bound of {quote(name)} (at most {MAX_JOINT_OUTSIDE:g} allowed); "
                    + (
                        "move the centre further above the bound or shrink the variance"
                        if joint.scales[index] == "log"
                        else 'use scale "log" for a positive parameter, or a smaller variance'
                    ),
                )
            )
    return problems
