"""Abatement cost curve, damages and present value of a schedule.

Units: control values and reductions in the control's unit (for example t P / yr); a measure's
``unit_cost`` is currency per year for each control unit of reduction it provides; times in years.

The abatement cost rate is the cheapest-first supply curve of the measures: each measure removes
up to its capacity, dearer measures are used only once cheaper ones are full. The rate is therefore
piecewise linear, continuous, convex and non-decreasing in the reduction.

Present value convention (the end-of-year convention of engineering economics): the flows of
year k, that is of t in (k - 1, k] (the last year possibly partial), are discounted by
(1 + i)^-k; a one-off cost at time t is discounted by (1 + i)^-t; i is ``Costs.discount_rate``.
With i = 0 the present value equals the undiscounted total.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from planner.scenario.blocks import Costs, Measure
from planner.schedules import LIMIT_CAPACITY, REL_TOL, ControlPath, Infeasibility

CAPACITY_REL_TOL = REL_TOL
"""Relative slack before a reduction counts as beyond the summed capacity."""


def _with_unit(value: float, unit: str) -> str:
    return f"{value:g} {unit}" if unit else f"{value:g}"


def abatement_capacity(measures: Sequence[Measure]) -> float:
    """Summed capacity of the measures (control units of reduction)."""
    return float(sum(measure.capacity for measure in measures))


def abatement_cost_rate(reduction: np.ndarray, measures: Sequence[Measure]) -> np.ndarray:
    """Cost per year (currency / yr) of a load reduction (control units below the baseline).

    Measures are filled cheapest first: sum_i unit_cost_i * min(max(r - C_i, 0), capacity_i),
    where C_i is the summed capacity of the measures cheaper than i. A reduction <= 0 costs 0;
    a reduction beyond the summed capacity costs no more than the full capacity. Vectorised.
    """
    r = np.asarray(reduction, dtype=float)
    rate = np.zeros_like(r)
    filled = 0.0
    for measure in sorted(measures, key=lambda m: m.unit_cost):
        rate = rate + measure.unit_cost * np.clip(r - filled, 0.0, measure.capacity)
        filled += measure.capacity
    return rate


def _priced_rate(reduction: np.ndarray, measures: Sequence[Measure]) -> np.ndarray:
    """The cost rate with any reduction beyond capacity priced at the dearest unit cost."""
    r = np.asarray(reduction, dtype=float)
    dearest = max((m.unit_cost for m in measures), default=0.0)
    excess = np.maximum(r - abatement_capacity(measures), 0.0)
    return abatement_cost_rate(r, measures) + dearest * excess


@dataclass(frozen=True, eq=False)
class CostBreakdown:
    """Costs of one schedule over the horizon, in ``currency``.

    ``yearly``: abatement plus damage cost of each year k = 1 .. ceil(horizon) (t in (k-1, k]),
    undiscounted. ``actions_total``: one-off action costs plus in-lake measures' running costs.
    Totals are undiscounted; ``present_value`` follows the module's convention.
    ``infeasible``: set when the reduction asked for exceeds the summed capacity of the measures.
    """

    currency: str
    yearly: np.ndarray
    abatement_total: float
    damage_total: float
    actions_total: float
    total: float
    present_value: float
    infeasible: Infeasibility | None


def no_costs(horizon: float, currency: str = "") -> CostBreakdown:
    """An all-zero breakdown for a scenario without a costs block (horizon in years)."""
    return CostBreakdown(
        currency=currency,
        yearly=np.zeros(_year_count(horizon)),
        abatement_total=0.0,
        damage_total=0.0,
        actions_total=0.0,
        total=0.0,
        present_value=0.0,
        infeasible=None,
    )


def _year_count(horizon: float) -> int:
    if not horizon > 0:
        raise ValueError(f"the horizon must be positive, not {horizon:g}")
    return math.ceil(horizon)


def _linear_pieces(path: ControlPath, horizon: float) -> np.ndarray:
    """The path's linear pieces on [0, horizon] as rows (a, b, u(a+), u(b-)), a < b."""
    rows = [p for p in path.pieces(horizon) if p[1] > p[0]]
    return np.array(rows, dtype=float).reshape(-1, 4)


def _abatement_by_year(
    path: ControlPath, measures: Sequence[Measure], baseline: float, horizon: float, years: int
) -> np.ndarray:
    """Exact integral of the (priced) abatement rate over each year (t in (k-1, k]).

    The reduction is linear in t between the path's breakpoints; the rate is linear in the
    reduction between 0 and the cumulative capacities. Cutting [0, horizon] at the breakpoints,
    the year boundaries and the times where the reduction crosses 0 or a cumulative capacity
    leaves pieces on which the rate is linear in t, so the trapezoid rule is exact on each.
    """
    pieces = _linear_pieces(path, horizon)
    a, b, ua, ub = pieces.T
    ra, rb = baseline - ua, baseline - ub
    capacities = np.cumsum([m.capacity for m in sorted(measures, key=lambda m: m.unit_cost)])
    levels = np.concatenate([[0.0], capacities])
    moving = rb != ra
    with np.errstate(divide="ignore", invalid="ignore"):
        s = (levels[None, :] - ra[:, None]) / (rb - ra)[:, None]
    crossing = moving[:, None] & (s > 0) & (s < 1)
    crossings = (a[:, None] + s * (b - a)[:, None])[crossing]
    cuts = np.unique(
        np.concatenate([a, b, np.arange(years + 1, dtype=float), [horizon], crossings])
    )
    cuts = cuts[(cuts >= 0) & (cuts <= horizon)]
    lo, hi = cuts[:-1], cuts[1:]
    mid = (lo + hi) / 2
    r_lo = np.maximum(baseline - path(lo), 0.0)  # after any jump at lo
    r_hi = np.maximum(baseline - path.left_limit(hi), 0.0)  # before any jump at hi
    cost = (hi - lo) * (_priced_rate(r_lo, measures) + _priced_rate(r_hi, measures)) / 2
    year = np.clip(np.floor(mid).astype(int), 0, years - 1)
    by_year = np.zeros(years)
    np.add.at(by_year, year, cost)
    return by_year


def _capacity_breach(
    path: ControlPath,
    measures: Sequence[Measure],
    *,
    baseline: float,
    horizon: float,
    currency: str,
    unit: str,
) -> Infeasibility | None:
    """The first time the reduction exceeds the summed capacity, with a sentence saying how much."""
    capacity = abatement_capacity(measures)
    threshold = capacity * (1 + CAPACITY_REL_TOL)
    when = None
    for a, b, ua, ub in path.pieces(horizon):
        ra, rb = baseline - ua, baseline - ub
        if b > a and ra > threshold:
            when = a
        elif rb > threshold:
            share = 0.0 if b == a else min(max((capacity - ra) / (rb - ra), 0.0), 1.0)
            when = a + share * (b - a)
        if when is not None:
            break
    if when is None:
        return None
    needed = baseline - path.minimum(horizon)
    dearest = max((m.unit_cost for m in measures), default=0.0)
    if measures:
        supply = f"all measures together remove at most {_with_unit(capacity, unit)}"
    else:
        supply = "there are no abatement measures"
    per = f" per {unit}" if unit else " per unit"
    return Infeasibility(
        time=when,
        limit=LIMIT_CAPACITY,
        message=(
            f"from year {when:g} the load reduction needed exceeds the abatement capacity: "
            f"up to {_with_unit(needed, unit)} below the baseline {_with_unit(baseline, unit)}, "
            f"but {supply}; the excess is costed at the dearest unit cost, "
            f"{dearest:g} {currency} a year{per}"
        ),
    )


def years_by_calendar_year(intervals: Sequence[tuple[float, float]], horizon: float) -> np.ndarray:
    """Years of each calendar year k = 1 .. ceil(horizon) (t in (k-1, k]) spent inside the
    (merged, so never double-counted) intervals, cut to [0, horizon]."""
    years = _year_count(horizon)
    merged: list[list[float]] = []
    for start, end in sorted((max(s, 0.0), min(e, horizon)) for s, e in intervals):
        if end <= start:
            continue
        if merged and start <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], end)
        else:
            merged.append([start, end])
    k = np.arange(1, years + 1, dtype=float)
    inside = np.zeros(years)
    for start, end in merged:
        inside += np.clip(np.minimum(end, k) - np.maximum(start, k - 1), 0.0, None)
    return inside


def damage_present_value(costs: Costs, not_met_by_year: np.ndarray) -> np.ndarray:
    """Present value of the damages: ``costs.damage_per_year`` for each year not meeting the
    target, year k (row k - 1 of ``not_met_by_year``, (years,) or (years, members)) discounted
    by (1 + i)^-k (end-of-year convention)."""
    years = not_met_by_year.shape[0]
    discount = (1.0 + costs.discount_rate) ** -np.arange(1.0, years + 1.0)
    weighted = discount.reshape(-1, *([1] * (not_met_by_year.ndim - 1))) * not_met_by_year
    # A plain sum down the years (no BLAS): each member's value is independent of the others.
    return costs.damage_per_year * weighted.sum(axis=0)


def schedule_costs(
    path: ControlPath,
    costs: Costs,
    *,
    baseline: float,
    horizon: float,
    one_off: Sequence[tuple[float, float]] = (),
    running: Sequence[tuple[float, float, float]] = (),
    not_met_by_year: np.ndarray | None = None,
    unit: str = "",
) -> CostBreakdown:
    """Abatement, damage and action costs of a control path over [0, horizon] (years).

    - abatement: the exact integral of ``abatement_cost_rate`` of the reduction
      max(0, baseline - u(t)) (control units). A reduction beyond the summed capacity of the
      measures sets ``infeasible`` (first time, amounts) and the excess is costed at the dearest
      measure's unit cost so the numbers stay finite (at 0 when there are no measures).
    - damage: ``costs.damage_per_year`` for each year not meeting the target, by calendar year
      (``not_met_by_year``, years; see :func:`years_by_calendar_year`).
    - actions: the one-off (time, cost) items at times in [0, horizon]; later ones fall outside;
      and the running costs of in-lake measures, (start, end, cost per year) items, paid for the
      years of each calendar year inside [start, end) (:func:`years_by_calendar_year`) and
      discounted as that year's flows.

    Discounting follows the module's end-of-year convention with ``costs.discount_rate``.
    """
    years = _year_count(horizon)
    measures = list(costs.measures)
    abatement = _abatement_by_year(path, measures, baseline, horizon, years)
    damage = np.zeros(years)
    if not_met_by_year is not None:
        damage = costs.damage_per_year * np.asarray(not_met_by_year, dtype=float)[:years]
    yearly = abatement + damage
    actions = [(float(t), float(c)) for t, c in one_off if 0.0 <= t <= horizon]
    running_by_year = np.zeros(years)
    for start, end, rate in running:
        running_by_year += rate * years_by_calendar_year([(start, end)], horizon)
    growth = 1.0 + costs.discount_rate
    discount = growth ** -np.arange(1.0, years + 1.0)
    present_value = float(np.sum(yearly * discount))
    present_value += sum(c * growth**-t for t, c in actions)
    if running:
        present_value += float(np.sum(running_by_year * discount))
    abatement_total = float(abatement.sum())
    damage_total = float(damage.sum())
    actions_total = float(sum(c for _, c in actions)) + float(running_by_year.sum())
    yearly.setflags(write=False)
    return CostBreakdown(
        currency=costs.currency,
        yearly=yearly,
        abatement_total=abatement_total,
        damage_total=damage_total,
        actions_total=actions_total,
        total=abatement_total + damage_total + actions_total,
        present_value=present_value,
        infeasible=_capacity_breach(
            path, measures, baseline=baseline, horizon=horizon, currency=costs.currency, unit=unit
        ),
    )


def scenario_costs(
    scenario, path: ControlPath, timeline, not_met_by_year: np.ndarray | None = None
) -> CostBreakdown:
    """Costs of a control path and its actions under a scenario's cost block (zeros when it has
    none); reductions are measured from ``costs.baseline`` or else the current control."""
    horizon = scenario.simulation.horizon
    costs = scenario.costs
    if costs is None:
        return no_costs(horizon)
    return schedule_costs(
        path,
        costs,
        baseline=scenario.current_control if costs.baseline is None else costs.baseline,
        horizon=horizon,
        one_off=timeline.one_off_costs,
        running=timeline.running_costs,
        not_met_by_year=not_met_by_year,
        unit=scenario.control.unit,
    )
