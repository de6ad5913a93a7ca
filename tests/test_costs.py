"""Tests for the abatement cost curve, damages and present value of a schedule."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.integrate import quad

from planner.costs import (
    abatement_capacity,
    abatement_cost_rate,
    no_costs,
    schedule_costs,
    years_by_calendar_year,
)
from planner.scenario import Costs, Measure, PathSchedule
from planner.schedules import ControlPath, control_path

MEASURES = [
    Measure(name="wetlands", capacity=2.0, unit_cost=12.0),
    Measure(name="buffer strips", capacity=1.5, unit_cost=5.0),
    Measure(name="treatment plant", capacity=3.0, unit_cost=40.0),
]
"""Cumulative capacities cheapest first: 1.5, 3.5, 6.5 (t P / yr)."""


def _costs(rate: float = 0.0, damage: float = 0.0, measures=MEASURES) -> Costs:
    return Costs(
        currency="EUR", discount_rate=rate, damage_per_year=damage, measures=list(measures)
    )


def _constant(value: float) -> ControlPath:
    return ControlPath(np.array([0.0]), np.array([value]))


# --------------------------------------------------------------------------------------------
# present value


@pytest.mark.parametrize("years", [1, 5, 20, 37])
@pytest.mark.parametrize("rate", [0.01, 0.05, 0.12])
def test_constant_reduction_is_an_ordinary_annuity(years: int, rate: float) -> None:
    """Annuity formula, present value of an ordinary annuity; e.g. Newnan, Eschenbach & Lavelle,
    Engineering Economic Analysis, uniform series present worth factor:
    P = C (1 - (1 + i)^-n) / i for a cost C at the end of each of n years."""
    reduction = 0.7  # within the cheapest measure's 1.5
    breakdown = schedule_costs(
        _constant(10.0 - reduction), _costs(rate), baseline=10.0, horizon=years
    )
    yearly = 5.0 * reduction
    assert breakdown.present_value == pytest.approx(
        yearly * (1 - (1 + rate) ** -years) / rate, rel=1e-12
    )
    assert breakdown.yearly == pytest.approx(np.full(years, yearly), rel=1e-12)
    assert breakdown.total == pytest.approx(yearly * years, rel=1e-12)
    assert breakdown.infeasible is None


def test_zero_discount_rate_present_value_is_the_total() -> None:
    """Worked by hand from the module's convention: with i = 0 nothing is discounted."""
    path = control_path(PathSchedule(kind="path", name="p", points=[(4, 5), (9, 8)]), current=10)
    breakdown = schedule_costs(
        path,
        _costs(0.0, damage=30.0),
        baseline=10.0,
        horizon=12.5,
        one_off=[(3.0, 100.0)],
        not_met_by_year=years_by_calendar_year([(0.0, 6.0)], 12.5),
    )
    assert breakdown.yearly.size == 13
    assert breakdown.present_value == pytest.approx(breakdown.total, rel=1e-12)
    assert breakdown.total == pytest.approx(
        breakdown.abatement_total + breakdown.damage_total + breakdown.actions_total, rel=1e-12
    )
    assert breakdown.total > breakdown.actions_total + breakdown.damage_total > 0


# --------------------------------------------------------------------------------------------
# exact abatement integral


def _quad_rate(path: ControlPath, baseline: float, a: float, b: float) -> float:
    def integrand(t: float) -> float:
        return float(abatement_cost_rate(np.array(max(baseline - path(t), 0.0)), MEASURES))

    inside = [float(t) for t in path.kinks(b) if a < t < b]
    value, _ = quad(integrand, a, b, points=inside or None, epsabs=0.0, epsrel=1e-13, limit=500)
    return value


@pytest.mark.parametrize(
    "points",
    [
        [(3.3, 6.5), (7.7, 4.0), (12.2, 9.5)],
        [(0.0, 9.0), (2.5, 4.2), (6.0, 4.2), (11.1, 8.7), (13.0, 10.6)],
    ],
)
def test_abatement_integral_matches_quadrature(points) -> None:
    """Reference library: scipy.integrate.quad of the cost rate, with points= at the path's
    breakpoints; the path crosses several cumulative capacities (and 0) on its ramps."""
    baseline = 10.0
    horizon = 15.5
    path = control_path(PathSchedule(kind="path", name="p", points=points), current=10.0)
    breakdown = schedule_costs(path, _costs(0.04), baseline=baseline, horizon=horizon)
    assert breakdown.abatement_total == pytest.approx(
        _quad_rate(path, baseline, 0.0, horizon), rel=1e-9
    )
    for k, cost in enumerate(breakdown.yearly, start=1):
        expected = _quad_rate(path, baseline, k - 1.0, min(k, horizon))
        assert cost == pytest.approx(expected, rel=1e-9, abs=1e-12)
    assert breakdown.infeasible is None


# --------------------------------------------------------------------------------------------
# the cost curve


reductions = st.lists(st.floats(-2.0, 8.0, allow_nan=False), min_size=1, max_size=20)


@settings(max_examples=60, deadline=None)
@given(reductions, st.permutations(MEASURES))
def test_cheapest_first_order_does_not_depend_on_listing(values, shuffled) -> None:
    """Worked by hand from the definition: measures are filled by unit cost, not list order."""
    r = np.array(values)
    assert abatement_cost_rate(r, shuffled) == pytest.approx(
        abatement_cost_rate(r, MEASURES), rel=1e-12, abs=1e-12
    )


measures_st = st.lists(
    st.builds(
        Measure,
        name=st.just("m"),
        capacity=st.floats(0.01, 5.0),
        unit_cost=st.floats(0.0, 100.0),
    ),
    min_size=1,
    max_size=6,
)


@settings(max_examples=60, deadline=None)
@given(measures_st, st.floats(0.0, 1.0))
def test_rate_is_convex_and_non_decreasing(measures, share) -> None:
    """Worked by hand from the definition: a cheapest-first supply curve has non-decreasing
    marginal cost, hence is convex up to the summed capacity; it is 0 at and below zero
    reduction, and flat beyond the summed capacity."""
    full = abatement_capacity(measures)
    r = np.linspace(-1.0, share * full, 401)
    rate = abatement_cost_rate(r, measures)
    scale = 1e-9 * (1.0 + float(np.max(np.abs(rate))))
    assert np.all(np.diff(rate) >= -scale)
    assert np.all(np.diff(rate, 2) >= -scale)
    assert np.all(rate[r <= 0] == 0)
    at_full = abatement_cost_rate(np.array([full, full + 1.0]), measures)
    assert at_full[1] == pytest.approx(at_full[0], rel=1e-12)
    assert at_full[0] == pytest.approx(sum(m.capacity * m.unit_cost for m in measures), rel=1e-9)


def test_rate_fills_measures_cheapest_first() -> None:
    """Worked by hand from the definition: 1.5 at 5, 2 at 12, then 3 at 40."""
    r = np.array([0.0, 1.0, 1.5, 2.5, 3.5, 5.0, 6.5])
    expected = [0, 5, 7.5, 7.5 + 12, 7.5 + 24, 31.5 + 60, 31.5 + 120]
    assert abatement_cost_rate(r, MEASURES) == pytest.approx(expected, rel=1e-12)
    assert abatement_capacity(MEASURES) == 6.5


# --------------------------------------------------------------------------------------------
# beyond capacity


def test_reduction_beyond_capacity_is_infeasible_from_the_crossing() -> None:
    """Worked by hand from the definition: reduction t (t P / yr) on a ramp from 10 to 0 over
    10 years exceeds the capacity 6.5 from t = 6.5."""
    path = control_path(PathSchedule(kind="path", name="p", points=[(10, 0)]), current=10)
    breakdown = schedule_costs(path, _costs(), baseline=10.0, horizon=20, unit="t P / yr")
    found = breakdown.infeasible
    assert found is not None
    assert found.limit == "abatement capacity"
    assert found.time == pytest.approx(6.5, rel=1e-12)
    assert "10 t P / yr" in found.message and "6.5 t P / yr" in found.message
    assert "40 EUR" in found.message
    assert math.isfinite(breakdown.total)
    inside = schedule_costs(path, _costs(), baseline=10.0, horizon=6.4)
    assert inside.infeasible is None


def test_excess_is_priced_at_the_dearest_unit_cost() -> None:
    """Worked by hand from the definition: reduction 7.5 against capacity 6.5 for one year costs
    the full curve 151.5 plus 1 x 40."""
    breakdown = schedule_costs(_constant(2.5), _costs(), baseline=10.0, horizon=1)
    assert breakdown.abatement_total == pytest.approx(151.5 + 40.0, rel=1e-12)
    assert breakdown.infeasible is not None and breakdown.infeasible.time == 0


def test_jump_beyond_capacity_is_reported_at_the_jump() -> None:
    """Worked by hand from the definition: a jump at year 3 to a reduction of 8."""
    path = control_path(PathSchedule(kind="path", name="p", points=[(3, 10), (3.5, 2)]), current=10)
    jumped = ControlPath(np.array([0.0, 3.0, 3.0]), np.array([10.0, 10.0, 2.0]))
    assert schedule_costs(jumped, _costs(), baseline=10.0, horizon=5).infeasible.time == 3
    ramp = schedule_costs(path, _costs(), baseline=10.0, horizon=5).infeasible
    assert ramp.time == pytest.approx(3 + 0.5 * 6.5 / 8, rel=1e-12)


# --------------------------------------------------------------------------------------------
# one-off costs and damages


@pytest.mark.parametrize("when", [0.0, 2.5, 7.0])
def test_one_off_is_discounted_from_its_time(when: float) -> None:
    """Worked by hand from the module's convention: a one-off at time t counts (1 + i)^-t."""
    breakdown = schedule_costs(
        _constant(10.0),
        _costs(0.07),
        baseline=10.0,
        horizon=8,
        one_off=[(when, 1000.0), (9.0, 5.0)],
    )
    assert breakdown.present_value == pytest.approx(1000.0 * 1.07**-when, rel=1e-12)
    assert breakdown.actions_total == 1000.0
    assert breakdown.total == 1000.0


def test_damage_counts_years_inside_the_intervals_once() -> None:
    """Worked by hand from the definition: (0.5, 2.25) and (2, 3) merge into (0.5, 3);
    (3.5, 9) is cut at the horizon 4."""
    breakdown = schedule_costs(
        _constant(10.0),
        _costs(0.05, damage=100.0),
        baseline=10.0,
        horizon=4,
        not_met_by_year=years_by_calendar_year([(2.0, 3.0), (0.5, 2.25), (3.5, 9.0)], 4),
    )
    assert breakdown.yearly == pytest.approx([50.0, 100.0, 100.0, 50.0], rel=1e-12)
    assert breakdown.damage_total == pytest.approx(300.0, rel=1e-12)
    expected = sum(c * 1.05**-k for k, c in enumerate([50.0, 100.0, 100.0, 50.0], start=1))
    assert breakdown.present_value == pytest.approx(expected, rel=1e-12)


def test_no_costs_is_all_zero() -> None:
    """Worked by hand from the definition: one zero per year, partial last year included."""
    empty = no_costs(7.2, currency="EUR")
    assert empty.yearly.shape == (8,) and not empty.yearly.any()
    assert empty.total == 0 and empty.present_value == 0 and empty.infeasible is None
    with pytest.raises(ValueError):
        no_costs(0.0)
