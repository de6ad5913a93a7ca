"""The catalogue of in-lake measures: what each acts on in the model, how strongly, for how long,
and what it costs, with the published figures behind each number.

Not to be confused with the abatement measures of ``[[costs.measures]]``, which cut the external
load in the catchment: an in-lake measure works on the lake itself, here on its internal
loading (the P recycled from the sediment).

A schedule uses an entry through an action of kind ``in-lake-measure``
(:class:`planner.scenario.schedule_blocks.InLakeMeasure`)::

    [[schedules.actions]]
    kind = "in-lake-measure"
    name = "Aluminium treatment"
    measure = "aluminium"          # a catalogue entry
    lake_type = "shallow"          # "shallow" (polymictic) or "deep" (stratified)
    parameter = "r"                # the model's internal-loading parameter
    start = 2.0                    # year of the first dose
    doses = 2                      # optional: repeat dosing, 2 doses ...
    every_years = 8.0              # ... 8 years apart
    capital_cost = 450000.0        # per dose, in the scenario's currency
    # effect = 0.4                 # optional: a fixed effect instead of the catalogue's spread
    # longevity_years = 6.0        # optional: a fixed longevity instead of the catalogue's spread

Model of a measure: while a dose is effective the parameter is multiplied by the effect factor
(the share of internal loading left: 0.2 removes 80% of it); the dose stops working at once
after its longevity; repeated doses that overlap do not compound (the lake is treated or not).
Every dose of one action lasts equally long (the longevity is a property of the lake and the
treatment, which is what is uncertain). The verdict, after the horizon, is taken without the
measure, as for every action.

Central values and spread: ``compare`` (one deterministic run) uses each distribution's median;
an ensemble (:func:`planner.ensemble.run_ensemble`) draws, for each member, its own effect
factor and longevity from the distributions, independently of each other and of the parameter
priors (from a random stream of their own, so adding a measure changes no other draw). A value
fixed in the action (``effect``, ``longevity_years``) is certain: every member takes it.

Distributions are :mod:`planner.scenario.uncertainty` priors, drawn through its one
:func:`~planner.scenario.uncertainty.prior_quantiles`; the ``parameter`` field of a catalogue
prior only labels it.

Aluminium longevity, fitted to Huser et al. 2016 (Huser, Egemose, Harper, Hupfer, Jensen,
Pilgrim, Reitzel, Rydin & Futter, Longevity and effectiveness of aluminum addition to reduce
sediment phosphorus release and restore lake water quality, Water Research 97:122-132, the
abstract): across 114 treated lakes the longevity averaged 11 years (range 0-45), with means of
21 years in deeper, stratified lakes and 5.7 years in shallow, polymictic lakes. The paper's
by-type figures are means (not medians). The catalogue takes a lognormal for each lake type:

1. mean 5.7 years (shallow) and 21 years (deep), as published;
2. the same log-spread ``sigma`` for both types; the two types mixed in the share ``w`` of deep
   lakes must give the published overall mean, so w = (11 - 5.7) / (21 - 5.7) = 0.346;
3. ``sigma`` from the lower end of the range, the end that was observed: the shortest of the
   114 lakes, 0 whole years (no year of improvement), is read as half a year (the middle of
   [0, 1); common practice, no source), and the mixture's 1/115 quantile (the Weibull plotting
   position of the smallest of n values, 1 / (n + 1)) is set to it: sigma = 0.9100 (solved
   with scipy.optimize.brentq; tests/test_measures.py solves it again);
4. each median is mean * exp(-sigma^2 / 2): 3.77 years (shallow) and 13.88 years (deep); in
   shallow lakes 5% of doses last under 0.84 years and 5% over 16.8.

The upper end of the range is not fitted: longevities were cut off by the end of the
monitoring records (with extrapolated longevities for lakes still improving the paper's average
rose from 11 to 15 years), so 45 years only bounds the longest from below; the fit puts the
largest of 114 lakes (the 114/115 quantile) at about 83 years, above 45 as that censoring
implies. A manager with local evidence fixes ``longevity_years`` instead.

Every other figure carries its own source or is marked "from memory" or "common practice, no
source" where it is defined below. Indicative costs are in EUR per hectare of lake surface,
orders of magnitude from memory: a schedule states its own costs (``capital_cost``,
``running_cost``) in its scenario's currency.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from types import MappingProxyType

from planner.errors import listing, quote
from planner.scenario.schedule_blocks import LAKE_TYPE_NAMES
from planner.scenario.uncertainty import LognormalPrior, TriangularPrior, UniformPrior

# ---------------------------------------------------------------------------------------------
# Lake types

SHALLOW, DEEP = LAKE_TYPE_NAMES
LAKE_TYPES: Mapping[str, str] = MappingProxyType(
    {
        SHALLOW: "shallow and polymictic: mixes through the summer, no lasting hypolimnion",
        DEEP: "deep and stratified: a summer hypolimnion that can turn anoxic",
    }
)

# ---------------------------------------------------------------------------------------------
# Published summaries (Huser et al. 2016, Water Research 97:122-132, abstract) and the fit

HUSER_LAKES = 114
HUSER_MEAN_ALL = 11.0  # years, all lakes
HUSER_LONGEST = 45.0  # years, the upper end of the range (cut off by the records' end)
HUSER_MEAN_SHALLOW = 5.7  # years, shallow polymictic lakes (a mean)
HUSER_MEAN_DEEP = 21.0  # years, deeper stratified lakes (a mean)
HUSER_DEEP_SHARE = (HUSER_MEAN_ALL - HUSER_MEAN_SHALLOW) / (HUSER_MEAN_DEEP - HUSER_MEAN_SHALLOW)
"""Share of deep lakes that makes the two types' means average to the overall mean (0.346)."""
HUSER_SHORTEST = 0.5
"""Years: the range's lower end, 0 whole years, read as the middle of [0, 1)."""
HUSER_SIGMA = 0.9100
"""Log-spread of each lake type's longevity: the mixture's 1/115 quantile is HUSER_SHORTEST."""


def _lognormal_with_mean(label: str, mean: float, sigma: float) -> LognormalPrior:
    """A lognormal prior with the given mean: median = mean exp(-sigma^2 / 2)."""
    return LognormalPrior(
        kind="lognormal", parameter=label, median=mean * math.exp(-sigma * sigma / 2), sigma=sigma
    )


# ---------------------------------------------------------------------------------------------
# The catalogue


@dataclass(frozen=True)
class LakeTypeFigures:
    """A measure's figures in one lake type.

    ``effect``: distribution of the factor the parameter is multiplied by while a dose works
    (the share of internal loading left, 0 to 1). ``longevity``: distribution of the years one
    dose works; None when the measure works exactly as long as it is operated (the action then
    says for how long, ``longevity_years``).
    """

    effect: LognormalPrior | TriangularPrior | UniformPrior
    longevity: LognormalPrior | TriangularPrior | UniformPrior | None


@dataclass(frozen=True)
class CatalogueMeasure:
    """One in-lake measure of the catalogue.

    ``acts_on`` says in words which model parameter it multiplies; ``parameters`` gives that
    parameter for each built-in model kind that has one (other models name it in the action).
    ``lake_types`` maps each lake type the measure suits to its figures. ``repeatable``: whether
    repeat dosing makes sense (an operated system runs on instead). Indicative costs in EUR per
    hectare of lake surface: ``capital_per_ha`` per dose, ``running_per_ha_year`` per year while
    it works. ``sources``: where each figure comes from, with "from memory" and "common practice,
    no source" marks.
    """

    name: str
    label: str
    acts_on: str
    parameters: Mapping[str, str]
    lake_types: Mapping[str, LakeTypeFigures]
    repeatable: bool
    capital_per_ha: float
    running_per_ha_year: float
    sources: str

    def figures(self, lake_type: str) -> LakeTypeFigures:
        """The figures for a lake type (KeyError when the measure does not suit it)."""
        return self.lake_types[lake_type]


INTERNAL_LOADING = MappingProxyType(
    {"recycling": "r", "recycling-sediment": "r", "internal-load": "RR"}
)
"""The internal-loading parameter of each built-in model kind (the retention model has none)."""

ALUMINIUM = CatalogueMeasure(
    name="aluminium",
    label="Aluminium (alum) treatment: sediment P inactivation",
    acts_on="internal loading (recycling from the sediment)",
    parameters=INTERNAL_LOADING,
    lake_types=MappingProxyType(
        {
            # Effect: Reitzel et al. 2005 (Environ. Sci. Technol. 39:4134-4140) measured a 93%
            # cut of internal loading in the two years after treating a shallow lake (the low
            # end, 0.05); Welch & Cooke 1999 (Lake and Reservoir Management 15:5-27) found
            # internal loading cut by about 80% in stratified lakes, less and more variably in
            # shallow ones (from memory: the modes 0.2 and 0.3); the upper ends are common
            # practice, no source.
            SHALLOW: LakeTypeFigures(
                effect=TriangularPrior(
                    kind="triangular",
                    parameter="aluminium effect, shallow lakes",
                    low=0.05,
                    mode=0.3,
                    high=0.8,
                ),
                longevity=_lognormal_with_mean(
                    "aluminium longevity (years), shallow lakes", HUSER_MEAN_SHALLOW, HUSER_SIGMA
                ),
            ),
            DEEP: LakeTypeFigures(
                effect=TriangularPrior(
                    kind="triangular",
                    parameter="aluminium effect, deep lakes",
                    low=0.05,
                    mode=0.2,
                    high=0.5,
                ),
                longevity=_lognormal_with_mean(
                    "aluminium longevity (years), deep lakes", HUSER_MEAN_DEEP, HUSER_SIGMA
                ),
            ),
        }
    ),
    repeatable=True,
    capital_per_ha=1500.0,
    running_per_ha_year=0.0,
    sources=(
        "longevity: Huser et al. 2016, Water Research 97:122-132 (lognormal fitted to the "
        "published means and range, see the module notes); effect: Reitzel et al. 2005, "
        "Environ. Sci. Technol. 39:4134-4140, and Welch & Cooke 1999, Lake and Reservoir "
        "Management 15:5-27 (from memory); cost: from memory, order of magnitude"
    ),
)

OXYGENATION = CatalogueMeasure(
    name="hypolimnetic-oxygenation",
    label="Hypolimnetic oxygenation (or aeration)",
    acts_on="internal loading (release from anoxic sediment)",
    parameters=INTERNAL_LOADING,
    lake_types=MappingProxyType(
        {
            # Works only while it runs, and only where there is a hypolimnion. Gachter & Wehrli
            # 1998 (Environ. Sci. Technol. 32:3659-3665) found ten years of oxygenation left
            # the internal loading of two eutrophic lakes unchanged (from memory): the effect
            # reaches 1 (none); the lower end 0.3 is common practice, no source.
            DEEP: LakeTypeFigures(
                effect=UniformPrior(
                    kind="uniform", parameter="oxygenation effect, deep lakes", low=0.3, high=1.0
                ),
                longevity=None,
            ),
        }
    ),
    repeatable=False,
    capital_per_ha=2000.0,
    running_per_ha_year=300.0,
    sources=(
        "effect: Gachter & Wehrli 1998, Environ. Sci. Technol. 32:3659-3665 (from memory) for "
        "no effect, common practice, no source for the rest; works while operated; cost: from "
        "memory, order of magnitude"
    ),
)

DREDGING = CatalogueMeasure(
    name="dredging",
    label="Sediment removal (dredging of the P-rich top layer)",
    acts_on="internal loading (the P-rich sediment removed)",
    parameters=INTERNAL_LOADING,
    lake_types=MappingProxyType(
        {
            # Common practice, no source: a deep enough cut removes most of the mobile P, which
            # settling organic matter rebuilds over decades.
            lake_type: LakeTypeFigures(
                effect=TriangularPrior(
                    kind="triangular",
                    parameter=f"dredging effect, {lake_type} lakes",
                    low=0.2,
                    mode=0.5,
                    high=1.0,
                ),
                longevity=LognormalPrior(
                    kind="lognormal",
                    parameter=f"dredging longevity (years), {lake_type} lakes",
                    median=15.0,
                    sigma=0.6,
                ),
            )
            for lake_type in (SHALLOW, DEEP)
        }
    ),
    repeatable=True,
    capital_per_ha=60000.0,
    running_per_ha_year=0.0,
    sources="effect and longevity: common practice, no source; cost: from memory, order of "
    "magnitude",
)

CATALOGUE: Mapping[str, CatalogueMeasure] = MappingProxyType(
    {entry.name: entry for entry in (ALUMINIUM, OXYGENATION, DREDGING)}
)
"""Every in-lake measure, by name."""


# ---------------------------------------------------------------------------------------------
# Checks of an action against its entry (the schema calls these; messages name the field)


def entry_problems(
    measure: str,
    lake_type: str,
    *,
    doses: int,
    every_years: float | None,
    longevity_years: float | None,
) -> list[tuple[tuple[str, ...], str]]:
    """What is wrong with an action's choice of catalogue entry, lake type and dosing, as
    (field, reason) pairs relative to the action."""
    entry = CATALOGUE.get(measure)
    if entry is None:
        return [(("measure",), f"{quote(measure)} is not in the catalogue ({listing(CATALOGUE)})")]
    problems: list[tuple[tuple[str, ...], str]] = []
    if lake_type not in entry.lake_types:
        problems.append(
            (
                ("lake_type",),
                f"{quote(lake_type)}: {entry.name} suits only {listing(entry.lake_types)} lakes "
                f"({'; '.join(LAKE_TYPES[k] for k in entry.lake_types)})",
            )
        )
    elif entry.figures(lake_type).longevity is None and longevity_years is None:
        problems.append(
            (
                ("longevity_years",),
                f"{entry.name} works only while it is operated: give the years it runs",
            )
        )
    if doses > 1 and not entry.repeatable:
        problems.append(
            (("doses",), f"{entry.name} runs continuously: give one dose and longevity_years")
        )
    elif doses > 1 and every_years is None:
        problems.append((("every_years",), f"give the years between the {doses} doses"))
    return problems


LONGEVITY_STEP = 1.0 / 12.0
"""Years: a catalogue longevity is counted in whole months (see :func:`whole_months`)."""


def whole_months(years):
    """A longevity (years; a float or an array) drawn from the catalogue, rounded to whole
    months. Nobody knows when a treatment stops working to within a season, and an ensemble's
    engine cuts its run wherever any member's dose stops: in whole months that is at most
    twelve cuts a year for all members together, instead of one per member (several times
    faster for 2000 members, with the recovery probability unchanged within its sampling
    error; benchmarks/measures.py). A value fixed in the action is never rounded."""
    import numpy as np

    rounded = np.round(np.asarray(years, dtype=float) / LONGEVITY_STEP) * LONGEVITY_STEP
    return float(rounded) if rounded.ndim == 0 else rounded


def default_parameter(measure: str, model_kind: str) -> str | None:
    """The parameter a measure multiplies in a built-in model kind (None when it has none)."""
    entry = CATALOGUE.get(measure)
    return None if entry is None else entry.parameters.get(model_kind)


def indicative_costs(measure: str, area_ha: float) -> tuple[float, float]:
    """(capital per dose, running per year) in EUR for a lake of ``area_ha`` hectares, from the
    catalogue's indicative figures (orders of magnitude from memory: a starting point for a
    manager's own quotes, never a price)."""
    entry = CATALOGUE[measure]
    return entry.capital_per_ha * area_ha, entry.running_per_ha_year * area_ha
