"""In-lake measures from the catalogue: the aluminium longevity fitted to its published summaries,
draws that follow the catalogue's distributions, medians in one run and a draw per member in an
ensemble, repeat dosing, capital and running costs at present value, and errors that name the
field."""

from __future__ import annotations

import copy
import math
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize, stats

from planner.costs import scenario_costs
from planner.ensemble import VERDICTS, draw_measures, run_ensemble
from planner.equilibria import diagram_for
from planner.errors import InputError
from planner.measures import (
    ALUMINIUM,
    CATALOGUE,
    DEEP,
    HUSER_DEEP_SHARE,
    HUSER_LAKES,
    HUSER_LONGEST,
    HUSER_MEAN_ALL,
    HUSER_MEAN_DEEP,
    HUSER_MEAN_SHALLOW,
    HUSER_SHORTEST,
    HUSER_SIGMA,
    LONGEVITY_STEP,
    SHALLOW,
    whole_months,
)
from planner.outcomes import compare
from planner.scenario import scenario_from_data
from planner.schedules import action_timeline, control_path

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
ALUMINIUM_SCHEDULE = "Short cut with sediment P inactivation"


def _demo() -> dict:
    return tomllib.loads(DEMO.read_text(encoding="utf-8"))


def _aluminium(**fields) -> dict:
    """The demo's aluminium treatment as a catalogue measure (its start and cost)."""
    return {
        "kind": "in-lake-measure",
        "name": "Aluminium treatment",
        "measure": "aluminium",
        "lake_type": "shallow",
        "parameter": "r",
        "start": 2.0,
        "capital_cost": 450000.0,
        **fields,
    }


def _with_actions(*actions: dict, name: str = ALUMINIUM_SCHEDULE) -> dict:
    """The demo with only its aluminium schedule, carrying ``actions`` instead of its pulse."""
    data = _demo()
    schedule = copy.deepcopy(next(s for s in data["schedules"] if s["name"] == name))
    schedule["actions"] = list(actions)
    data["schedules"] = [schedule]
    return data


def _lognormal(mean: float, sigma: float):
    """scipy's lognormal with the given mean: median = mean exp(-sigma^2 / 2)."""
    return stats.lognorm(sigma, scale=mean * math.exp(-sigma * sigma / 2))


# ---------------------------------------------------------------------------------------------
# The fit to the published summaries


def test_aluminium_longevity_reproduces_huser_2016():
    """Huser et al. 2016 (Water Research 97:122-132, abstract): 114 lakes, longevity averaged 11
    years (range 0-45), 5.7 years in shallow polymictic and 21 years in deep stratified lakes
    (both means). The catalogue's lognormals, read back by scipy.stats.lognorm: each type's mean
    is the published mean; mixed in the derived share of deep lakes they average 11 years; the
    log-spread solved again here with scipy.optimize.brentq from the lower end of the range (0
    whole years read as half a year, the 1/115 quantile: Weibull plotting position 1/(n+1),
    common practice, no source) agrees with the catalogue's; the largest of 114 lakes (the
    114/115 quantile) lies above the published 45 years, as monitoring records that ended
    while lakes still improved imply (the paper's extrapolated mean rose to 15 years)."""
    shallow = ALUMINIUM.figures(SHALLOW).longevity
    deep = ALUMINIUM.figures(DEEP).longevity
    laws = {
        SHALLOW: stats.lognorm(shallow.sigma, scale=shallow.median),
        DEEP: stats.lognorm(deep.sigma, scale=deep.median),
    }
    assert laws[SHALLOW].mean() == pytest.approx(5.7, rel=1e-12)
    assert laws[DEEP].mean() == pytest.approx(21.0, rel=1e-12)
    w = HUSER_DEEP_SHARE
    assert (1 - w) * laws[SHALLOW].mean() + w * laws[DEEP].mean() == pytest.approx(11.0)

    def mixture_cdf(x: float, sigma: float) -> float:
        low = _lognormal(HUSER_MEAN_SHALLOW, sigma).cdf(x)
        high = _lognormal(HUSER_MEAN_DEEP, sigma).cdf(x)
        return (1 - w) * low + w * high

    n = HUSER_LAKES
    sigma = optimize.brentq(lambda s: mixture_cdf(HUSER_SHORTEST, s) - 1 / (n + 1), 0.05, 5.0)
    assert pytest.approx(sigma, abs=5e-5) == HUSER_SIGMA
    largest = optimize.brentq(lambda x: mixture_cdf(x, HUSER_SIGMA) - n / (n + 1), 1.0, 1e4)
    assert largest > HUSER_LONGEST
    assert HUSER_MEAN_ALL == 11.0 and (HUSER_MEAN_SHALLOW, HUSER_MEAN_DEEP) == (5.7, 21.0)
    # the medians a deterministic run uses, by lake type (scipy's, to the month)
    for lake_type, law in laws.items():
        action = _aluminium(lake_type=lake_type)
        schedule = _with_actions(action)["schedules"][0]
        scenario = scenario_from_data({**_demo(), "schedules": [schedule]})
        (pulse,) = action_timeline(scenario.schedules[0]).pulses
        assert pulse.duration == pytest.approx(round(law.median() * 12) / 12, abs=1e-12)
        assert abs(pulse.duration - law.median()) <= LONGEVITY_STEP / 2


def test_effect_medians_are_scipys():
    """One run uses the median of the effect's distribution (scipy.stats.triang for aluminium,
    scipy.stats.uniform for oxygenation)."""
    data = _demo()
    data["lake"]["mean_depth"] = "9 m"
    schedule = copy.deepcopy(data["schedules"][3])
    schedule["actions"] = [
        _aluminium(lake_type="deep"),
        {
            "kind": "in-lake-measure",
            "measure": "hypolimnetic-oxygenation",
            "lake_type": "deep",
            "parameter": "r",
            "start": 1.0,
            "longevity_years": 12.0,
            "running_cost": 20000.0,
        },
    ]
    data["schedules"] = [schedule]
    timeline = action_timeline(scenario_from_data(data).schedules[0])
    effect = ALUMINIUM.figures(DEEP).effect
    triangle = stats.triang(
        (effect.mode - effect.low) / (effect.high - effect.low),
        loc=effect.low,
        scale=effect.high - effect.low,
    )
    oxygen = CATALOGUE["hypolimnetic-oxygenation"].figures(DEEP).effect
    flat = stats.uniform(oxygen.low, oxygen.high - oxygen.low)
    aluminium, oxygenation = timeline.pulses
    assert aluminium.factor == pytest.approx(triangle.median(), rel=1e-12)
    assert oxygenation.factor == pytest.approx(flat.median(), rel=1e-12)
    assert (oxygenation.start, oxygenation.duration) == (1.0, 12.0)


# ---------------------------------------------------------------------------------------------
# Draws per member


def test_member_draws_follow_the_catalogue():
    """20000 members' draws against scipy.stats: effect factors by the Kolmogorov-Smirnov test
    (triang); longevities, counted in whole months, by their distribution at the month
    boundaries (the share drawn at most k months is the lognormal's CDF at k + 1/2 months),
    each within 5 binomial standard errors; draws depend on (seed, member) only."""
    n = 20000
    scenario = scenario_from_data(_with_actions(_aluminium()))
    timeline = action_timeline(scenario.schedules[0])
    (effect, longevity) = draw_measures(7, timeline, 0, n)[0]
    law = _lognormal(HUSER_MEAN_SHALLOW, HUSER_SIGMA)
    shape = ALUMINIUM.figures(SHALLOW).effect
    triangle = stats.triang(0.25 / 0.75, loc=shape.low, scale=shape.high - shape.low)
    assert (shape.low, shape.mode, shape.high) == (0.05, 0.3, 0.8)
    assert stats.kstest(effect, triangle.cdf).pvalue > 1e-3
    assert np.allclose(longevity * 12, np.round(longevity * 12), atol=1e-9)
    for months in (6, 12, 24, 45, 60, 120, 240):
        share = np.mean(longevity <= months / 12 + 1e-9)
        expected = law.cdf((months + 0.5) / 12)
        assert abs(share - expected) <= 5 * math.sqrt(expected * (1 - expected) / n), months
    part = draw_measures(7, timeline, 1500, 2600)[0]
    assert np.array_equal(part[0], effect[1500:2600])
    assert np.array_equal(part[1], longevity[1500:2600])
    other = draw_measures(8, timeline, 0, 100)[0]
    assert not np.array_equal(other[1], longevity[:100])


def test_fixed_values_are_certain_and_others_drawn():
    """A value fixed in the action is every member's; only the other one is drawn; an action
    with both fixed is not drawn at all (common practice, no source: fixed means certain)."""
    scenario = scenario_from_data(_with_actions(_aluminium(effect=0.4)))
    timeline = action_timeline(scenario.schedules[0])
    effect, longevity = draw_measures(3, timeline, 0, 500)[0]
    assert effect == 0.4 and np.unique(longevity).size > 20
    certain = scenario_from_data(_with_actions(_aluminium(effect=0.4, longevity_years=6.0)))
    assert draw_measures(3, action_timeline(certain.schedules[0]), 0, 500) == {}


def test_a_measure_changes_no_other_draw():
    """The measures draw from a stream of their own: adding a schedule with an uncertain
    aluminium treatment leaves every per-member number of the other schedules bit-identical
    (the demo's priors and load swings)."""
    data = _demo()
    plain = data["schedules"][:2]
    treated = copy.deepcopy(data["schedules"][3])
    treated["actions"] = [_aluminium()]
    data["uncertainty"]["members"] = 300
    data["schedules"] = plain
    alone = run_ensemble(scenario_from_data(data))
    data["schedules"] = [*plain, treated]
    both = run_ensemble(scenario_from_data(data))
    for a, b in zip(alone.schedules, both.schedules[:2], strict=True):
        assert np.array_equal(a.verdicts, b.verdicts)
        assert np.array_equal(a.meets_target_at, b.meets_target_at, equal_nan=True)
        assert np.array_equal(a.present_value, b.present_value)


def test_each_member_runs_as_one_run_with_its_own_draw():
    """Members with their own effect and longevity give the verdict and target time of one
    deterministic run (compare, scipy's LSODA) with those values fixed: the per-member measure
    is the same model as the one-run measure (one engine, one answer)."""
    data = _with_actions(_aluminium())
    data.pop("uncertainty")
    scenario = scenario_from_data(data)
    timeline = action_timeline(scenario.schedules[0])
    members = 40
    effect, longevity = draw_measures(11, timeline, 0, members)[0]
    diagram = diagram_for(scenario)
    summary = run_ensemble(scenario, members=members, seed=11, diagram=diagram).schedules[0]
    assert 0 < summary.recovered < members  # short and long doses both drawn
    for i in range(0, members, 4):
        action = _aluminium(effect=float(effect[i]), longevity_years=float(longevity[i]))
        if action["longevity_years"] == 0.0:
            continue  # a dose that never works: no one-run action can say so
        fixed = scenario_from_data(_with_actions(action))
        outcome = compare(fixed, diagram=diagram).outcomes[0]
        assert VERDICTS[summary.verdicts[i]] is outcome.verdict, i
        if outcome.meets_target_at is None:
            assert np.isnan(summary.meets_target_at[i])
        else:
            assert summary.meets_target_at[i] == pytest.approx(outcome.meets_target_at, abs=1e-3)


# ---------------------------------------------------------------------------------------------
# The acceptance test of the issue


def test_uncertain_aluminium_longevity_makes_recovery_uncertain():
    """Issue acceptance, on the Alder Mere demo with its priors and load swings (2000 members):
    its aluminium schedule with the treatment's effect and longevity certain (the demo's factor
    0.4 for 6 years) recovers in every member, P(recovery) = 1; with the longevity drawn from
    the catalogue's shallow-lake distribution (Huser et al. 2016, Water Research 97:122-132: a
    mean of 5.7 years, some treatments lasting under a year), and with effect and longevity
    both drawn, P(recovery) lies strictly between 0 and 1, its Wilson interval too."""
    certain = run_ensemble(
        scenario_from_data(_with_actions(_aluminium(effect=0.4, longevity_years=6.0)))
    )
    assert certain.schedules[0].p_recovered == 1.0
    for fields in ({"effect": 0.4}, {}):
        scenario = scenario_from_data(_with_actions(_aluminium(**fields)))
        summary = run_ensemble(scenario).schedules[0]
        assert summary.members == 2000
        low, high = summary.interval
        assert 0.0 < low <= summary.p_recovered <= high < 1.0, fields
        assert compare(scenario).outcomes[0].recovered  # the median treatment works


# ---------------------------------------------------------------------------------------------
# Dosing and costs


def test_repeat_doses_merge_when_they_overlap():
    """Worked by hand: doses at 2, 4, 6 lasting 3 years work on [2, 9) as one stretch (no
    compounding); doses at 2, 12 lasting 3 years on [2, 5) and [12, 15)."""
    overlapping = _aluminium(effect=0.5, longevity_years=3.0, doses=3, every_years=2.0)
    apart = _aluminium(effect=0.5, longevity_years=3.0, doses=2, every_years=10.0)
    for action, stretches in ((overlapping, [(2.0, 7.0)]), (apart, [(2.0, 3.0), (12.0, 3.0)])):
        timeline = action_timeline(scenario_from_data(_with_actions(action)).schedules[0])
        assert [(p.start, p.duration) for p in timeline.pulses] == stretches
        assert timeline.multipliers(8.9)["r"] == (0.5 if len(stretches) == 1 else 1.0)
        assert timeline.multipliers(13.0)["r"] == (1.0 if len(stretches) == 1 else 0.5)


def test_capital_and_running_costs_at_present_value():
    """Two doses at years 2 and 6 costing 1000 each, and 120 a year while the measure works,
    [2, 5.5) and [6, 9.5): by the end-of-year convention (a flow of year k, t in (k-1, k], is
    discounted by (1 + i)^-k; a one-off cost at t by (1 + i)^-t; present value of a future sum
    F (1 + i)^-n, Newnan, Engineering Economic Analysis, from memory), worked by hand at i = 3%:
    capital 1000 (1.03^-2 + 1.03^-6); running 120 in years 3-5 and 7-9, 60 in years 6 and 10."""
    action = _aluminium(
        effect=0.3,
        longevity_years=3.5,
        doses=2,
        every_years=4.0,
        capital_cost=1000.0,
        running_cost=120.0,
    )
    data = _with_actions(action)
    data["costs"]["damage_per_year"] = 0.0
    data["costs"]["measures"] = []
    scenario = scenario_from_data(data)
    schedule = scenario.schedules[0]
    path = control_path(schedule, current=scenario.current_control)
    with_measure = scenario_costs(scenario, path, action_timeline(schedule))
    data["schedules"][0]["actions"] = []
    bare = scenario_from_data(data)
    without = scenario_costs(bare, path, action_timeline(bare.schedules[0]))
    i = 0.03
    capital = 1000.0 * (1 + i) ** -2 + 1000.0 * (1 + i) ** -6
    years = {3: 120.0, 4: 120.0, 5: 120.0, 6: 60.0, 7: 120.0, 8: 120.0, 9: 120.0, 10: 60.0}
    running = sum(cost * (1 + i) ** -k for k, cost in years.items())
    assert with_measure.present_value - without.present_value == pytest.approx(
        capital + running, rel=1e-12
    )
    assert with_measure.actions_total == pytest.approx(2000.0 + sum(years.values()), rel=1e-12)


# ---------------------------------------------------------------------------------------------
# Errors name the field


def _problems(data: dict) -> list[tuple[str, str]]:
    with pytest.raises(InputError) as caught:
        scenario_from_data(data, "lake.toml")
    return [(p.field, p.reason) for p in caught.value.problems]


@pytest.mark.parametrize(
    "fields, field, words",
    [
        ({"measure": "alum"}, "measure", "not in the catalogue"),
        ({"lake_type": None}, "lake_type", "required field is missing"),
        ({"lake_type": "medium"}, "lake_type", "shallow"),
        ({"measure": "hypolimnetic-oxygenation"}, "lake_type", "suits only deep"),
        ({"measure": "hypolimnetic-oxygenation", "lake_type": "deep"}, "longevity_years", "run"),
        ({"doses": 3}, "every_years", "between the 3 doses"),
        ({"doses": 0}, "doses", "greater than or equal to 1"),
        ({"effect": -0.1}, "effect", "greater than or equal to 0"),
        ({"parameter": "L"}, "parameter", "the control"),
        ({"parameter": "x"}, "parameter", "not a model parameter"),
        ({"doses": 20, "every_years": 600.0}, "every_years", "last dose"),
    ],
)
def test_bad_measures_name_the_field(fields, field, words):
    """Each mistake is reported at schedules.0.actions.0.<field> with a reason in words
    (DESIGN.md section 5: the message names file, field and reason)."""
    action = {key: value for key, value in _aluminium(**fields).items() if value is not None}
    problems = _problems(_with_actions(action))
    assert any(
        f == f"schedules.0.actions.0.{field}" and words in reason for f, reason in problems
    ), problems


def test_a_fading_pulse_beside_an_uncertain_measure_does_not_depend_on_chunking():
    """A fading parameter pulse (evaluated over time for the members a step asks about) beside
    a measure whose longevity differs per member: each member's multiplier must be its own,
    whatever subset of members a step or a chunk holds. Runs in chunks of 1, 3 and all members
    give the same verdicts and nearly the same states (the ensemble's rule: results agree to the
    integration tolerance across chunkings; planner.ensemble module notes)."""
    pulse = {
        "kind": "parameter-pulse",
        "parameter": "s",
        "factor": 1.1,
        "start": 1.0,
        "duration": 2.0,
        "decay_years": 1.0,
    }
    scenario = scenario_from_data(_with_actions(_aluminium(), pulse))
    runs = [
        run_ensemble(scenario, members=7, seed=5, chunk_size=size, keep_trajectories=True)
        for size in (1, 3, 7)
    ]
    first = runs[0].schedules[0]
    assert first.members == 7
    for other in runs[1:]:
        assert np.array_equal(other.schedules[0].verdicts, first.verdicts)
        np.testing.assert_allclose(
            other.schedules[0].trajectories, first.trajectories, rtol=1e-5, atol=1e-8
        )


def test_member_multipliers_by_hand():
    """Worked by hand: doses at 2 and 10 working 3 or 9 years in two members, factor 0.5 and
    0.2: at year 6 only the long dose works (1, 0.2); at year 11 both (0.5, 0.2); for the
    second member alone the same values; the engine cuts at every start and end."""
    data = _with_actions(_aluminium(doses=2, every_years=8.0))
    timeline = action_timeline(scenario_from_data(data).schedules[0])
    members = timeline.for_members({0: (np.array([0.5, 0.2]), np.array([3.0, 9.0]))})
    assert np.array_equal(members.multipliers(6.0)["r"], [1.0, 0.2])
    assert np.array_equal(members.multipliers(11.0)["r"], [0.5, 0.2])
    assert np.array_equal(members.multipliers(6.0, np.array([1]))["r"], [0.2])
    assert np.array_equal(members.multipliers(np.array([6.0, 11.0]))["r"], [1.0, 0.2])
    assert list(members.kinks(40.0)) == [2.0, 5.0, 10.0, 11.0, 13.0, 19.0]


def test_whole_months():
    """Longevities are counted in whole months: 3.77 years is 45 months (3.75 years)."""
    assert whole_months(3.767) == pytest.approx(3.75, abs=1e-12)
    assert np.allclose(whole_months(np.array([0.01, 1.0, 1.05])), [0.0, 1.0, 13 / 12])
