"""Time of fitting the demo record: the whole `planner fit` with its default bootstrap against
the serial way of refitting the bootstrap replicates, a plain scipy fit of the same problem, and
the cost of the early-warning indicators on a long series.

Bootstrap: `planner fit` refits all replicates together (batched Levenberg-Marquardt through the
engine) and follows each replicate's folds by Newton. The serial way is how the planner did it
before: for each replicate one scipy least_squares (trust region reflective, tolerance
BOOTSTRAP_TOLERANCE, from the linearised start) whose residuals and Jacobian come from
solve_ivp (LSODA, the model's analytic Jacobian) of the model and its forward sensitivities,
split at every recorded year, then a full diagram (continuation) of the refitted model for its
thresholds. It runs whole on the same replicates (the same resampled data sets, seed 0) as the
planner's default bootstrap; the percentile intervals of the two are compared.

Fit: the planner integrates the model and its forward sensitivities through the engine (one run
per least-squares iteration, exact Jacobian). The plain baseline is what one would write with
scipy alone: solve_ivp (LSODA) over the whole record with np.interp loads, no splitting, and
least_squares with its 2-point finite-difference Jacobian (one extra run per fitted quantity per
iteration). With the same tolerance (1e-7) and least_squares' default difference step the plain
fit stops at its start (integration noise swamps the differences), so it gets rtol 1e-9 (atol
1e-12) and a relative step of 1e-5. Both fit s, r, m and the initial P on logarithms from the
scenario's values; the estimates are printed side by side.

Indicators: `early_warning` on 20 000 points (FFT kernel smoothing, chunked rolling windows)
against a plain loop over windows with numpy and scipy.stats.

Run: python benchmarks/calibration.py
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from scipy.stats import kendalltau, skew

from planner.calibration import (
    BOOTSTRAP_TOLERANCE,
    DEFAULT_BOOTSTRAP,
    FIT_RTOL,
    MAX_EVALUATIONS,
    PARAMETER_SPAN,
    fit_record,
    observations_for,
    sensitivity_spec,
)
from planner.equilibria import diagram_for
from planner.models import compile_model
from planner.monitoring import read_record
from planner.scenario import load_scenario
from planner.signals import early_warning

ROOT = Path(__file__).resolve().parent.parent
SCENARIO = ROOT / "scenarios" / "alder-mere.toml"
RECORD = ROOT / "scenarios" / "data" / "alder-mere-monitoring.csv"
PLAIN_RTOL = 1e-9
PLAIN_STEP = 1e-5
REPEATS = 3
SEED = 0  # the default seed of `planner fit`


def plain_fit(scenario, record):
    """scipy only: least_squares (2-point Jacobian) around solve_ivp with interpolated loads."""
    loads = record.column("load")
    known = np.isfinite(loads)
    times = record.times - record.times[0]
    observed = record.column("TP")
    seen = np.isfinite(observed)
    q = scenario.model.parameters["q"]

    def residual(z):
        s, r, m, p0 = np.exp(z)

        def rate(t, y):
            load = np.interp(t, times[known], loads[known])
            return [load - s * y[0] + r * y[0] ** q / (m**q + y[0] ** q)]

        run = solve_ivp(
            rate, (0.0, times[-1]), [p0], method="LSODA", t_eval=times, rtol=PLAIN_RTOL, atol=1e-12
        )
        if run.status != 0 or np.any(run.y[0] <= 0):
            return np.full(np.count_nonzero(seen), 1e6)
        return np.log(run.y[0][seen]) - np.log(observed[seen])

    p = scenario.model.parameters
    start = np.log([p["s"], p["r"], p["m"], observed[seen][0]])
    return least_squares(residual, start, x_scale="jac", diff_step=PLAIN_STEP)


class SerialRefits:
    """The serial way: per replicate one least_squares around solve_ivp of the sensitivity
    system, split at every kink of the load path, then a full diagram of the refitted model.

    For the demo scenario (one variable; s, r, m and the initial P fitted on logarithms, the
    residuals divided by the RMS of the observations, as `planner fit` does by default)."""

    def __init__(self, scenario, observations, fit):
        self.scenario, self.observations, self.fit = scenario, observations, fit
        self.names = fit.fitted
        spec = sensitivity_spec(scenario.spec, self.names)
        self.model = compile_model(spec, scenario.control.parameter)
        self.k, self.n = len(self.names), len(scenario.spec.variables)
        self.p = self.k + self.n
        horizon = observations.horizon
        self.cuts = np.unique(np.concatenate([[0.0, horizon], observations.path.kinks(horizon)]))
        values = scenario.model.parameters
        base = np.log([values[name] for name in self.names])
        first_p = observations.values[np.argmin(observations.time_index)]
        span = np.log(PARAMETER_SPAN)
        self.lower = np.append(base - span, np.log(first_p) - span)
        self.upper = np.append(base + span, np.log(first_p) + span)
        self._last = None

    def run(self, z):
        """(predictions (m,), d predictions / dz (m, p)) or None, cached for the last z."""
        key = z.tobytes()
        if self._last is not None and self._last[0] == key:
            return self._last[1]
        natural = np.exp(z)
        values = dict(self.scenario.model.parameters)
        values.update(zip(self.names, natural[: self.k], strict=True))
        system = self.model.bind(values)
        path, obs, n, p = self.observations.path, self.observations, self.n, self.p
        x = np.zeros(n + n * p)
        x[:n] = natural[self.k :]
        for i in range(n):
            x[n + i * p + self.k + i] = 1.0
        scale = np.maximum(np.abs(x), 1.0)
        samples = np.full((x.size, obs.times.size), np.nan)
        samples[:, 0] = x
        result = None
        for a, b in zip(self.cuts[:-1], self.cuts[1:], strict=True):
            u_a, slope = float(path(a)), float(path.slope(a))
            inside = (obs.times > a) & (obs.times <= b)
            run = solve_ivp(
                lambda t, y, u_a=u_a, slope=slope, a=a: system.rhs(y, u_a + slope * (t - a)),
                (a, b),
                x,
                method="LSODA",
                jac=lambda t, y, u_a=u_a, slope=slope, a=a: system.jac(y, u_a + slope * (t - a)),
                rtol=FIT_RTOL,
                atol=scale * FIT_RTOL * 1e-2,
                t_eval=obs.times[inside],
            )
            if run.status != 0:
                break
            samples[:, inside] = run.y
            x = run.y[:, -1] if run.y.shape[1] else x
        else:
            if np.all(np.isfinite(samples)):
                predicted = samples[obs.variable_index, obs.time_index]
                sens = samples[n:].reshape(n, p, -1)
                derivative = sens[obs.variable_index, :, obs.time_index] * natural
                result = (predicted, derivative)
        self._last = (key, result)
        return result

    def refit(self, target, start):
        weights = self.fit.weights

        def residuals(z):
            result = self.run(z)
            return np.full(target.size, 1e6) if result is None else result[0] / weights - target

        def jacobian(z):
            result = self.run(z)
            if result is None:  # only at a failing start; least_squares then stops
                return np.zeros((target.size, z.size))
            return result[1] / weights[:, None]

        return least_squares(
            residuals,
            start,
            jac=jacobian,
            bounds=(self.lower, self.upper),
            method="trf",
            x_scale="jac",
            ftol=BOOTSTRAP_TOLERANCE,
            xtol=BOOTSTRAP_TOLERANCE,
            gtol=BOOTSTRAP_TOLERANCE,
            max_nfev=MAX_EVALUATIONS,
        )

    def bootstrap(self, replicates, seed):
        """Natural-scale refitted quantities (succeeded, p), thresholds by kind, counts."""
        fit, obs = self.fit, self.observations
        residuals = fit.residuals
        m = residuals.size
        fitted_values = fit.predictions / fit.weights
        groups = [np.nonzero(obs.variable_index == i)[0] for i in np.unique(obs.variable_index)]
        centred = residuals.copy()
        for group in groups:
            centred[group] -= centred[group].mean()
        inflate = np.sqrt(m / (m - self.p))
        z = np.log([*(e.value for e in fit.parameters), *(e.value for e in fit.initial_state)])
        step = np.linalg.pinv(self.run(z)[1] / fit.weights[:, None])
        rng = np.random.default_rng(seed)
        samples, found, failed = [], {"recovery": [], "collapse": []}, 0
        classes = {"reversible": 0, "hysteretic": 0, "irreversible": 0}
        for _ in range(replicates):
            noise = np.empty(m)
            for group in groups:
                noise[group] = rng.choice(centred[group], size=group.size, replace=True) * inflate
            target = fitted_values + noise
            start = np.clip(z + step @ noise, self.lower, self.upper)
            start = np.where((start > self.lower) & (start < self.upper), start, z)
            solution = self.refit(target, start)
            if solution.status <= 0 or self.run(solution.x) is None:
                failed += 1
                continue
            natural = np.exp(solution.x)
            samples.append(natural)
            values = dict(zip(self.names, map(float, natural[: self.k]), strict=True))
            model = fit.fitted_scenario.model
            replaced = model.model_copy(update={"parameters": {**model.parameters, **values}})
            diagram = diagram_for(fit.fitted_scenario.model_copy(update={"model": replaced}))
            classes[diagram.classification] += 1
            for kind, values_of_kind in found.items():
                threshold = getattr(diagram, f"{kind}_threshold")
                if threshold is not None:
                    values_of_kind.append(threshold)
        return np.array(samples), {k: np.array(v) for k, v in found.items()}, failed, classes


def best_of(function, repeats=REPEATS):
    best, result = np.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


def command_wall_time() -> float:
    """Wall time of the whole command (a new process: imports and compilation included)."""
    argv = [sys.executable, "-m", "planner.cli", "fit", str(RECORD), "--scenario", str(SCENARIO)]
    start = time.perf_counter()
    subprocess.run(argv, check=True, capture_output=True)
    return time.perf_counter() - start


def plain_indicators(x, window):
    """A loop over windows with numpy and scipy.stats (no detrending: the cost is the loop)."""
    out = []
    for start in range(x.size - window + 1):
        piece = x[start : start + window]
        centred = piece - piece.mean()
        out.append(
            (
                np.var(piece, ddof=1),
                np.sum(centred[:-1] * centred[1:]) / np.sum(centred**2),
                skew(piece),
            )
        )
    values = np.array(out)
    ends = np.arange(window - 1, x.size)
    return [kendalltau(ends, values[:, k]).statistic for k in range(3)]


def compare_bootstrap(scenario, observations) -> None:
    replicates = DEFAULT_BOOTSTRAP
    command, _ = best_of(command_wall_time)
    ours, fit = best_of(lambda: fit_record(scenario, observations, seed=SEED))
    alone, _ = best_of(lambda: fit_record(scenario, observations, bootstrap=0))
    serial = SerialRefits(scenario, observations, fit)
    start = time.perf_counter()
    samples, thresholds, failed, classes = serial.bootstrap(replicates, SEED)
    plain = time.perf_counter() - start
    boot = fit.bootstrap
    print(f"demo fit with the default bootstrap ({replicates} replicates, seed {SEED})")
    print(f"  `planner fit` command, whole (new process), best of {REPEATS}:  {command:8.2f} s")
    print(f"  fit_record in this process (batched bootstrap), best of {REPEATS}: {ours:8.2f} s")
    print(f"    of which the fit without bootstrap, best of {REPEATS}:          {alone:8.2f} s")
    print(f"  serial refits + a diagram each, all {replicates} replicates, once:  {plain:8.2f} s")
    print(
        f"  ratio serial / batched, fit included ({alone + plain:.2f} s / {ours:.2f} s): "
        f"{(alone + plain) / ours:.1f}"
    )
    print(f"  ratio serial / batched, bootstrap alone: {plain / max(ours - alone, 1e-9):.1f}")
    print(
        f"  refitted: batched {boot.succeeded} of {boot.replicates}, "
        f"serial {len(samples)} of {replicates} ({failed} failed)"
    )
    print(f"  classifications: batched {boot.classifications}, serial {classes}")
    pairs = [(e.name, e.bootstrap_interval, samples[:, i]) for i, e in enumerate(fit.parameters)]
    k = len(fit.parameters)
    pairs += [
        (e.name, e.bootstrap_interval, samples[:, k + i]) for i, e in enumerate(fit.initial_state)
    ]
    pairs += [
        (f"{kind} threshold", fit.thresholds[kind].bootstrap_interval, thresholds[kind])
        for kind in thresholds
    ]
    worst, where = 0.0, ""
    print("  95% percentile intervals, batched | serial:")
    for name, interval, values in pairs:
        reference = np.percentile(values, [2.5, 97.5])
        print(
            f"    {name:<20} {interval[0]:.6g} to {interval[1]:.6g} | "
            f"{reference[0]:.6g} to {reference[1]:.6g}"
        )
        difference = np.abs(np.array(interval) - reference) / np.abs(reference)
        if difference.max() > worst:
            worst, where = float(difference.max()), name
    # the batched fit counts replicates with no threshold apart from those whose threshold the
    # load cannot reach; the serial refits drop both
    without = {
        kind: fit.thresholds[kind].bootstrap_without + fit.thresholds[kind].bootstrap_unreachable
        for kind in thresholds
    }
    serial_without = {kind: len(samples) - thresholds[kind].size for kind in thresholds}
    print(f"  replicates without a threshold: batched {without}, serial {serial_without}")
    print(f"  largest relative difference of an interval end: {worst:.2e} ({where})")


def main() -> None:
    scenario = load_scenario(SCENARIO)
    record = read_record(RECORD)
    observations = observations_for(record, scenario)
    fit_record(scenario, observations, log=True, bootstrap=0)  # compile the sensitivities once

    compare_bootstrap(scenario, observations)

    ours, fit = best_of(lambda: fit_record(scenario, observations, log=True, bootstrap=0))
    plain, reference = best_of(lambda: plain_fit(scenario, record))
    print("fit of the demo record (s, r, m, initial P; logarithms), best of", REPEATS)
    print(f"  planner fit_record (diagram included, no bootstrap): {ours:8.3f} s")
    print(f"  plain scipy least_squares + solve_ivp:             {plain:8.3f} s")
    print(f"  ratio planner / plain: {ours / plain:.2f}")
    ours_values = [e.value for e in (*fit.parameters, *fit.initial_state)]
    print("  estimates planner:", np.round(ours_values, 5).tolist())
    print("  estimates plain:  ", np.round(np.exp(reference.x), 5).tolist())

    rng = np.random.default_rng(0)
    n = 20000
    x = np.cumsum(rng.standard_normal(n)) * 0.01 + rng.standard_normal(n)
    times = np.arange(n, dtype=float)
    window = n // 10
    ours, _ = best_of(lambda: early_warning(times, x, window=0.1))
    plain, _ = best_of(lambda: plain_indicators(x, window), repeats=1)
    print(f"indicators on {n} points, window {window}")
    print(f"  planner early_warning (with detrending): {ours:8.3f} s")
    print(f"  plain loop over windows (no detrending): {plain:8.3f} s")
    print(f"  ratio planner / plain: {ours / plain:.4f}")


if __name__ == "__main__":
    main()
