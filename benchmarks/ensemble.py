"""Ensemble engine against a plain loop of scipy solve_ivp calls, its overhead over the bare
right-hand side, its peak memory at 10^6 members, and the speed-up of 2 Dask workers over 1.

Scenario: the Alder Mere demo (one-variable recycling model) with its priors on r, m and s and
its noisy loads (lognormal yearly factors, cv 0.2, lag-1 autocorrelation 0.3), the horizon
set to 50 years, one schedule (the deep cut and relax).

1. 10,000 members x 50 years. The plain loop is what one writes with scipy alone: for each
   member, solve_ivp (LSODA, rtol 1e-8, atol 1e-10) over every piece between the year
   boundaries and the schedule's kinks (where the load jumps or bends), then solve_ivp for
   5000 years with the final load held, and the verdict from the roots of the member's
   right-hand side (brentq). It runs on a subsample of members; its time is scaled linearly
   to 10,000 (time x 10,000 / subsample). The accuracy difference is the largest relative
   difference of P between the engine and the loop at the yearly samples, and the share of
   subsample verdicts on which they agree.
2. The engine's time against the bare cost of the right-hand side for the same steps: four
   calls of System.rhs per Runge-Kutta step on arrays of the engine's chunk shape, with the
   members' parameter arrays, and nothing else.
3. Peak memory for 10^6 members (summaries only): the peak resident set size of a fresh
   process that runs them, next to its size after the imports.
4. Two Dask worker processes against one (LocalCluster on 127.0.0.1, one thread each).

Run: python benchmarks/ensemble.py [--subsample N] [--quick]
"""

from __future__ import annotations

import argparse
import math
import os
import resource
import subprocess
import sys
import time
import tomllib
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from planner.ensemble import (
    DEFAULT_CHUNK,
    RECOVERED,
    draw_load_factors,
    draw_parameters,
    run_ensemble,
    steps_per_year,
)
from planner.equilibria import diagram_for
from planner.scenario import scenario_from_data
from planner.schedules import control_path

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
SCHEDULE = "Deep cut to 0.6 for 6 years, relax to 1.5"
HORIZON = 50.0
MEMBERS = 10_000
MEMORY_MEMBERS = 1_000_000
DASK_MEMBERS = 80_000
DASK_CHUNK = 5_000


def scenario(members: int = MEMBERS):
    data = tomllib.loads(DEMO.read_text(encoding="utf-8"))
    data["simulation"]["horizon"] = HORIZON
    data["schedules"] = [s for s in data["schedules"] if s["name"] == SCHEDULE]
    data["uncertainty"]["members"] = members
    return scenario_from_data(data)


def cuts_of(path, horizon: float) -> np.ndarray:
    years = np.arange(0.0, math.floor(horizon) + 1.0)
    return np.unique(np.concatenate([[0.0, horizon], path.kinks(horizon), years]))


def plain_member(sc, path, params: dict, factors: np.ndarray, sample_times: np.ndarray):
    """One member with scipy alone: yearly P samples and the verdict (True: recovered)."""
    p = dict(sc.model.parameters)
    p.update({name: float(value) for name, value in params.items()})
    s, r, m, q = p["s"], p["r"], p["m"], p["q"]

    def f(x, load):
        return load - s * x + r * x**q / (m**q + x**q)

    x = sc.initial_state.copy()
    samples = {0.0: x[0]}
    cuts = cuts_of(path, HORIZON)
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        u_a, slope = path(a), path.slope(a)
        factor = factors[min(int(math.floor(0.5 * (a + b))), len(factors) - 1)]
        x = solve_ivp(
            lambda t, y, u_a=u_a, slope=slope, a=a, factor=factor: f(
                y, (u_a + slope * (t - a)) * factor
            ),
            (a, b),
            x,
            method="LSODA",
            rtol=1e-8,
            atol=1e-10,
        ).y[:, -1]
        if b in sample_times:
            samples[b] = x[0]
    final = float(path(HORIZON))
    settled = solve_ivp(
        lambda t, y: f(y, final), (0.0, 5000.0), x, method="LSODA", rtol=1e-8, atol=1e-10
    ).y[0, -1]
    grid = np.linspace(1e-6, 20.0, 4001)
    values = f(grid, final)
    roots = [
        brentq(lambda z: f(z, final), grid[i], grid[i + 1])
        for i in np.nonzero(np.sign(values[:-1]) != np.sign(values[1:]))[0]
    ]
    stable = [z for z in roots if (f(z + 1e-6, final) - f(z - 1e-6, final)) < 0]
    recovered = bool(stable) and abs(settled - min(stable)) < 1e-3 * max(1.0, min(stable))
    return np.array([samples[t] for t in sample_times]), recovered


def part_one_and_two(subsample: int) -> None:
    sc = scenario()
    diagram = diagram_for(sc)
    run_ensemble(sc, members=64, diagram=diagram)  # compile and warm up
    start = time.perf_counter()
    ensemble = run_ensemble(sc, diagram=diagram, keep_trajectories=True)
    t_engine = time.perf_counter() - start
    summary = ensemble.schedules[0]
    path = control_path(sc.schedules[0], current=sc.current_control)
    sample_times = summary.fan.times
    chosen = np.linspace(0, MEMBERS - 1, subsample).astype(int)
    params = draw_parameters(sc.uncertainty, 0, MEMBERS)
    factors = draw_load_factors(sc.uncertainty, math.ceil(HORIZON), 0, MEMBERS)
    start = time.perf_counter()
    plain = [
        plain_member(sc, path, {k: v[i] for k, v in params.items()}, factors[:, i], sample_times)
        for i in chosen
    ]
    t_plain = time.perf_counter() - start
    t_plain_scaled = t_plain * MEMBERS / subsample
    ours = summary.trajectories[chosen, 0, :]
    reference = np.array([p[0] for p in plain])
    difference = float(np.max(np.abs(ours - reference) / np.abs(reference)))
    plain_recovered = np.array([p[1] for p in plain])
    agree = np.mean((summary.verdicts[chosen] == RECOVERED) == plain_recovered)
    print(
        f"1. {MEMBERS} members x {HORIZON:g} years, noisy loads, priors on r, m, s "
        f"({ensemble.steps_per_year:g} Runge-Kutta steps a year)"
    )
    print(f"   engine (local, one process)                       {t_engine:9.2f} s")
    print(
        f"   plain solve_ivp loop, {subsample} members            {t_plain:9.2f} s  "
        f"-> x {MEMBERS}/{subsample} = {t_plain_scaled:9.1f} s for {MEMBERS}"
    )
    print(
        f"   ratio plain / engine                              {t_plain_scaled / t_engine:9.0f}x"
        "  (target: at least 100x)"
    )
    print(f"   largest relative difference of P at yearly samples {difference:9.1e}")
    print(f"   verdicts agreeing on the subsample                 {agree:9.1%}")
    print(f"   P(recovered) = {summary.p_recovered:.4f}, 95% interval {summary.interval}")

    # 2. bare right-hand side for the same steps
    per_year = steps_per_year(sc, diagram, [path])
    cuts = cuts_of(path, HORIZON)
    steps = sum(
        max(1, math.ceil((b - a) * per_year - 1e-9))
        for a, b in zip(cuts[:-1], cuts[1:], strict=True)
        if b - a > 1e-12
    )
    base = sc.system()
    start_bare = time.perf_counter()
    for first in range(0, MEMBERS, DEFAULT_CHUNK):
        last = min(first + DEFAULT_CHUNK, MEMBERS)
        system = base.with_parameters(**draw_parameters(sc.uncertainty, first, last))
        x = np.repeat(sc.initial_state[:, None], last - first, axis=1)
        u = np.full(last - first, sc.current_control)
        for _ in range(4 * steps):
            system.rhs(x, u)
    t_bare = time.perf_counter() - start_bare
    start = time.perf_counter()
    run_ensemble(sc, diagram=diagram)  # summaries only, as in normal use
    t_summaries = time.perf_counter() - start
    print(f"2. bare right-hand side, {4 * steps} calls per chunk    {t_bare:9.2f} s")
    print(f"   engine, summaries only                            {t_summaries:9.2f} s")
    print(
        f"   ratio engine / bare right-hand side               {t_summaries / t_bare:9.2f}x"
        "  (target: at most 3x)"
    )


def memory_child() -> None:
    sc = scenario(MEMORY_MEMBERS)
    diagram = diagram_for(sc)
    before = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    start = time.perf_counter()
    ensemble = run_ensemble(sc, diagram=diagram)
    seconds = time.perf_counter() - start
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    s = ensemble.schedules[0]
    print(f"{before:.0f} {peak:.0f} {seconds:.1f} {s.p_recovered:.5f}")


def part_three() -> None:
    out = subprocess.run(
        [sys.executable, __file__, "--memory-child"], capture_output=True, text=True, check=True
    ).stdout.split()
    before, peak, seconds, p = (float(v) for v in out)
    print(f"3. {MEMORY_MEMBERS:,} members x {HORIZON:g} years, summaries only ({seconds:.0f} s)")
    print(f"   resident size after imports                       {before:9.0f} MB")
    print(
        f"   peak resident size of the whole process            {peak:9.0f} MB"
        "  (target: under 1 GB)"
    )
    print(f"   P(recovered) = {p}")


def _compile_on_worker(sc) -> bool:
    sc.system()  # compiles the model once in this worker process
    return True


def _cpu_seconds() -> float:
    usage = resource.getrusage(resource.RUSAGE_SELF)
    return usage.ru_utime + usage.ru_stime


def part_four() -> None:
    from dask.distributed import Client, LocalCluster

    sc = scenario(DASK_MEMBERS)
    diagram = diagram_for(sc)
    times, cpu = {}, {}
    for workers in (1, 2):
        with (
            LocalCluster(
                n_workers=workers,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
            ) as cluster,
            Client(cluster) as client,
        ):
            client.run(_compile_on_worker, sc)
            address = cluster.scheduler_address
            before = client.run(_cpu_seconds)
            start = time.perf_counter()
            result = run_ensemble(sc, chunk_size=DASK_CHUNK, diagram=diagram, scheduler=address)
            times[workers] = time.perf_counter() - start
            after = client.run(_cpu_seconds)
            cpu[workers] = [after[w] - before[w] for w in sorted(after)]
            p = result.schedules[0].p_recovered
    load = ", ".join(f"{v:.1f}" for v in os.getloadavg())
    print(f"4. Dask, {DASK_MEMBERS} members in chunks of {DASK_CHUNK} (P(recovered) = {p})")
    print(f"   load average of the shared machine (1, 5, 15 min): {load}")
    for workers in (1, 2):
        used = " + ".join(f"{c:.2f}" for c in cpu[workers])
        print(
            f"   {workers} worker process{'es' if workers > 1 else '  '}"
            f"                                {times[workers]:9.2f} s"
            f"  (CPU seconds per worker: {used})"
        )
    print(
        f"   speed-up                                          {times[1] / times[2]:9.2f}x"
        "  (target: at least 1.6x)"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--subsample", type=int, default=100)
    parser.add_argument("--memory-child", action="store_true", help=argparse.SUPPRESS)
    parser.add_argument("--quick", action="store_true", help="skip the 10^6-member run")
    parser.add_argument("--only-dask", action="store_true", help="run part 4 alone")
    args = parser.parse_args()
    if args.memory_child:
        memory_child()
        return
    print(f"machine: {sys.platform}, shared with other work; times are wall-clock")
    if args.only_dask:
        part_four()
        return
    part_one_and_two(args.subsample)
    if not args.quick:
        part_three()
    part_four()


if __name__ == "__main__":
    main()
