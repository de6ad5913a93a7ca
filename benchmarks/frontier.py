"""Time of a 20-depth recovery frontier against a naive grid of holds integrated one by one.

The planner brackets and bisects the verdict to 0.01 yr, integrating the descent to each floor
once and branching every trial hold from it. The naive baseline is what one would write with
scipy alone: for each depth, walk a grid of holds upward from 0, integrating the whole overshoot
with one solve_ivp call each (LSODA, the planner's tolerance, the load as a function of time),
until the state at the horizon lies below the basin boundary at relax_to; the first such hold is
its least hold. Its resolution is the grid step; the time it would need at the planner's 0.01 yr
is extrapolated from the measured time per integration and printed too.

Run: python benchmarks/frontier.py [scenario.toml] [--step YEARS]   (a 1-D scenario)
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from planner.equilibria import diagram_for
from planner.frontier import HOLD_TOLERANCE, default_depths, recovery_frontier
from planner.scenario import load_scenario
from planner.simulate import RTOL

DEFAULT = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"


def naive_frontier(scenario, diagram, depths, relax_to, step):
    """Least hold per depth by walking a grid of holds; returns (holds, integrations)."""
    system = scenario.system()
    current, rate = scenario.current_control, scenario.control.max_change_per_year
    horizon, x0 = scenario.simulation.horizon, scenario.initial_state
    threshold = diagram.recovery_threshold
    boundary = min(e.state[0] for e in diagram.equilibria_at(relax_to) if not e.stable)
    found, integrations = [], 0
    for depth in depths:
        floor = threshold - depth
        down = 0.0 if rate is None else (current - floor) / rate
        up = 0.0 if rate is None else (relax_to - floor) / rate
        least = None
        for hold in np.arange(0.0, horizon - down - up + 1e-12, step):
            times = [0.0, down, down + hold, down + hold + up]
            loads = [current, floor, floor, relax_to]
            end = solve_ivp(
                lambda t, x, times=times, loads=loads: system.rhs(x, np.interp(t, times, loads)),
                (0.0, horizon),
                x0,
                method="LSODA",
                rtol=RTOL,
                atol=RTOL * 1e-2,
            ).y[0, -1]
            integrations += 1
            if end < boundary:
                least = float(hold)
                break
        found.append(least)
    return found, integrations


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("file", nargs="?", default=str(DEFAULT))
    parser.add_argument("--step", type=float, default=0.05, help="naive grid step (years)")
    args = parser.parse_args()
    scenario = load_scenario(args.file)
    diagram = diagram_for(scenario)
    depths = default_depths(scenario, diagram.recovery_threshold, 20)
    recovery_frontier(scenario, diagram=diagram, depths=depths[:1], own_schedules=False)  # warm
    start = time.perf_counter()
    frontier = recovery_frontier(scenario, diagram=diagram, depths=depths, own_schedules=False)
    t_planner = time.perf_counter() - start
    relax_to = frontier.relax_to
    start = time.perf_counter()
    naive, integrations = naive_frontier(scenario, diagram, depths, relax_to, args.step)
    t_naive = time.perf_counter() - start
    ours = [p.duration for p in frontier.points]
    agree = all((a is None) == (b is None) for a, b in zip(ours, naive, strict=True))
    gaps = [abs(a - b) for a, b in zip(ours, naive, strict=True) if a is not None and b is not None]
    per_run = t_naive / integrations
    estimate = per_run * integrations * args.step / HOLD_TOLERANCE
    print(f"scenario: {scenario.name}; 20 depths, relax_to {relax_to:g}")
    print(f"{'method':<58}{'time (s)':>10}{'runs':>8}")
    print(
        f"{'planner frontier (bisection to 0.01 yr, shared descent)':<58}"
        f"{t_planner:>10.3f}{frontier.verdicts:>8}"
    )
    print(
        f"{f'naive grid, step {args.step:g} yr, solve_ivp one by one':<58}"
        f"{t_naive:>10.3f}{integrations:>8}"
    )
    print(f"{'naive grid at 0.01 yr (extrapolated from time per run)':<58}{estimate:>10.1f}")
    print(
        f"largest difference in least hold: {max(gaps):.3f} yr (naive step {args.step:g} yr); "
        f"same depths without a recovering hold: {agree}"
    )
    print(
        f"ratio naive / planner: {t_naive / t_planner:.1f}x measured at step {args.step:g} yr, "
        f"{estimate / t_planner:.0f}x extrapolated to 0.01 yr"
    )


if __name__ == "__main__":
    main()
