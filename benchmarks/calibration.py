"""Time of fitting the demo record against a plain scipy fit of the same problem, and the cost
of the early-warning indicators on a long series.

Fit: the planner integrates the model and its forward sensitivities with integrate_path (split
at every recorded year, one run per least-squares iteration, exact Jacobian). The plain baseline
is what one would write with scipy alone: solve_ivp (LSODA) over the whole record with np.interp
loads, no splitting, and least_squares with its 2-point finite-difference Jacobian (one extra run
per fitted quantity per iteration). With the same tolerance (1e-7) and least_squares' default
difference step the plain fit stops at its start (integration noise swamps the differences), so
it gets rtol 1e-9 (atol 1e-12) and a relative step of 1e-5. Both fit s, r, m and the initial P
on logarithms from the scenario's values; the estimates are printed side by side. The planner's
time includes the diagram of the fitted model and the covariance intervals; the bootstrap is
timed separately.

Indicators: `early_warning` on 20 000 points (FFT kernel smoothing, chunked rolling windows)
against a plain loop over windows with numpy and scipy.stats.

Run: python benchmarks/calibration.py
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import least_squares
from scipy.stats import kendalltau, skew

from planner.calibration import fit_record, observations_for
from planner.monitoring import read_record
from planner.scenario import load_scenario
from planner.signals import early_warning

ROOT = Path(__file__).resolve().parent.parent
SCENARIO = ROOT / "scenarios" / "alder-mere.toml"
RECORD = ROOT / "scenarios" / "data" / "alder-mere-monitoring.csv"
PLAIN_RTOL = 1e-9
PLAIN_STEP = 1e-5
REPEATS = 3


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


def best_of(function, repeats=REPEATS):
    best, result = np.inf, None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        best = min(best, time.perf_counter() - start)
    return best, result


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


def main() -> None:
    scenario = load_scenario(SCENARIO)
    record = read_record(RECORD)
    observations = observations_for(record, scenario)
    fit_record(scenario, observations, log=True, bootstrap=0)  # compile the sensitivities once

    ours, fit = best_of(lambda: fit_record(scenario, observations, log=True, bootstrap=0))
    plain, reference = best_of(lambda: plain_fit(scenario, record))
    print("fit of the demo record (s, r, m, initial P; logarithms), best of", REPEATS)
    print(f"  planner fit_record (diagram included, no bootstrap): {ours:8.3f} s")
    print(f"  plain scipy least_squares + solve_ivp:             {plain:8.3f} s")
    print(f"  ratio planner / plain: {ours / plain:.2f}")
    ours_values = [e.value for e in (*fit.parameters, *fit.initial_state)]
    print("  estimates planner:", np.round(ours_values, 5).tolist())
    print("  estimates plain:  ", np.round(np.exp(reference.x), 5).tolist())
    replicates = 20
    boot, _ = best_of(
        lambda: fit_record(scenario, observations, log=True, bootstrap=replicates), repeats=1
    )
    each = (boot - ours) / replicates
    print(f"  with {replicates} bootstrap replicates: {boot:.2f} s ({each:.3f} s each)")

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
