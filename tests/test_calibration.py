"""Fitting the model to monitoring records: coverage of the 95% intervals on synthetic records,
agreement with a plain scipy fit, the delta method against the envelope theorem, the bootstrap
(batched refits against serial scipy refits, replicate thresholds by Newton against full
diagrams), identifiability warnings, the fitted scenario, the demo record and the `planner fit`
command."""

from __future__ import annotations

import contextlib
import importlib.util
import io
import json
import tomllib
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import solve_ivp
from scipy.optimize import brentq, least_squares

from planner.calibration import (
    UNRELIABLE,
    default_fitted,
    fit_json,
    fit_record,
    fit_text,
    observations_for,
    replicate_thresholds,
)
from planner.cli import main
from planner.ensemble import VERDICTS, draw_parameters, run_ensemble
from planner.equilibria import diagram_for
from planner.errors import InputError
from planner.integrate import Problem, Save, integrate
from planner.monitoring import parse_record, read_record
from planner.outcomes import compare
from planner.scenario import load_scenario, parse_scenario, scenario_from_data
from planner.schedules import ControlPath

ROOT = Path(__file__).resolve().parent.parent
ALDER = ROOT / "scenarios" / "alder-mere.toml"
DEMO = ROOT / "scenarios" / "data" / "alder-mere-monitoring.csv"
DEMO_SCRIPT = ROOT / "scenarios" / "data" / "make_demo_record.py"
TRUE = {"s": 1.2, "r": 0.6}  # alder-mere's own values; m = 0.4 and q = 8 are held
KNOTS = np.arange(0.0, 30.0, 5.0)  # loads recorded every fifth year, interpolated between
LOAD_PLAN = np.array([0.3, 0.1, 0.28, 0.095, 0.25, 0.1])  # all above the recovery threshold 0.086
YEARS = np.arange(30.0)
INITIAL_P = 0.76


@cache
def _alder():
    return load_scenario(ALDER)


def _csv(years, loads, values, *, load_years=None, column="P") -> str:
    """CSV text of a record; loads only in the rows of ``load_years`` (default: every row)."""
    load_years = years if load_years is None else load_years
    by_year = {float(y): repr(float(v)) for y, v in zip(load_years, loads, strict=True)}
    lines = [f"year,load,{column}"]
    for year, value in zip(years, values, strict=True):
        load = by_year.get(float(year), "")
        lines.append(f"{year:g},{load},{float(value)!r}")
    return "\n".join(lines) + "\n"


def _states_at(system, x0, path: ControlPath, years: np.ndarray) -> np.ndarray:
    """The model state (n, len(years)) at the given years under ``path``, by the engine."""
    problem = Problem(system, np.asarray(x0, dtype=float), path, float(years[-1]))
    return integrate(problem, save=Save(at=tuple(years))).samples[:, :, 0].T


def _synthetic(rng, *, noise=0.05, load_spread=0.005, parameters=TRUE):
    """A record from the recycling model with known parameters: loads at the knots (plus a small
    random change), lake P from the engine times log-normal measurement error."""
    loads = LOAD_PLAN + load_spread * rng.standard_normal(LOAD_PLAN.size)
    system = _alder().system(**parameters)
    modelled = _states_at(system, [INITIAL_P], ControlPath(KNOTS, loads), YEARS)[0]
    observed = modelled * np.exp(noise * rng.standard_normal(YEARS.size))
    return parse_record(_csv(YEARS, loads, observed, load_years=KNOTS), "<synthetic>")


def _reference_folds(s: float, r: float, m: float = 0.4, q: float = 8.0) -> list[tuple]:
    """(load, P) of every fold of dP/dt = L - s P + r P^q/(m^q + P^q), by load: where
    L(P) = s P - r P^q/(m^q + P^q) has dL/dP = 0 (Carpenter, Ludwig & Brock 1999); scipy brentq
    on sign changes of the closed-form derivative."""

    def slope(P):
        return s - r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2

    grid = np.linspace(0.001, 2.0, 4000)
    values = slope(grid)
    folds = []
    for i in np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]:
        P = brentq(slope, grid[i], grid[i + 1], xtol=1e-15, rtol=1e-15)
        folds.append((s * P - r * P**q / (m**q + P**q), P))
    return sorted(folds)


def _reference_recovery(s: float, r: float, m: float = 0.4, q: float = 8.0) -> tuple[float, float]:
    """(load, P) of the recovery fold: the lower of the two fold loads (see _reference_folds)."""
    return _reference_folds(s, r, m, q)[0]


@pytest.mark.slow
def test_95_percent_intervals_cover_the_true_values_in_at_least_90_percent_of_records():
    """50 synthetic records from known parameters plus 5% log-normal noise: the true s, r,
    initial P and recovery threshold lie inside the 95% covariance intervals in at least 45.

    Source: the frequentist meaning of a confidence interval (coverage; e.g. Bates & Watts 1988,
    Nonlinear Regression Analysis and Its Applications, section 2.3: linearisation intervals are
    approximate). The true recovery threshold comes from the closed-form fold condition
    (Carpenter, Ludwig & Brock 1999) solved by scipy brentq."""
    scenario = _alder()
    true_recovery, _ = _reference_recovery(**TRUE)
    rng = np.random.default_rng(1)
    truth = {"s": TRUE["s"], "r": TRUE["r"], "initial P": INITIAL_P, "recovery": true_recovery}
    covered = dict.fromkeys(truth, 0)
    records = 50
    for _ in range(records):
        record = _synthetic(rng)
        fit = fit_record(
            scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
        )
        intervals = {
            "s": fit.parameter("s").interval,
            "r": fit.parameter("r").interval,
            "initial P": fit.initial_state[0].interval,
            "recovery": fit.thresholds["recovery"].interval,
        }
        for name, (low, high) in intervals.items():
            covered[name] += int(low <= truth[name] <= high)
    assert all(count >= 0.9 * records for count in covered.values()), covered


def test_fit_agrees_with_a_plain_scipy_least_squares_fit():
    """The estimates and standard errors equal those of an independent fit of the same problem
    written with scipy alone: solve_ivp (LSODA, rtol 1e-10) under np.interp loads,
    least_squares with a 3-point finite-difference Jacobian on (log s, log r, log P0), and
    s^2 (J^T J)^-1 (Bates & Watts 1988, section 2.2) for the standard errors."""
    scenario = _alder()
    record = _synthetic(np.random.default_rng(5))
    fit = fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
    )

    loads = record.column("load")
    known = np.isfinite(loads)
    years, observed = record.times, record.column("P")
    m, q = 0.4, 8.0

    def model(z):
        s, r, p0 = np.exp(z)
        rate = lambda t, y: [  # noqa: E731
            np.interp(t, years[known], loads[known]) - s * y[0] + r * y[0] ** q / (m**q + y[0] ** q)
        ]
        return solve_ivp(
            rate, (0.0, years[-1]), [p0], method="LSODA", t_eval=years, rtol=1e-10, atol=1e-12
        ).y[0]

    residual = lambda z: np.log(model(z)) - np.log(observed)  # noqa: E731
    start = np.log([1.0, 0.5, observed[0]])
    reference = least_squares(residual, start, jac="3-point", x_scale="jac", xtol=1e-12)
    s2 = np.sum(reference.fun**2) / (observed.size - 3)
    errors = np.sqrt(np.diag(s2 * np.linalg.inv(reference.jac.T @ reference.jac)))

    ours = [fit.parameter("s"), fit.parameter("r"), fit.initial_state[0]]
    assert [e.value for e in ours] == pytest.approx(np.exp(reference.x), rel=1e-4)
    assert [e.standard_error for e in ours] == pytest.approx(errors, rel=1e-2)


def test_threshold_interval_follows_the_delta_method_with_envelope_gradients():
    """The recovery threshold's covariance interval is L* +- t sqrt(g C g) with the gradient from
    the envelope theorem: L*(theta) = min over P of s P - r f(P) on the fold, so
    dL*/dlog s = s P*, dL*/dlog r = -r f(P*) (envelope theorem, e.g. Mas-Colell, Whinston & Green
    1995, Microeconomic Theory, appendix M.L, from memory). The fold by scipy brentq."""
    scenario = _alder()
    record = _synthetic(np.random.default_rng(11))
    fit = fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
    )
    s, r = fit.parameter("s").value, fit.parameter("r").value
    load, P = _reference_recovery(s, r)
    f = P**8 / (0.4**8 + P**8)
    gradient = np.array([s * P, -r * f, 0.0])
    spread = stats.t.ppf(0.975, fit.dof) * np.sqrt(gradient @ fit.covariance @ gradient)
    threshold = fit.thresholds["recovery"]
    assert threshold.value == pytest.approx(load, abs=1e-8)
    assert threshold.interval == pytest.approx((load - spread, load + spread), rel=1e-4)


def test_residual_bootstrap_counts_and_agrees_with_the_covariance_intervals():
    """A few bootstrap replicates: every replicate is accounted for (refitted or failed; each
    refitted model has a classification; each has a recovery threshold or is counted without
    one), and the percentile intervals of s and r are about as wide as the covariance ones, as
    expected for a nearly linear problem (Efron & Tibshirani 1993, An Introduction to the
    Bootstrap, ch. 13, from memory)."""
    scenario = _alder()
    record = _synthetic(np.random.default_rng(3))
    replicates = 12
    fit = fit_record(
        scenario,
        observations_for(record, scenario),
        fit=["s", "r"],
        log=True,
        bootstrap=replicates,
        seed=4,
    )
    boot = fit.bootstrap
    assert boot.succeeded + boot.failed == replicates
    assert sum(boot.classifications.values()) == boot.succeeded
    recovery = fit.thresholds["recovery"]
    assert recovery.bootstrap_values.size + recovery.bootstrap_without == boot.succeeded
    assert recovery.bootstrap_interval is not None
    for name in ("s", "r"):
        estimate = fit.parameter(name)
        (b_low, b_high), (c_low, c_high) = estimate.bootstrap_interval, estimate.interval
        ratio = np.log(b_high / b_low) / np.log(c_high / c_low)
        assert 1 / 3 < ratio < 3, (name, estimate)
        assert b_low < c_high and c_low < b_high


def _scipy_refit(record, target, start, m=0.4, q=8.0):
    """One replicate refitted with scipy alone: least_squares (trust region reflective) on
    (log s, log r, log P0) around solve_ivp (LSODA, rtol 1e-10) of the recycling model and its
    forward sensitivities written out by hand, integrated knot to knot of the load path."""
    loads = record.column("load")
    known = np.isfinite(loads)
    knots, knot_loads, years = record.times[known], loads[known], record.times
    edges = np.unique(np.concatenate([knots, [years[-1]]]))

    def rate(t, y, a, b, load_a, load_b, s, r):
        P = y[0]
        load = load_a + (load_b - load_a) * (t - a) / (b - a)
        g = P**q / (m**q + P**q)
        slope = -s + r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2
        return [load - s * P + r * g, slope * y[1] - P, slope * y[2] + g, slope * y[3]]

    @cache
    def run(key):
        s, r, p0 = np.exp(np.frombuffer(key))
        y, values = np.array([p0, 0.0, 0.0, 1.0]), []
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            inside = years[(years >= a) & (years < b)]
            ends = np.interp([a, b], knots, knot_loads)
            solution = solve_ivp(
                rate,
                (a, b),
                y,
                method="LSODA",
                t_eval=np.append(inside, b),
                rtol=1e-10,
                atol=1e-12,
                args=(a, b, *ends, s, r),
            )
            values.append(solution.y[:, :-1])
            y = solution.y[:, -1]
        values = np.concatenate([*values, y[:, None]], axis=1)  # at every year
        return values, np.array([s, r, 1.0])

    def residual(z):
        values, _ = run(z.tobytes())
        return np.log(values[0]) - target

    def jacobian(z):
        values, factor = run(z.tobytes())
        chain = np.array([factor[0], factor[1], np.exp(z[2])])
        return values[1:].T * chain / values[0][:, None]

    ours = dict(method="trf", x_scale="jac", ftol=1e-10, xtol=1e-10, gtol=1e-10)
    return least_squares(residual, start, jac=jacobian, **ours)


def test_batched_bootstrap_gives_the_intervals_of_serial_scipy_refits():
    """The bootstrap refits all replicates together (batched Levenberg-Marquardt through the
    engine) and follows each replicate's folds by Newton; its percentile intervals of s, r,
    initial P and both thresholds, and its counts, equal those of the plain way to 3
    significant digits: the same 20 resampled data sets (centred residuals inflated by
    sqrt(n / (n - p)), drawn with replacement: Efron & Tibshirani 1993, An Introduction to the
    Bootstrap, ch. 9) refitted one at a time with scipy.optimize.least_squares around
    scipy.integrate.solve_ivp, each replicate's folds from the closed-form fold condition
    (Carpenter, Ludwig & Brock 1999) by scipy.optimize.brentq, percentiles by numpy."""
    scenario = _alder()
    record = _synthetic(np.random.default_rng(3))
    replicates, seed = 20, 9
    fit = fit_record(
        scenario,
        observations_for(record, scenario),
        fit=["s", "r"],
        log=True,
        bootstrap=replicates,
        seed=seed,
    )
    residuals = fit.residuals
    fitted_values = np.log(fit.predictions)
    m, p = residuals.size, 3
    centred = residuals - residuals.mean()
    rng = np.random.default_rng(seed)
    estimate = np.log([fit.parameter("s").value, fit.parameter("r").value])
    start = np.append(estimate, np.log(fit.initial_state[0].value))
    samples, folds = [], []
    for _ in range(replicates):
        target = fitted_values + rng.choice(centred, size=m, replace=True) * np.sqrt(m / (m - p))
        solution = _scipy_refit(record, target, start)
        assert solution.success, solution.message
        s, r, p0 = np.exp(solution.x)
        samples.append((s, r, p0))
        folds.append([load for load, _ in _reference_folds(s, r)])
    samples, folds = np.array(samples), np.array(folds)
    assert folds.shape == (replicates, 2)  # every replicate keeps both folds

    boot = fit.bootstrap
    assert boot.succeeded == replicates and boot.failed == 0
    least, (low, high) = scenario.control.least, scenario.control.range
    stuck = int(np.sum((folds[:, 0] < least) & (least < folds[:, 1])))
    bistable = int(np.sum((folds[:, 1] > low) & (folds[:, 0] < high))) - stuck
    expected = {"reversible": replicates - stuck - bistable, "hysteretic": bistable}
    assert boot.classifications == {**expected, "irreversible": stuck}
    ours = {
        "s": fit.parameter("s").bootstrap_interval,
        "r": fit.parameter("r").bootstrap_interval,
        "initial P": fit.initial_state[0].bootstrap_interval,
        "recovery": fit.thresholds["recovery"].bootstrap_interval,
        "collapse": fit.thresholds["collapse"].bootstrap_interval,
    }
    # a threshold the load cannot reach (below the lowest achievable load, out of range) is
    # no load: left out of the interval and counted apart
    reachable = {
        "recovery": (folds[:, 0] >= least) & (folds[:, 0] <= high),
        "collapse": (folds[:, 1] >= low) & (folds[:, 1] <= high),
    }
    columns = {"s": samples[:, 0], "r": samples[:, 1], "initial P": samples[:, 2]}
    columns |= {"recovery": folds[reachable["recovery"], 0]}
    columns |= {"collapse": folds[reachable["collapse"], 1]}
    for name, values in columns.items():
        reference = np.percentile(values, [2.5, 97.5])
        assert ours[name] == pytest.approx(reference, rel=5e-4), name
    for kind in ("recovery", "collapse"):
        assert fit.thresholds[kind].bootstrap_without == 0
        unreachable = int(np.sum(~reachable[kind]))
        assert fit.thresholds[kind].bootstrap_unreachable == unreachable
        assert fit.thresholds[kind].bootstrap_interval[0] >= (least if kind == "recovery" else low)


def _replace_parameters(scenario, values):
    model = scenario.model.model_copy(
        update={"parameters": {**scenario.model.parameters, **values}}
    )
    return scenario.model_copy(update={"model": model})


@pytest.mark.parametrize(
    "base, changes",
    [
        # Replicates of a fit of Alder Mere, then a lake past the cusp (no fold at all), one
        # whose recovery fold lies below the searched loads, and a strongly hysteretic one.
        ("fit", {"s": [4.0, 0.3, 1.5], "r": [0.6, 0.6, 0.62]}),
        # Water and sediment, the demo: a Hopf point on the turbid branch before its fold.
        (
            "brellow-reservoir.toml",
            {"r": [0.145, 0.155, 5.0, 0.25], "b": [0.01, 0.0105, 0.01, 0.001]},
        ),
        # The same model with a faster sediment pool (invented b = 0.3, r = 1.0), whose turbid
        # state stays stable up to its fold; larger changes of r need the staged Newton.
        ("fast-sediment", {"r": [0.9, 1.1, 2.0, 1.5], "b": [0.3, 0.31, 0.3, 0.2]}),
    ],
)
def test_replicate_folds_by_newton_equal_those_of_full_diagrams(base, changes):
    """Thresholds and classification of other parameter sets by Newton from the fitted folds
    equal those of a full diagram (continuation, planner.equilibria.diagram_for) of each set
    to 1e-6, including sets that lose one threshold or both."""
    if base == "fit":
        scenario = _alder()
        record = _synthetic(np.random.default_rng(3))
        fit = fit_record(
            scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=4
        )
        scenario, diagram = fit.fitted_scenario, fit.diagram
        replicates = fit.bootstrap.samples[:, :2].T
        values = {n: np.append(replicates[i], changes[n]) for i, n in enumerate(("s", "r"))}
    else:
        scenario = load_scenario(ROOT / "scenarios" / "brellow-reservoir.toml")
        if base == "fast-sediment":
            scenario = _replace_parameters(scenario, FAST_SEDIMENT)
        diagram = diagram_for(scenario)
        values = {name: np.array(value) for name, value in changes.items()}
    tracked = replicate_thresholds(diagram, values)
    if base == "brellow-reservoir.toml":
        # The demo's turbid state loses stability at a Hopf point before its fold: the fold is
        # not the threshold there, so the Newton shortcut declines and full diagrams decide.
        assert diagram.recovery.kind == "hopf" and tracked is None
        return
    assert tracked is not None
    members = len(next(iter(values.values())))
    lost = 0
    for b in range(members):
        full = diagram_for(
            _replace_parameters(scenario, {n: float(v[b]) for n, v in values.items()})
        )
        for kind in ("recovery", "collapse"):
            mine, theirs = getattr(tracked, kind)[b], getattr(full, f"{kind}_threshold")
            if theirs is None:
                assert np.isnan(mine), (b, kind, mine)
                lost += 1
            else:
                assert mine == pytest.approx(theirs, abs=1e-6), (b, kind)
        assert tracked.classifications[b] == full.classification, b
    assert lost >= (3 if base == "fit" else 0)


FAST_SEDIMENT = {"b": 0.3, "r": 1.0}
"""Invented: the Brellow demo with a sediment pool that turns over in a few years."""


def test_replicate_thresholds_defer_to_full_diagrams_when_a_member_has_a_hopf_point():
    """A member whose turbid state is an unstable spiral next to its recovery fold (the demo's
    slow sediment, b = 0.01) has its threshold at a Hopf point, which Newton on the fold
    cannot find: the shortcut declines for the whole set (then a full diagram per member
    decides). At the fold the second eigenvalue of the Jacobian is positive there (numpy)."""
    scenario = _replace_parameters(
        load_scenario(ROOT / "scenarios" / "brellow-reservoir.toml"), FAST_SEDIMENT
    )
    diagram = diagram_for(scenario)
    assert replicate_thresholds(diagram, {"b": np.array([0.3, 0.25])}) is not None
    assert replicate_thresholds(diagram, {"b": np.array([0.3, 0.01])}) is None
    slow = diagram_for(_replace_parameters(scenario, {"b": 0.01}))
    fold = [f for f in slow.folds if f.kind == "recovery"][0]
    assert np.max(np.linalg.eigvals(slow.system.jac(fold.state, fold.control)).real) > 0
    assert slow.recovery.kind == "hopf"


def test_replicate_thresholds_defer_to_full_diagrams_without_a_window():
    """A lake past the cusp has no fold to follow: the shortcut declines (the bootstrap then
    traces a diagram per replicate), and such a fit's bootstrap counts every replicate as
    reversible and without thresholds."""
    scenario = _replace_parameters(_alder(), {"s": 4.0})
    diagram = diagram_for(scenario)
    assert diagram.window is None
    assert replicate_thresholds(diagram, {"s": np.array([3.9, 4.1])}) is None

    record = _synthetic(np.random.default_rng(4), parameters={"s": 4.0, "r": 0.6})
    fit = fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=3
    )
    boot = fit.bootstrap
    assert fit.classification == "reversible"
    assert boot.classifications["reversible"] == boot.succeeded > 0
    for threshold in fit.thresholds.values():
        assert threshold.bootstrap_without == boot.succeeded


@cache
def _flat_fit():
    """A fit of s and r to a lake held at one load (0.2) on its clear branch, where
    P = L / s with almost no recycling (r P^8 / (m^8 + P^8) ~ r (P / m)^8 at P ~ 0.17, m = 0.4:
    Carpenter, Ludwig & Brock 1999), so r is not identifiable; equilibrium by scipy brentq."""
    scenario = _alder()
    rng = np.random.default_rng(2)
    years = np.arange(25.0)
    equilibrium = brentq(lambda P: 0.2 - 1.2 * P + 0.6 * P**8 / (0.4**8 + P**8), 0.01, 0.25)
    observed = equilibrium * np.exp(0.03 * rng.standard_normal(years.size))
    record = parse_record(_csv(years, np.full(years.size, 0.2), observed), "<flat>")
    return fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
    )


def test_warns_when_the_record_cannot_tell_the_parameters_apart():
    """A lake held at one load on its clear branch shows P = L / s with almost no recycling:
    r is not identifiable and the fit must say so (the informative record must not)."""
    scenario = _alder()
    flat = _flat_fit()
    assert not flat.identifiable
    assert any(" r" in warning or "r:" in warning for warning in flat.warnings), flat.warnings

    informative = fit_record(
        scenario,
        observations_for(_synthetic(np.random.default_rng(6)), scenario),
        fit=["s", "r"],
        log=True,
        bootstrap=0,
    )
    assert informative.identifiable, informative.warnings


SLOW_SEDIMENT = {"b": 0.002, "r": 0.03}
"""Invented: the Brellow demo with a sediment pool that turns over in decades, as in Carpenter
2005 (b = 0.001, r = 0.019 per year); its sediment P starts near the turbid equilibrium of that
pool (23.75 g P / m2)."""


def test_two_variable_model_with_unobserved_sediment_is_fitted_and_flagged():
    """The water-and-sediment model (Carpenter 2005) with a slow sediment pool, observed only
    in water P: the fit runs through the same code path, its 95% interval of r covers the true
    value, and the unobserved sediment pool's initial value, which 40 years of water P barely
    inform, is reported as poorly determined."""
    scenario = _replace_parameters(
        load_scenario(ROOT / "scenarios" / "brellow-reservoir.toml"), SLOW_SEDIMENT
    )
    scenario = scenario.model_copy(update={"state": {"X": 0.875, "M": 23.75}})
    rng = np.random.default_rng(2)
    years, knots = np.arange(40.0), np.arange(0.0, 40.0, 5.0)
    loads = np.array([0.2, 0.15, 0.225, 0.125, 0.175, 0.1, 0.15, 0.125])
    modelled = _states_at(
        scenario.system(), scenario.initial_state, ControlPath(knots, loads), years
    )
    water = modelled[0] * np.exp(0.05 * rng.standard_normal(years.size))
    record = parse_record(_csv(years, loads, water, load_years=knots, column="X"), "<two>")
    fit = fit_record(scenario, observations_for(record, scenario), fit=["r"], log=True, bootstrap=0)
    low, high = fit.parameter("r").interval
    assert low <= scenario.model.parameters["r"] <= high
    assert not fit.identifiable
    assert any("initial M" in warning for warning in fit.warnings), fit.warnings


def test_fitted_scenario_keeps_schedules_and_costs_and_starts_at_the_end_of_the_record(tmp_path):
    """The fitted scenario: the base's schedules, costs, control and target; the fitted
    parameters; the modelled state and the recorded load at the last time; written atomically
    and read back unchanged."""
    from planner.scenario import save_scenario

    scenario = _alder()
    record = _synthetic(np.random.default_rng(8))
    fit = fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
    )
    fitted = fit.fitted_scenario
    assert fitted.schedules == scenario.schedules
    assert fitted.costs == scenario.costs
    assert fitted.control == scenario.control
    assert fitted.target == scenario.target
    parameters = fitted.model.parameters
    assert parameters["s"] == fit.parameter("s").value
    assert parameters["r"] == fit.parameter("r").value
    assert parameters["m"] == scenario.model.parameters["m"]
    assert parameters["L"] == record.column("load")[np.isfinite(record.column("load"))][-1]
    assert fitted.initial_state == pytest.approx(fit.end_state)
    path = save_scenario(fitted, tmp_path / "fitted.toml")
    assert load_scenario(path) == fitted
    with pytest.raises(InputError, match="exists already"):
        save_scenario(fitted, path)


def test_default_fitted_parameters_hold_the_recycling_steepness():
    """Built-in recycling models hold q by default; a formula model fits every parameter but
    the control."""
    assert default_fitted(_alder()) == ("s", "r", "m")
    formula = parse_scenario(
        """
name = "formula lake"
[model]
kind = "formula"
[model.equations]
x = "u - k * x"
[model.parameters]
u = 1.0
k = 0.5
[control]
parameter = "u"
range = [0.0, 2.0]
[state]
x = 2.0
[target]
variable = "x"
"""
    )
    assert default_fitted(formula) == ("k",)


def test_too_few_points_and_bad_parameter_names_are_input_errors():
    scenario = _alder()
    years = np.arange(5.0)
    record = parse_record(_csv(years, np.full(5, 0.2), np.full(5, 0.17)), "short.csv")
    observations = observations_for(record, scenario)
    with pytest.raises(InputError) as error:
        fit_record(scenario, observations, fit=["s", "r"], bootstrap=0)
    assert "column P" in str(error.value) and "too few points" in str(error.value)
    with pytest.raises(InputError, match="control"):
        fit_record(scenario, observations, fit=["L"], bootstrap=0)
    with pytest.raises(InputError, match="not a model parameter"):
        fit_record(scenario, observations, fit=["zeta"], bootstrap=0)


def _demo_module():
    spec = importlib.util.spec_from_file_location("make_demo_record", DEMO_SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_demo_record_is_reproduced_by_its_script_and_the_fit_finds_its_true_values():
    """The committed demo CSV is exactly what the committed script writes (synthetic data from
    a known model plus noise), and the 95% intervals of the fit contain the script's true s, r
    and m."""
    demo = _demo_module()
    assert DEMO.read_text(encoding="utf-8") == demo.build_record()
    scenario = _alder()
    record = read_record(DEMO)
    fit = fit_record(scenario, observations_for(record, scenario), log=True, bootstrap=0)
    for name in ("s", "r", "m"):
        low, high = fit.parameter(name).interval
        assert low <= demo.TRUE_PARAMETERS[name] <= high, (name, low, high)


def _run(argv: list[str]) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def test_cli_fit_prints_parameters_and_thresholds_with_intervals(tmp_path):
    """`planner fit DATA --scenario BASE --json` gives the issue's keys; --out writes a scenario
    the planner can read, and refuses to overwrite it (exit 2)."""
    out = tmp_path / "fitted.toml"
    html = tmp_path / "fit.html"
    argv = ["fit", str(DEMO), "--scenario", str(ALDER), "--log", "--bootstrap", "3", "--json"]
    code, stdout, stderr = _run([*argv, "--out", str(out), "--html", str(html)])
    assert code == 0, stderr
    result = json.loads(stdout)
    assert set(result["parameters"]) == {"s", "r", "m"}
    for estimate in result["parameters"].values():
        low, high = estimate["interval"]
        assert low <= estimate["value"] <= high or estimate["method"] == "bootstrap percentile"
    for kind in ("recovery", "collapse"):
        threshold = result["thresholds"][kind]
        assert isinstance(threshold["value"], float)
        assert len(threshold["interval"]) == 2
    assert load_scenario(out).model.parameters["s"] == result["parameters"]["s"]["value"]
    assert "<html" in html.read_text(encoding="utf-8")
    code, _, stderr = _run([*argv, "--out", str(out)])
    assert code == 2
    assert "exists already" in stderr


@pytest.mark.parametrize(
    "argv, expected",
    [
        (["--fit", "s,zeta"], "--fit: zeta: not a model parameter"),
        (["--fit", "L"], "--fit: L: is the control"),
        (["--state", "P"], "--state: P: write VARIABLE=COLUMN"),
        (["--state", "X=TP"], "--state: X: not a model variable"),
        (["--control-column", "inflow"], "column inflow: not found"),
    ],
)
def test_cli_fit_option_errors_exit_2(argv, expected):
    code, _, stderr = _run(["fit", str(DEMO), "--scenario", str(ALDER), *argv])
    assert code == 2
    assert expected in stderr


def test_figures_draw_the_record_the_fit_and_the_threshold_intervals():
    """The figure builders the app and the HTML pages use: observations and fitted trajectory
    against the record's years; each threshold's 95% interval shaded on the diagram."""
    from planner.figures import fit_figure, fit_hysteresis_figure

    scenario = _alder()
    record = _synthetic(np.random.default_rng(8))
    fit = fit_record(
        scenario, observations_for(record, scenario), fit=["s", "r"], log=True, bootstrap=0
    )
    figure = fit_figure(fit)
    observed = next(t for t in figure.data if t.name == "observed P")
    assert list(observed.x) == record.times.tolist()
    fitted = next(t for t in figure.data if t.name == "fitted model P")
    assert fitted.x[0] == record.times[0] and fitted.x[-1] == record.times[-1]
    bands = {
        (shape.x0, shape.x1)
        for shape in fit_hysteresis_figure(fit).layout.shapes
        if shape.fillcolor
    }
    for threshold in fit.thresholds.values():
        assert tuple(threshold.interval) in bands


# ---------------------------------------------------------------------------------------------
# The fitted scenario carries the fit's uncertainty; unidentifiable fits say so first

HANDOFF_REPLICATES = 40


@cache
def _demo_fit():
    """The demo record fitted (s, r, m on the log scale) with a small bootstrap."""
    scenario = _alder()
    observations = observations_for(read_record(DEMO), scenario)
    return fit_record(scenario, observations, log=True, bootstrap=HANDOFF_REPLICATES, seed=1)


def test_fitted_scenario_carries_the_bootstrap_as_a_joint_prior():
    """The fitted scenario's priors on the fitted parameters are one multivariate normal of
    their logarithms (the fitting scale) centred at the estimates, with the covariance of the
    bootstrap replicates as numpy.cov gives it; the base's priors on s, r, m are gone, its load
    variability and ensemble size stay, and the description and the prior say where they came
    from. Draws keep the replicates' correlations: within 5 standard errors (1 - rho^2) /
    sqrt(n) of a sample correlation (Fisher 1915, Biometrika 10:507-521, large-sample form,
    from memory)."""
    fit, base = _demo_fit(), _alder()
    fitted = fit.fitted_scenario
    joint = fitted.uncertainty.joint
    assert joint.parameters == fit.fitted == ("s", "r", "m")
    assert joint.scales == ("log", "log", "log")
    assert joint.centre == tuple(fit.parameter(n).value for n in fit.fitted)
    assert joint.centre == tuple(fitted.model.parameters[n] for n in fit.fitted)
    logs = np.log(fit.bootstrap.samples[:, :3])
    reference = np.cov(logs, rowvar=False)
    assert np.array(joint.covariance) == pytest.approx(reference, rel=1e-12, abs=0)
    assert fitted.uncertainty.priors == ()
    assert fitted.uncertainty.load_variability == base.uncertainty.load_variability
    assert fitted.uncertainty.members == base.uncertainty.members
    for text in (fitted.description, joint.origin, fit.priors_note):
        assert str(DEMO) in text and "1975 to 2024" in text, text
        assert f"{HANDOFF_REPLICATES} bootstrap refits" in text, text

    n = 20000
    drawn = draw_parameters(fitted.uncertainty.model_copy(update={"members": n}), 0, n)
    ours = np.corrcoef(np.log([drawn[name] for name in joint.parameters]))
    theirs = np.corrcoef(logs, rowvar=False)
    assert np.abs(theirs[np.triu_indices(3, 1)]).max() > 0.3  # correlations worth keeping
    assert np.all(np.abs(ours - theirs) <= 5 * (1 - theirs**2) / np.sqrt(n) + 1e-12)


def test_without_a_bootstrap_the_fitted_scenario_says_so_and_keeps_other_priors():
    """--bootstrap 0: no joint prior, the base's priors on fitted parameters dropped (they
    described the first guess), a prior on an unfitted parameter (q, held) kept; the note says
    that no bootstrap was run (common practice, no source)."""
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    q_prior = {"parameter": "q", "kind": "normal", "mean": 8.0, "sd": 0.2, "lower": 1.0}
    data["uncertainty"]["priors"].append(q_prior)
    base = scenario_from_data(data)
    fit = fit_record(
        base, observations_for(read_record(DEMO), base), fit=["s", "r"], log=True, bootstrap=0
    )
    uncertainty = fit.fitted_scenario.uncertainty
    assert uncertainty.joint is None
    assert [p.parameter for p in uncertainty.priors] == ["m", "q"]
    assert "No bootstrap" in fit.fitted_scenario.description
    assert "priors on r, s were dropped" in fit.priors_note


def _with_schedule(scenario, schedule: dict):
    data = scenario.model_dump(mode="json", exclude_none=True)
    data["schedules"].append(schedule)
    return scenario_from_data(data)


def test_ensemble_on_the_fitted_scenario_agrees_with_compare(tmp_path):
    """The fitted scenario, written and read back, and its ensemble: with the spread shrunk to
    a point (zero covariance, no load swings) every member's verdict is compare's for every
    schedule (the one engine and verdict; DESIGN.md section 9); with the fit's real spread and
    the load swings, schedules far from the recovery threshold's bootstrap interval get the
    chance compare's verdict implies: at most 0.1 for a cut held well above it, at least 0.9
    for a long cut well below it (common practice, no source)."""
    from planner.scenario import save_scenario

    fit = _demo_fit()
    path = save_scenario(fit.fitted_scenario, tmp_path / "fitted.toml")
    fitted = load_scenario(path)
    assert fitted == fit.fitted_scenario

    joint = fitted.uncertainty.joint
    point = fitted.uncertainty.model_copy(
        update={
            "joint": joint.model_copy(update={"covariance": [[0.0] * 3] * 3}),
            "load_variability": None,
        }
    )
    pointed = fitted.model_copy(update={"uncertainty": point})
    comparison = compare(pointed)
    ensemble = run_ensemble(pointed, members=8, chunk_size=5, diagram=comparison.diagram)
    for outcome, summary in zip(comparison.outcomes, ensemble.schedules, strict=True):
        assert {VERDICTS[code] for code in summary.verdicts} == {outcome.verdict}, outcome.name

    low, high = fit.thresholds["recovery"].bootstrap_interval
    held = fitted.schedules[0]
    assert held.name == "Cut to 0.12 and hold" and min(p[1] for p in held.points) > 2 * high
    deep = {
        "name": "Cut to 0.005 for 15 years",
        "kind": "overshoot",
        "start": 0.0,
        "floor": 0.005,
        "down_years": 5.0,
        "hold_years": 15.0,
        "relax_to": 0.1,
        "up_years": 3.0,
    }
    assert deep["floor"] < low / 2
    spread = _with_schedule(fitted, deep)
    far = [held, spread.schedules[-1]]
    comparison = compare(spread)
    ensemble = run_ensemble(spread, members=300, schedules=far, diagram=comparison.diagram)
    verdicts = {outcome.name: outcome.recovered for outcome in comparison.outcomes}
    assert [verdicts[s.name] for s in far] == [False, True]
    held_chance, deep_chance = (summary.p_recovered for summary in ensemble.schedules)
    assert held_chance <= 0.1 and deep_chance >= 0.9, (held_chance, deep_chance)


def test_an_unidentifiable_fit_headlines_the_warning_not_the_verdict():
    """When the record cannot tell the parameters apart (see _flat_fit), the text opens with the
    warning and calls the classification unreliable; the JSON's headline says the same. An
    identifiable fit headlines its classification (common practice, no source)."""
    flat = _flat_fit()
    text = fit_text(flat)
    first = text.splitlines()[0]
    assert first.startswith("WARNING") and "cannot tell whether the lake is" in first
    verdict = next(line for line in text.splitlines() if line.startswith("classification"))
    assert verdict.endswith(f"{flat.classification} ({UNRELIABLE})")
    assert text.index("WARNING") < text.index(flat.scenario.name)
    result = fit_json(flat)
    assert result["headline"] == first and result["classification_reliable"] is False

    fit = _demo_fit()
    assert fit.identifiable, fit.warnings
    text = fit_text(fit)
    assert "WARNING" not in text and UNRELIABLE not in text
    assert fit_json(fit)["headline"] == f"The fitted lake is {fit.classification}."


def test_cli_fit_out_says_where_the_priors_came_from(tmp_path):
    """`planner fit --out` with --bootstrap 0 writes a scenario without a joint prior or the
    base's priors on the fitted parameters, and says so on stderr."""
    out = tmp_path / "fitted.toml"
    argv = ["fit", str(DEMO), "--scenario", str(ALDER), "--log", "--bootstrap", "0"]
    code, _, stderr = _run([*argv, "--fit", "s,r", "--out", str(out)])
    assert code == 0, stderr
    assert "No bootstrap was run" in stderr
    uncertainty = load_scenario(out).uncertainty
    assert uncertainty.joint is None
    assert [p.parameter for p in uncertainty.priors] == ["m"]


def test_a_record_too_long_for_a_fit_is_refused_before_any_work(tmp_path):
    """A daily record of decades (here MAX_FIT_ROWS + 1 rows) is refused at once with the advice
    to aggregate (common practice, no source: bound the work before starting it)."""
    from planner.calibration import MAX_FIT_ROWS
    from planner.errors import InputError
    from planner.monitoring import read_record

    times = 1975.0 + np.arange(MAX_FIT_ROWS + 1) / 365.0
    lines = ["year [yr],L [g P / m2 / yr],P [g P / m2]"]
    lines += [f"{t:.5f},0.26,0.7" for t in times]
    path = tmp_path / "daily.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with pytest.raises(InputError) as error:
        observations_for(read_record(path), _alder())
    assert "(rows)" in str(error.value) and "aggregate" in str(error.value)
