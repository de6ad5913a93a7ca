"""Ensembles: agreement with the deterministic comparison, the binomial interval, reproducibility
across chunking and schedulers, Kramers escape times, and the accuracy of the fixed steps."""

from __future__ import annotations

import contextlib
import io
import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import quad, solve_ivp

from planner.cli import main
from planner.ensemble import (
    VERDICTS,
    draw_load_factors,
    draw_parameters,
    first_passage_times,
    run_ensemble,
    wilson_interval,
)
from planner.models import compile_model, formula_spec
from planner.outcomes import compare
from planner.scenario import Uncertainty, scenario_from_data
from planner.schedules import control_path

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
DEMOS = sorted(SCENARIOS.glob("*.toml"))


def _demo_data(name: str) -> dict:
    return tomllib.loads((SCENARIOS / name).read_text(encoding="utf-8"))


def _noisy_alder(members: int = 600) -> dict:
    """The demo's own priors and load swings, plus process noise on P."""
    data = _demo_data("alder-mere.toml")
    data["uncertainty"] = {
        **data["uncertainty"],
        "members": members,
        "process_noise": {"P": 0.01},
        "steps_per_year": 40,
    }
    data["schedules"] = data["schedules"][:2]
    return data


def _same(a, b) -> None:
    for x, y in zip(a.schedules, b.schedules, strict=True):
        assert x.name == y.name
        assert np.array_equal(x.verdicts, y.verdicts)
        assert np.array_equal(x.meets_target_at, y.meets_target_at, equal_nan=True)
        assert np.array_equal(x.present_value, y.present_value)
        assert np.array_equal(x.fan.values, y.fan.values, equal_nan=True)
        assert x.interval == y.interval


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_point_mass_priors_reproduce_the_deterministic_verdicts(path):
    """With every prior a point mass at the scenario's value and no noise, every member's
    verdict equals `compare`'s (issue acceptance criterion; compare integrates with scipy's
    LSODA and settles the same way), and the target times agree to within a step's
    interpolation error."""
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    control = data["control"]["parameter"]
    data["uncertainty"] = {
        "members": 7,
        "seed": 11,
        "priors": [
            {"parameter": name, "kind": "normal", "mean": value, "sd": 0.0}
            for name, value in data["model"]["parameters"].items()
            if name != control
        ],
    }
    scenario = scenario_from_data(data)
    comparison = compare(scenario)
    ensemble = run_ensemble(scenario, diagram=comparison.diagram, chunk_size=3)
    assert len(ensemble.schedules) == len(comparison.outcomes)
    for outcome, summary in zip(comparison.outcomes, ensemble.schedules, strict=True):
        assert {VERDICTS[code] for code in summary.verdicts} == {outcome.verdict}, outcome.name
        assert summary.p_recovered == (1.0 if outcome.recovered else 0.0)
        if outcome.meets_target_at is None:
            assert np.all(np.isnan(summary.meets_target_at))
        else:
            assert np.allclose(summary.meets_target_at, outcome.meets_target_at, atol=1e-3)
        assert np.allclose(summary.present_value, outcome.cost.present_value, rtol=1e-4)


@pytest.mark.parametrize("successes, trials", [(0, 10), (3, 10), (10, 10), (517, 2000), (1, 1)])
def test_wilson_interval_matches_scipy(successes, trials):
    """Wilson score interval (Wilson 1927, JASA 22:209-212) against
    scipy.stats.binomtest(k, n).proportion_ci(method="wilson")."""
    reference = stats.binomtest(successes, trials).proportion_ci(0.95, method="wilson")
    low, high = wilson_interval(successes, trials)
    assert low == pytest.approx(reference.low, abs=1e-12)
    assert high == pytest.approx(reference.high, abs=1e-12)


def test_recovery_interval_of_a_run_matches_scipy():
    """The interval a run reports for its own counts equals scipy's Wilson interval for them
    (scipy.stats.binomtest(...).proportion_ci(method="wilson"))."""
    scenario = scenario_from_data(_demo_data("alder-mere.toml"))
    ensemble = run_ensemble(scenario, members=400, schedules=scenario.schedules[:2])
    assert {s.recovered for s in ensemble.schedules} != {0}
    for summary in ensemble.schedules:
        reference = stats.binomtest(summary.recovered, summary.members).proportion_ci(
            0.95, method="wilson"
        )
        assert summary.interval == pytest.approx((reference.low, reference.high), abs=1e-12)


def test_chunking_changes_nothing():
    """Same seed, different chunk sizes (boundaries inside the random-number blocks): every
    per-member number is bit-identical (issue acceptance criterion)."""
    scenario = scenario_from_data(_noisy_alder(members=1100))
    whole = run_ensemble(scenario, chunk_size=1100)
    pieces = run_ensemble(scenario, chunk_size=379)
    _same(whole, pieces)
    assert 0.0 < whole.schedules[0].p_recovered < 1.0  # the noise matters here


def test_another_seed_gives_other_members():
    """A check that the comparison above can fail: another seed changes the members."""
    scenario = scenario_from_data(_noisy_alder(members=300))
    a = run_ensemble(scenario, seed=1)
    b = run_ensemble(scenario, seed=2)
    assert not np.array_equal(a.schedules[1].meets_target_at, b.schedules[1].meets_target_at)


@pytest.mark.slow
def test_local_cluster_gives_the_same_numbers_as_local():
    """A dask.distributed LocalCluster with 2 worker processes on loopback gives bit-identical
    results to the in-process run (issue acceptance criterion)."""
    pytest.importorskip("dask.distributed")
    scenario = scenario_from_data(_noisy_alder(members=800))
    local = run_ensemble(scenario, chunk_size=800)
    distributed = run_ensemble(scenario, chunk_size=200, scheduler="processes")
    _same(local, distributed)


def test_the_local_scheduler_does_not_import_dask():
    """`local` needs no Dask (issue contract): run a small ensemble in a fresh interpreter."""
    code = (
        "import sys; from planner.scenario import load_scenario; "
        "from planner.ensemble import run_ensemble; "
        f"run_ensemble(load_scenario({str(SCENARIOS / 'tarnby-water.toml')!r}), members=5); "
        "assert not any(name.split('.')[0] in ('dask', 'distributed') for name in sys.modules)"
    )
    subprocess.run([sys.executable, "-c", code], check=True)


def _exact_mean_first_passage(sigma: float, start: float, end: float) -> float:
    """T(start) = (2 / sigma^2) int_start^end exp(2 V(y)/sigma^2) int_-inf^y exp(-2 V(z)/sigma^2)
    dz dy for dx = -V'(x) dt + sigma dW, reflecting at -inf and absorbing at ``end`` (Gardiner,
    Handbook of Stochastic Methods, first passage times in one dimension, section 5.2.7;
    section number from memory)."""
    D = sigma * sigma

    def potential(x):
        return x**4 / 4 - x**2 / 2

    def inner(y):
        return quad(lambda z: math.exp(-2 * potential(z) / D), -math.inf, y, limit=200)[0]

    outer = quad(lambda y: math.exp(2 * potential(y) / D) * inner(y), start, end, limit=200)[0]
    return 2 / D * outer


@pytest.mark.slow
def test_kramers_escape_time_of_a_double_well():
    """dx = -V'(x) dt + sigma dW, V = x^4/4 - x^2/2, from the well at -1 to the well at +1.

    Kramers' formula (Gardiner, Handbook of Stochastic Methods, escape over a potential
    barrier, section 5.2.7c; section number from memory):
    T = 2 pi / sqrt(V''(a) |V''(b)|) exp(2 dV / sigma^2) with a = -1, b = 0, dV = 1/4.
    At sigma = 0.3 the barrier dV = 0.25 is 5.6 times the noise intensity sigma^2/2. The
    simulated mean must agree with Kramers within 15% and with the exact mean first-passage
    time (double quadrature of Gardiner's one-dimensional formula, same section) within 3
    standard errors. Euler-Maruyama's bias on this mean is about -0.5 h relative (h in time
    units; estimated from runs at h = 0.05 and 0.1), so h = 0.025 keeps it near 1%, under one
    standard error of 2000 members.
    """
    sigma = 0.3
    # x (1 - x^2) rather than x - x^3: numpy's pow of a negative base is slow.
    spec = formula_spec({"x": "x*(1 - x**2) + mu"}, ("mu",))
    system = compile_model(spec, "mu").bind({"mu": 0.0})
    passage = first_passage_times(
        system,
        np.array([-1.0]),
        0.0,
        variable=0,
        level=1.0,
        noise=np.array([sigma]),
        members=2000,
        seed=7,
        step=0.025,
        max_time=60000.0,
    )
    assert passage.reached.all()
    kramers = 2 * math.pi / math.sqrt(2.0 * 1.0) * math.exp(2 * 0.25 / sigma**2)
    exact = _exact_mean_first_passage(sigma, -1.0, 1.0)
    assert abs(passage.mean / kramers - 1) < 0.15
    assert abs(passage.mean - exact) < 3 * passage.standard_error


def test_process_noise_gives_the_ornstein_uhlenbeck_variance():
    """dx = -lambda x dt + sigma dW has variance sigma^2 (1 - exp(-2 lambda t)) / (2 lambda)
    at time t from a fixed start (Gardiner, Handbook of Stochastic Methods, the
    Ornstein-Uhlenbeck process, section 4.4.4, from memory; stationary limit as in Scheffer et
    al. 2009, Nature 461:53-59, box 1). 4000 members; the
    sample variance of a normal sample has relative standard error sqrt(2/(n-1)) = 2.2%."""
    data = {
        "name": "Noisy pond",
        "model": {
            "kind": "formula",
            "equations": {"x": "mu - lam*x"},
            "parameters": {"mu": 0.0, "lam": 0.5},
        },
        "control": {"parameter": "mu", "range": [-1.0, 1.0]},
        "state": {"x": 0.0},
        "target": {"variable": "x"},
        "simulation": {"horizon": 6.0},
        "schedules": [{"name": "hold", "kind": "path", "points": [[0.0, 0.0]]}],
        "uncertainty": {"members": 4000, "seed": 5, "process_noise": {"x": 0.4}},
    }
    ensemble = run_ensemble(scenario_from_data(data), keep_trajectories=True)
    final = ensemble.schedules[0].trajectories[:, 0, -1]
    expected = 0.4**2 * (1 - math.exp(-2 * 0.5 * 6.0)) / (2 * 0.5)
    assert abs(final.var(ddof=1) / expected - 1) < 3 * math.sqrt(2 / 3999)
    assert abs(final.mean()) < 4 * math.sqrt(expected / 4000)


@pytest.mark.parametrize("demo", ["alder-mere.toml", "brellow-reservoir.toml"])
def test_ensemble_steps_agree_with_solve_ivp(demo):
    """The ensemble's integration (no uncertainty) against scipy's Radau at rtol 1e-11, split at
    the same kinks, at every yearly sample of every schedule without actions (scipy.integrate
    reference): within 1e-6 relative."""
    data = _demo_data(demo)
    data.pop("uncertainty", None)
    scenario = scenario_from_data(data)
    schedules = [s for s in scenario.schedules if not s.actions]
    ensemble = run_ensemble(scenario, members=2, schedules=schedules, keep_trajectories=True)
    system = scenario.system()
    horizon = scenario.simulation.horizon
    for schedule, summary in zip(schedules, ensemble.schedules, strict=True):
        path = control_path(schedule, current=scenario.current_control)
        cuts = np.unique(np.concatenate([[0.0, horizon], path.kinks(horizon)]))
        times = summary.fan.times
        x = scenario.initial_state
        reference = {0.0: x}
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            if b - a < 1e-12:
                continue
            u_a, slope = path(a), path.slope(a)
            wanted = np.unique(np.append(times[(times > a) & (times <= b)], b))
            solution = solve_ivp(
                lambda t, y, u_a=u_a, slope=slope, a=a: system.rhs(y, u_a + slope * (t - a)),
                (a, b),
                x,
                method="Radau",
                rtol=1e-11,
                atol=1e-13,
                t_eval=wanted,
            )
            reference.update(zip(solution.t, solution.y.T, strict=True))
            x = solution.y[:, -1]
        reference = np.array([reference[t] for t in times]).T
        ours = summary.trajectories[0]
        assert ours.shape == reference.shape
        assert np.max(np.abs(ours - reference) / np.abs(reference)) < 1e-6, schedule.name


def test_truncated_priors_follow_scipy_distributions():
    """Drawn parameters against scipy.stats (truncnorm, lognorm, triang, uniform) by the
    Kolmogorov-Smirnov test: truncation by inverse CDF must give the truncated law."""
    uncertainty = Uncertainty(
        members=5000,
        seed=3,
        priors=[
            {"parameter": "a", "kind": "normal", "mean": 1.0, "sd": 0.5, "lower": 0.5, "upper": 2},
            {"parameter": "b", "kind": "lognormal", "median": 2.0, "sigma": 0.3},
            {"parameter": "c", "kind": "triangular", "low": 0.0, "mode": 1.0, "high": 4.0},
            {"parameter": "d", "kind": "uniform", "low": -1.0, "high": 3.0, "upper": 1.0},
        ],
    )
    drawn = draw_parameters(uncertainty, 0, 5000)
    laws = {
        "a": stats.truncnorm((0.5 - 1.0) / 0.5, (2.0 - 1.0) / 0.5, loc=1.0, scale=0.5),
        "b": stats.lognorm(0.3, scale=2.0),
        "c": stats.triang(0.25, loc=0.0, scale=4.0),
        "d": stats.uniform(-1.0, 2.0),
    }
    for name, law in laws.items():
        assert stats.kstest(drawn[name], law.cdf).pvalue > 1e-3, name
    assert drawn["a"].min() >= 0.5 and drawn["a"].max() <= 2.0
    part = draw_parameters(uncertainty, 1500, 2600)
    assert np.array_equal(part["c"], drawn["c"][1500:2600])


JOINT = {
    "parameters": ["a", "b", "c"],
    "scales": ["log", "linear", "log"],
    "centre": [2.0, -1.0, 0.5],
    "covariance": [[0.04, 0.018, -0.01], [0.018, 0.09, 0.0], [-0.01, 0.0, 0.01]],
}


def _on_scales(drawn: dict, joint: dict) -> np.ndarray:
    """Drawn values (k, members) on each parameter's scale (logs of log-scale ones)."""
    return np.array(
        [
            np.log(drawn[name]) if scale == "log" else drawn[name]
            for name, scale in zip(joint["parameters"], joint["scales"], strict=True)
        ]
    )


def test_joint_prior_draws_reproduce_its_mean_and_covariance():
    """20000 draws of a joint prior, on each parameter's scale: the sample mean lies within 5
    standard errors sqrt(c_ii / n) of (ln centre or centre); each sample covariance entry within
    5 of its standard error sqrt((c_ij^2 + c_ii c_jj) / (n - 1)) (variance of an entry of a
    Wishart matrix; Anderson 2003, An Introduction to Multivariate Statistical Analysis, 3rd ed.,
    section 7.3, from memory); the squared Mahalanobis distances follow chi-square with 3
    degrees of freedom (Anderson 2003, section 3.3, from memory), checked against
    scipy.stats.chi2 by the Kolmogorov-Smirnov test. Draws depend on (seed, member) only."""
    n = 20000
    uncertainty = Uncertainty(members=n, seed=5, joint=JOINT)
    drawn = draw_parameters(uncertainty, 0, n)
    x = _on_scales(drawn, JOINT)
    mean = np.array([np.log(2.0), -1.0, np.log(0.5)])
    covariance = np.array(JOINT["covariance"])
    variances = np.diag(covariance)
    assert np.all(np.abs(x.mean(axis=1) - mean) <= 5 * np.sqrt(variances / n))
    error = np.sqrt((covariance**2 + np.outer(variances, variances)) / (n - 1))
    assert np.all(np.abs(np.cov(x) - covariance) <= 5 * error), np.cov(x) - covariance
    offset = x - mean[:, None]
    distance = np.einsum("in,ij,jn->n", offset, np.linalg.inv(covariance), offset)
    assert stats.kstest(distance, stats.chi2(3).cdf).pvalue > 1e-3
    part = draw_parameters(uncertainty, 1500, 2600)
    for name in JOINT["parameters"]:
        assert np.array_equal(part[name], drawn[name][1500:2600])
    other = draw_parameters(uncertainty.model_copy(update={"seed": 6}), 0, 100)
    assert not np.array_equal(other["a"], drawn["a"][:100])


def test_independent_priors_draw_the_same_values_beside_a_joint_prior():
    """A joint prior draws from its own random stream: adding one leaves the independent priors'
    values unchanged, and they still follow their law (scipy.stats.uniform, KS test)."""
    priors = [{"parameter": "d", "kind": "uniform", "low": 0.0, "high": 3.0}]
    alone = draw_parameters(Uncertainty(seed=2, priors=priors), 0, 3000)
    both = draw_parameters(Uncertainty(seed=2, priors=priors, joint=JOINT), 0, 3000)
    assert set(both) == {"a", "b", "c", "d"}
    assert np.array_equal(alone["d"], both["d"])
    assert stats.kstest(both["d"], stats.uniform(0.0, 3.0).cdf).pvalue > 1e-3


def test_singular_and_zero_joint_covariances():
    """A covariance of rank one (correlation exactly 1: no Cholesky factor exists) is still a
    normal law, concentrated on the line b - 2 = 2 (a - 1) with var(a) = 1 (sample variance
    within 5 standard errors sqrt(2 / (n - 1)); Anderson 2003, section 7.3, from memory); a
    zero matrix is a point mass at the centre (common practice, no source)."""
    line = {
        "parameters": ["a", "b"],
        "scales": ["linear", "linear"],
        "centre": [1.0, 2.0],
        "covariance": [[1.0, 2.0], [2.0, 4.0]],
    }
    n = 5000
    drawn = draw_parameters(Uncertainty(seed=4, joint=line), 0, n)
    assert np.allclose(drawn["b"] - 2.0, 2.0 * (drawn["a"] - 1.0), atol=1e-12)
    assert abs(np.var(drawn["a"], ddof=1) - 1.0) <= 5 * np.sqrt(2.0 / (n - 1))
    point = {**JOINT, "covariance": [[0.0] * 3] * 3}
    drawn = draw_parameters(Uncertainty(seed=4, joint=point), 0, 50)
    for name, centre in zip(point["parameters"], point["centre"], strict=True):
        assert drawn[name] == pytest.approx(np.full(50, centre), rel=1e-15)


def test_joint_draws_below_a_physical_bound_are_redrawn():
    """Members whose draw falls below a parameter's physical bound draw again: the bounded
    coordinate then follows the normal truncated at the bound (the marginal of a multivariate
    normal truncated on that coordinate alone), scipy.stats.truncnorm by the KS test; the
    redraws too depend on (seed, member) only."""
    joint = {
        "parameters": ["a", "b"],
        "scales": ["linear", "linear"],
        "centre": [1.0, 0.0],
        "covariance": [[0.25, 0.3], [0.3, 1.0]],
    }
    uncertainty = Uncertainty(seed=8, joint=joint)
    bounds = {"a": (0.5, True)}
    drawn = draw_parameters(uncertainty, 0, 4000, bounds=bounds)
    assert drawn["a"].min() > 0.5
    law = stats.truncnorm((0.5 - 1.0) / 0.5, np.inf, loc=1.0, scale=0.5)
    assert stats.kstest(drawn["a"], law.cdf).pvalue > 1e-3
    part = draw_parameters(uncertainty, 1000, 2500, bounds=bounds)
    assert np.array_equal(part["a"], drawn["a"][1000:2500])
    assert np.array_equal(part["b"], drawn["b"][1000:2500])


def test_load_factors_have_mean_one_and_the_asked_autocorrelation():
    """Lognormal factor exp(sigma z - sigma^2/2) has mean 1 and variance exp(sigma^2) - 1 = cv^2
    (lognormal moments, Johnson, Kotz & Balakrishnan 1994, Continuous Univariate Distributions
    1, ch. 14, from memory); the log factors of an AR(1) series have lag-1 autocorrelation rho."""
    uncertainty = Uncertainty(
        members=20000, seed=9, load_variability={"cv": 0.3, "autocorrelation": 0.6}
    )
    factors = draw_load_factors(uncertainty, 30, 0, 20000)
    assert factors.shape == (30, 20000)
    assert factors.mean() == pytest.approx(1.0, abs=0.01)
    assert factors.var() == pytest.approx(0.3**2, rel=0.05)
    logs = np.log(factors)
    lag1 = np.corrcoef(logs[:-1].ravel(), logs[1:].ravel())[0, 1]
    assert lag1 == pytest.approx(0.6, abs=0.02)


def _cli(*args: str) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(args))
    return code, out.getvalue(), err.getvalue()


def test_cli_json_has_the_promised_keys(tmp_path):
    """`planner ensemble FILE --json` (issue contract): schedules with name, p_recovered,
    interval [lo, hi] and members; --html writes a page."""
    page = tmp_path / "ensemble.html"
    code, out, err = _cli(
        "ensemble",
        str(SCENARIOS / "tarnby-water.toml"),
        "--members",
        "40",
        "--seed",
        "3",
        "--json",
        "--html",
        str(page),
    )
    assert code == 0, err
    result = json.loads(out)
    assert [s["name"] for s in result["schedules"]] == [
        "Cut to zero over 4 years",
        "Cut to 0.04 plus long inactivation",
    ]
    for entry in result["schedules"]:
        assert isinstance(entry["p_recovered"], float)
        low, high = entry["interval"]
        assert 0.0 <= low <= entry["p_recovered"] <= high <= 1.0
        assert entry["members"] == 40
    assert "Caution" in page.read_text(encoding="utf-8")


@pytest.mark.parametrize(
    "option, value, field",
    [("--scheduler", "udp://nowhere", "scheduler"), ("--members", "0", "members")],
)
def test_cli_refuses_bad_options(option, value, field):
    """Bad options exit 2 and name the option (DESIGN.md section 5 exit codes)."""
    code, _, err = _cli("ensemble", str(SCENARIOS / "tarnby-water.toml"), option, value)
    assert code == 2
    assert f"{option}: {field}:" in err


def test_an_ensemble_too_large_for_memory_is_refused_before_it_runs():
    """20,000 members over 10,000 yearly samples and five schedules would keep about 8 GB of
    fan-chart results: refused at once, naming the horizon; a long horizon with few members
    runs in smaller chunks instead (common practice, no source: estimate before allocating)."""
    import tomllib

    from planner.ensemble import MEMORY_BUDGET, _memory_plan
    from planner.errors import InputError
    from planner.scenario import scenario_from_data

    path = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
    data = tomllib.loads(path.read_text(encoding="utf-8"))
    data["simulation"]["horizon"] = 10000.0
    scenario = scenario_from_data(data)
    with pytest.raises(InputError) as error:
        run_ensemble(scenario, members=20000, source=str(path))
    assert "simulation.horizon" in str(error.value) and str(path) in str(error.value)
    chunk = _memory_plan(scenario, 100, 1, 10001, 8192, "x")
    assert 1 <= chunk < 8192 and chunk * 10001 * 5 * 8 <= MEMORY_BUDGET // 2
