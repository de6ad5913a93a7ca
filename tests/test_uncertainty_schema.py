"""The ``[uncertainty]`` block: validation messages at exact field paths, truncation mass,
and the demo's round trip."""

from __future__ import annotations

import math
import tomllib
from pathlib import Path

import numpy as np
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


def _joint(**changes) -> dict:
    joint = {
        "parameters": ["s", "r"],
        "scales": ["log", "log"],
        "centre": [1.2, 6.0],
        "covariance": [[0.01, 0.004], [0.004, 0.0025]],
    }
    return {**joint, **changes}


def test_joint_prior_loads_and_round_trips():
    """A joint prior beside an independent prior on another parameter loads, and TOML written
    from it reads back to an equal scenario."""
    m_prior = {"parameter": "m", "kind": "lognormal", "median": 4.0, "sigma": 0.04}
    scenario = scenario_from_data(
        _with({"priors": [m_prior], "joint": _joint(origin="a fit")}), "lake.toml"
    )
    joint = scenario.uncertainty.joint
    assert joint.parameters == ("s", "r") and joint.origin == "a fit"
    assert parse_scenario(scenario_to_toml(scenario)) == scenario


def test_joint_prior_accepts_a_singular_bootstrap_covariance():
    """numpy.cov of fewer replicates than parameters is singular, with eigenvalues that rounding
    may leave a little below zero (numerically positive semi-definite); it must load. A zero
    matrix (a point mass) loads too."""
    samples = np.log([[1.2, 6.0, 4.0], [1.3, 6.4, 3.9]])
    covariance = np.cov(samples, rowvar=False)
    assert np.linalg.matrix_rank(covariance) == 1
    joint = _joint(
        parameters=["s", "r", "m"],
        scales=["log"] * 3,
        centre=[1.25, 6.2, 3.95],
        covariance=covariance.tolist(),
    )
    assert scenario_from_data(_with({"joint": joint})).uncertainty.joint.parameters[2] == "m"
    point = _joint(covariance=[[0.0, 0.0], [0.0, 0.0]])
    assert scenario_from_data(_with({"joint": point})).uncertainty.joint.covariance[0][0] == 0.0


@pytest.mark.parametrize(
    "joint, priors, field, words",
    [
        (_joint(scales=["log"]), [], "uncertainty.joint.scales", "has 1 entries for 2"),
        (_joint(centre=[1.2]), [], "uncertainty.joint.centre", "has 1 entries for 2"),
        (_joint(covariance=[[0.01, 0.0]]), [], "uncertainty.joint.covariance", "1 rows for 2"),
        (
            _joint(covariance=[[0.01, 0.0], [0.0]]),
            [],
            "uncertainty.joint.covariance.1",
            "has 1 entries for 2",
        ),
        (_joint(scales=["log", "power"]), [], "uncertainty.joint.scales.1", "'log' or 'linear'"),
        (_joint(parameters=["s", "s"]), [], "uncertainty.joint.parameters.1", "parameters.0"),
        (_joint(centre=[0.0, 6.0]), [], "uncertainty.joint.centre.0", "greater than 0"),
        (
            _joint(covariance=[[0.01, 0.0], [0.0, -0.1]]),
            [],
            "uncertainty.joint.covariance.1.1",
            "variance cannot be negative",
        ),
        (
            _joint(covariance=[[0.01, 0.004], [0.003, 0.0025]]),
            [],
            "uncertainty.joint.covariance.1.0",
            "symmetric",
        ),
        (
            # correlation 0.006 / sqrt(0.01 * 0.0025) = 1.2: beyond Cauchy-Schwarz
            _joint(covariance=[[0.01, 0.006], [0.006, 0.0025]]),
            [],
            "uncertainty.joint.covariance",
            "not positive semi-definite",
        ),
        (_joint(parameters=["L", "r"]), [], "uncertainty.joint.parameters.0", "load_variability"),
        (_joint(parameters=["s", "k"]), [], "uncertainty.joint.parameters.1", "not a model"),
        (
            _joint(),
            [_normal("m", mean=4.0, sd=0.1, lower=0.0), _normal("r", lower=0.0)],
            "uncertainty.joint.parameters.1",
            "also has its own prior (uncertainty.priors.1)",
        ),
        (
            _joint(scales=["linear", "log"], centre=[0.1, 6.0]),
            [],
            "uncertainty.joint.centre.0",
            "physical bound of 's'",
        ),
        (
            _joint(parameters=["q", "r"], centre=[1.05, 6.0], covariance=[[0.01, 0], [0, 0.0025]]),
            [],
            "uncertainty.joint.centre.0",
            "physical bound of 'q'",
        ),
        (
            _joint(scales=["linear", "log"], centre=[-0.5, 6.0], covariance=[[0, 0], [0, 0]]),
            [],
            "uncertainty.joint.centre.0",
            "must be greater than 0",
        ),
        (
            {k: v for k, v in _joint().items() if k != "covariance"},
            [],
            "uncertainty.joint.covariance",
            "required field is missing",
        ),
        (_joint(spread=1.0), [], "uncertainty.joint.spread", "unknown field"),
    ],
)
def test_joint_prior_errors_name_the_exact_field(joint, priors, field, words):
    """Each mistake in ``[uncertainty.joint]`` is reported at its dotted path with a reason
    (DESIGN.md section 5). A covariance matrix is symmetric positive semi-definite, so no
    correlation exceeds 1 in size (Anderson 2003, An Introduction to Multivariate Statistical
    Analysis, 3rd ed., section 2.3, from memory); the bounds of s (> 0) and q (>= 1) are the
    recycling model's (Carpenter, Ludwig & Brock 1999): a linear normal with centre 0.1 and
    sd 0.1 puts 16% below 0 (scipy.stats.norm.cdf(-1)); a log-normal with median 1.05 and
    sigma 0.1 puts 31% below 1."""
    problems = _problems({"priors": priors, "joint": joint})
    assert field in problems, problems
    assert words in problems[field]


def test_joint_prior_bound_mass_matches_scipy():
    """The probability a joint prior puts below a bound: its marginal normal on the parameter's
    scale, against scipy.stats.norm (linear) and scipy.stats.lognorm (log)."""
    scenario = scenario_from_data(
        _with({"joint": _joint(scales=["linear", "log"], centre=[3.0, 6.0])})
    )
    joint = scenario.uncertainty.joint
    assert joint.mass_below(0, 2.9) == pytest.approx(stats.norm.cdf(2.9, 3.0, 0.1), rel=1e-12)
    assert joint.mass_below(1, 5.5) == pytest.approx(
        stats.lognorm.cdf(5.5, 0.05, scale=6.0), rel=1e-12
    )
