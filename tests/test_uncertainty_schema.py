"""The ``[uncertainty]`` block: validation messages at exact field paths, truncation mass,
and the demo's round trip."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import pytest
from scipy import stats

from planner.errors import InputError
from planner.scenario import (
    NormalPrior,
    TriangularPrior,
    load_scenario,
    parse_scenario,
    scenario_from_data,
    scenario_to_toml,
)

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"


def _with(uncertainty: dict) -> dict:
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data["uncertainty"] = uncertainty
    return data


def _problems(uncertainty: dict) -> dict[str, str]:
    with pytest.raises(InputError) as caught:
        scenario_from_data(_with(uncertainty), "lake.toml")
    for problem in caught.value.problems:
        assert problem.source == "lake.toml"
    return {problem.field: problem.reason for problem in caught.value.problems}


def _normal(parameter: str, **extra) -> dict:
    return {"parameter": parameter, "kind": "normal", "mean": 6.0, "sd": 0.3, **extra}


def test_demo_has_an_uncertainty_block_and_round_trips():
    """The demo's block loads, and TOML written from it reads back to an equal scenario."""
    scenario = load_scenario(ALDER)
    assert scenario.uncertainty is not None
    assert {p.parameter for p in scenario.uncertainty.priors} == {"r", "m", "s"}
    assert parse_scenario(scenario_to_toml(scenario)) == scenario


@pytest.mark.parametrize(
    "uncertainty, field, words",
    [
        ({"members": 0}, "uncertainty.members", "greater than or equal to 1"),
        ({"seed": -1}, "uncertainty.seed", "greater than or equal to 0"),
        ({"sample_size": 10}, "uncertainty.sample_size", "unknown field"),
        ({"priors": [_normal("r", sd=-0.1)]}, "uncertainty.priors.0.sd", "greater than"),
        ({"priors": [_normal("r", spread=1)]}, "uncertainty.priors.0.spread", "unknown field"),
        (
            {"priors": [{"parameter": "r", "kind": "gamma", "shape": 2.0}]},
            "uncertainty.priors.0",
            "'normal', 'lognormal', 'uniform', 'triangular'",
        ),
        (
            {"priors": [{"parameter": "r", "kind": "uniform", "low": 6.0, "high": 5.0}]},
            "uncertainty.priors.0.high",
            "at least low",
        ),
        (
            {"priors": [{"parameter": "r", "kind": "triangular", "low": 5, "mode": 4, "high": 7}]},
            "uncertainty.priors.0.mode",
            "at least low",
        ),
        (
            {"priors": [{"parameter": "r", "kind": "lognormal", "median": 0.0, "sigma": 0.1}]},
            "uncertainty.priors.0.median",
            "greater than 0",
        ),
        ({"priors": [_normal("r", lower=7.0, upper=6.5)]}, "uncertainty.priors.0.upper", "above"),
        (
            {"priors": [_normal("r", lower=9.0)]},
            "uncertainty.priors.0.lower",
            "keeps only",
        ),
        (
            {"load_variability": {"cv": 0.2, "sigma": 0.2}},
            "uncertainty.load_variability.cv",
            "either sigma or cv",
        ),
        (
            {"load_variability": {"autocorrelation": 0.5}},
            "uncertainty.load_variability.sigma",
            "give sigma",
        ),
        (
            {"load_variability": {"cv": 0.2, "autocorrelation": 1.0}},
            "uncertainty.load_variability.autocorrelation",
            "less than 1",
        ),
        ({"process_noise": {"P": -0.1}}, "uncertainty.process_noise.P", "greater than"),
        ({"steps_per_year": 0}, "uncertainty.steps_per_year", "greater than or equal to 1"),
    ],
)
def test_field_errors_name_the_exact_path(uncertainty, field, words):
    """Each mistake is reported at its dotted path with a reason (DESIGN.md section 5: a
    message names file, field and reason)."""
    problems = _problems(uncertainty)
    assert field in problems, problems
    assert words in problems[field]


@pytest.mark.parametrize(
    "priors, field, words",
    [
        ([_normal("L", lower=0.0)], "uncertainty.priors.0.parameter", "load_variability"),
        ([_normal("k", lower=0.0)], "uncertainty.priors.0.parameter", "not a model parameter"),
        (
            [_normal("r", lower=0.0), _normal("r", lower=0.0)],
            "uncertainty.priors.1.parameter",
            "same parameter as uncertainty.priors.0",
        ),
        ([_normal("r")], "uncertainty.priors.0.lower", "physical bound"),
        (
            [{"parameter": "q", "kind": "lognormal", "median": 8.0, "sigma": 0.1}],
            "uncertainty.priors.0.lower",
            "set lower to 1",
        ),
        (
            [{"parameter": "s", "kind": "normal", "mean": 0.0, "sd": 0.0}],
            "uncertainty.priors.0.mean",
            "must be greater than 0",
        ),
        (
            [{"parameter": "s", "kind": "uniform", "low": -0.5, "high": 1.0}],
            "uncertainty.priors.0.lower",
            "physical bound",
        ),
    ],
)
def test_links_to_the_model_are_checked(priors, field, words):
    """Priors name real, non-control parameters once each and stay physical; the recycling
    model's bounds come from its specification (Carpenter, Ludwig & Brock 1999)."""
    problems = _problems({"priors": priors})
    assert field in problems, problems
    assert words in problems[field]


def test_process_noise_names_model_variables():
    problems = _problems({"process_noise": {"X": 0.1}})
    assert "not a model variable" in problems["uncertainty.process_noise.X"]


def test_every_problem_is_reported_at_once():
    problems = _problems(
        {"priors": [_normal("L", lower=0.0), _normal("zz")], "process_noise": {"Q": 0.1}}
    )
    assert set(problems) == {
        "uncertainty.priors.0.parameter",
        "uncertainty.priors.1.parameter",
        "uncertainty.process_noise.Q",
    }


def test_bounded_prior_with_a_physical_lower_end_is_accepted():
    scenario = scenario_from_data(
        _with({"priors": [_normal("s", mean=1.2, sd=0.2, lower=0.0)], "members": 10})
    )
    assert scenario.uncertainty.members == 10


def test_truncation_mass_matches_scipy():
    """Probability kept by [lower, upper] against scipy.stats.norm and scipy.stats.triang."""
    normal = NormalPrior(kind="normal", parameter="r", mean=6.0, sd=0.3, lower=5.8, upper=6.9)
    expected = stats.norm.cdf(6.9, 6.0, 0.3) - stats.norm.cdf(5.8, 6.0, 0.3)
    assert normal.mass_within_bounds() == pytest.approx(expected, rel=1e-12)
    triangle = TriangularPrior(
        kind="triangular", parameter="r", low=1.0, mode=2.0, high=5.0, lower=1.5, upper=4.0
    )
    law = stats.triang(0.25, loc=1.0, scale=4.0)
    assert triangle.mass_within_bounds() == pytest.approx(law.cdf(4.0) - law.cdf(1.5), rel=1e-12)


def test_cv_gives_the_lognormal_sigma():
    """cv^2 = exp(sigma^2) - 1 for a lognormal factor (lognormal moments; Johnson, Kotz &
    Balakrishnan 1994, Continuous Univariate Distributions 1, ch. 14, from memory)."""
    scenario = scenario_from_data(_with({"load_variability": {"cv": 0.25}}))
    sigma = scenario.uncertainty.load_variability.sigma_log
    assert math.exp(sigma**2) - 1 == pytest.approx(0.25**2, rel=1e-12)
