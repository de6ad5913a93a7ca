"""A 20-depth recovery frontier against scipy: a naive grid of holds, and a careful bisection.

The planner (planner.frontier.recovery_frontier) brackets and bisects the verdict to 0.01 yr
for each depth, integrating the descent to each floor once (dense output) and branching every
trial hold from it; all integration runs through the one engine (planner.integrate).

Baselines, plain scipy solve_ivp (LSODA, the engine's default rtol, atol = rtol * 1e-2) with a
hand-written scalar right-hand side (plain floats) and a hand-written piecewise-linear load;
the verdict of a 1-D lake: the state when the control reaches relax_to lies below the basin
boundary there (the lowest unstable equilibrium at relax_to), which is exact for one variable:

- naive grid: for each depth walk the holds 0, step, 2 step, ... upward, integrating the whole
  overshoot schedule (split at its kinks) for each, until one recovers; resolution = the step.
  Measured whole at the coarse step on every depth, and at the planner's resolution (0.01 yr)
  on every depth too unless --fine-depths limits it (then planner and grid are both timed on
  those depths, and the printout says so).
- careful bisection: what an engineer who thought about it writes with scipy: per floor one
  LSODA run of descent and longest hold with dense output, then per trial hold only the ramp up
  from the interpolated state, bracketing then bisecting to 0.01 yr, the previous depth's least
  hold as the first upper bracket (as the planner does).

Accuracy: each method's least holds against a reference (the bisection with DOP853 rtol 1e-12,
the whole schedule integrated per trial, bisected to 1e-5 yr).

Run: python benchmarks/frontier.py [scenario.toml] [--step YEARS] [--depths N]
(a one-variable "recycling" scenario)
"""

from __future__ import annotations

import argparse
import time
from pathlib import Path

import numpy as np
from hand_written import piecewise_linear, recycling  # noqa: I001 (a sibling script module)
from scipy.integrate import solve_ivp

from planner.equilibria import diagram_for
from planner.frontier import HOLD_TOLERANCE, default_depths, family_for, recovery_frontier
from planner.integrate import Tolerance
from planner.scenario import load_scenario

DEFAULT = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
RTOL = Tolerance().rtol  # the engine's default, which the frontier's verdicts use
ATOL = RTOL * 1e-2
REFERENCE_RTOL, REFERENCE_ATOL = 1e-12, 1e-14
REFERENCE_BRACKET = 1e-5  # years


class Lake:
    """The one-variable recycling lake by hand, under the overshoot family of the frontier."""

    def __init__(self, scenario, diagram, relax_to: float):
        if scenario.model.kind != "recycling":
            raise SystemExit("this benchmark needs a one-variable 'recycling' scenario")
        p = {k: float(v) for k, v in scenario.model.parameters.items()}
        self.s, self.r, self.q = p["s"], p["r"], p["q"]
        self.m_q = p["m"] ** p["q"]
        self.x0 = float(scenario.initial_state[0])
        self.horizon = float(scenario.simulation.horizon)
        self.family = family_for(scenario, "overshoot", relax_to)
        self.relax_to = relax_to
        self.boundary = min(e.state[0] for e in diagram.equilibria_at(relax_to) if not e.stable)

    def rhs_for(self, times: list[float], values: list[float]):
        s, r, q, m_q = self.s, self.r, self.q, self.m_q
        return recycling(piecewise_linear(times, values), s, r, q, m_q)

    def schedule(self, floor: float, hold: float) -> tuple[list[float], list[float]]:
        family = self.family
        down = family.leave_time(floor, 0.0)
        _, up = family.relaxation(floor)
        times = [0.0, down, down + hold, down + hold + up]
        values = [family.current, floor, floor, self.relax_to]
        return times, values

    def whole(self, floor: float, hold: float, method: str, rtol: float, atol: float) -> bool:
        """Recovered: the whole schedule, split at its kinks, up to the end of the ramp up."""
        times, values = self.schedule(floor, hold)
        rhs, jac = self.rhs_for(times, values)
        cuts = sorted({t for t in times if 0.0 <= t <= self.horizon})
        x = [self.x0]
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            if b - a <= 1e-12:
                continue
            implicit = {"jac": jac} if method in ("LSODA", "Radau", "BDF") else {}
            x = solve_ivp(rhs, (a, b), x, method=method, rtol=rtol, atol=atol, **implicit).y[:, -1]
        return bool(x[0] < self.boundary)

    def fits(self, floor: float, hold: float) -> bool:
        return hold <= self.family.max_hold(floor) + 1e-9 * self.horizon


def naive_grid(lake: Lake, floors, step: float) -> tuple[list[float | None], int]:
    """Least hold per floor by walking holds upward in steps; (holds, integrations)."""
    found, runs = [], 0
    for floor in floors:
        least = None
        for hold in np.arange(0.0, lake.family.max_hold(floor) + 1e-12, step):
            runs += 1
            if lake.whole(floor, float(hold), "LSODA", RTOL, ATOL):
                least = float(hold)
                break
        found.append(least)
    return found, runs


class SharedDescent:
    """Per floor, one dense LSODA run of the descent and the longest hold; a trial hold then
    integrates only the ramp up from the interpolated state."""

    def __init__(self, lake: Lake):
        self.lake = lake
        self.runs = 0
        self._floor = None
        self._dense = None

    def __call__(self, floor: float, hold: float) -> bool:
        lake = self.lake
        if not lake.fits(floor, hold):
            return False
        self.runs += 1
        family = lake.family
        down = family.leave_time(floor, 0.0)
        if self._floor != floor:
            times = [0.0, down]
            values = [family.current, floor]
            rhs, jac = lake.rhs_for(times, values)
            end = down + max(family.max_hold(floor), 0.0)
            x = [lake.x0]
            pieces = []
            for a, b in ((0.0, down), (down, end)):
                if b - a <= 1e-12:
                    continue
                run = solve_ivp(
                    rhs, (a, b), x, method="LSODA", rtol=RTOL, atol=ATOL, jac=jac, dense_output=True
                )
                pieces.append((a, b, run.sol))
                x = run.y[:, -1]
            self._floor, self._dense = floor, pieces
        leave = down + hold
        x = None
        for a, b, sol in self._dense:
            if a - 1e-12 <= leave <= b + 1e-12:
                x = sol(min(max(leave, a), b))
        if x is None:
            x = np.array([lake.x0])
        _, up = family.relaxation(floor)
        if up > 0:
            rhs, jac = lake.rhs_for([0.0, up], [floor, lake.relax_to])
            x = solve_ivp(rhs, (0.0, up), x, method="LSODA", rtol=RTOL, atol=ATOL, jac=jac).y[:, -1]
        return bool(x[0] < lake.boundary)


def bisection(verdict, lake: Lake, floors, tolerance: float) -> list[float | None]:
    """Least hold per floor (shallow to deep) by bracketing then bisection, as the planner."""
    found, previous = [], None
    for floor in floors:
        low, high = 0.0, lake.family.max_hold(floor)
        if high < low:
            found.append(None)
            continue
        if verdict(floor, low):
            found.append(low)
            previous = low
            continue
        if previous is not None and low < previous < high and verdict(floor, previous):
            high = previous
        elif not verdict(floor, high):
            found.append(None)
            continue
        while high - low > tolerance:
            middle = 0.5 * (low + high)
            if verdict(floor, middle):
                high = middle
            else:
                low = middle
        found.append(high)
        previous = high
    return found


def reference_holds(lake: Lake, floors) -> list[float | None]:
    def verdict(floor, hold):
        if not lake.fits(floor, hold):
            return False
        return lake.whole(floor, hold, "DOP853", REFERENCE_RTOL, REFERENCE_ATOL)

    return bisection(verdict, lake, floors, REFERENCE_BRACKET)


def worst_gap(found, reference) -> str:
    gaps = []
    for a, b in zip(found, reference, strict=True):
        if (a is None) != (b is None):
            return "disagrees on which depths recover"
        if a is not None:
            gaps.append(abs(a - b))
    return f"{max(gaps):.4f} yr" if gaps else "n/a"


def timed(function):
    start = time.perf_counter()
    result = function()
    return time.perf_counter() - start, result


def planner_frontier(scenario, diagram, depths):
    frontier = recovery_frontier(scenario, diagram=diagram, depths=depths, own_schedules=False)
    return [p.hold_years for p in frontier.points], frontier


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("file", nargs="?", default=str(DEFAULT))
    parser.add_argument("--depths", type=int, default=20, help="depths of the frontier")
    parser.add_argument("--step", type=float, default=0.05, help="coarse naive grid step (yr)")
    parser.add_argument(
        "--fine-depths",
        type=int,
        default=None,
        help="run the naive grid at 0.01 yr on only the deepest N depths (default: all)",
    )
    args = parser.parse_args()
    scenario = load_scenario(args.file)
    diagram = diagram_for(scenario)
    depths = default_depths(scenario, diagram.recovery_threshold, args.depths)
    recovery_frontier(scenario, diagram=diagram, depths=depths[:1], own_schedules=False)  # warm
    t_planner, (ours, frontier) = timed(lambda: planner_frontier(scenario, diagram, depths))
    lake = Lake(scenario, diagram, frontier.relax_to)
    floors = [diagram.recovery_threshold - float(d) for d in depths]
    reference = reference_holds(lake, floors)
    t_coarse, (coarse, coarse_runs) = timed(lambda: naive_grid(lake, floors, args.step))
    shared = SharedDescent(lake)
    t_bisect, careful = timed(lambda: bisection(shared, lake, floors, HOLD_TOLERANCE))

    fine_count = len(floors) if args.fine_depths is None else min(args.fine_depths, len(floors))
    fine_floors = floors[-fine_count:]
    t_fine, (fine, fine_runs) = timed(lambda: naive_grid(lake, fine_floors, HOLD_TOLERANCE))
    if fine_count < len(floors):
        fine_depths = depths[-fine_count:]
        t_planner_fine, (ours_fine, frontier_fine) = timed(
            lambda: planner_frontier(scenario, diagram, fine_depths)
        )
        planner_fine_runs = frontier_fine.verdicts
    else:
        t_planner_fine, ours_fine, planner_fine_runs = t_planner, ours, frontier.verdicts

    print(
        f"scenario: {scenario.name}; {len(depths)} depths, relax_to {frontier.relax_to:g}, "
        f"horizon {lake.horizon:g} yr"
    )
    print(
        f"reference: bisection to {REFERENCE_BRACKET:g} yr, DOP853 rtol {REFERENCE_RTOL:g}, "
        "whole schedule per trial"
    )
    print(f"{'method':<62}{'time (s)':>10}{'runs':>8}{'worst |hold - ref|':>20}")
    rows = [
        ("planner frontier (bisection to 0.01 yr, engine)", t_planner, frontier.verdicts, ours),
        (
            "scipy careful bisection to 0.01 yr (shared descent)",
            t_bisect,
            shared.runs,
            careful,
        ),
        (f"scipy naive grid, step {args.step:g} yr, whole runs", t_coarse, coarse_runs, coarse),
    ]
    for name, seconds, runs, found in rows:
        print(f"{name:<62}{seconds:>10.3f}{runs:>8}{worst_gap(found, reference):>20}")
    fine_reference = reference[-fine_count:]
    if fine_count < len(floors):
        print(
            f"on the deepest {fine_count} depths only (the fine naive grid is measured whole "
            "there, not scaled up):"
        )
        print(
            f"{'  planner frontier, same depths':<62}{t_planner_fine:>10.3f}"
            f"{planner_fine_runs:>8}{worst_gap(ours_fine, fine_reference):>20}"
        )
    print(
        f"{f'scipy naive grid, step {HOLD_TOLERANCE:g} yr, whole runs':<62}{t_fine:>10.3f}"
        f"{fine_runs:>8}{worst_gap(fine, fine_reference):>20}"
    )
    print(
        f"ratio careful scipy bisection / planner: {t_bisect / t_planner:.2f}x"
        + ("" if t_bisect >= t_planner else "  (we are behind the careful scipy bisection)")
    )
    print(
        f"ratio naive grid / planner: {t_coarse / t_planner:.1f}x at step {args.step:g} yr "
        f"(coarser than ours); {t_fine / t_planner_fine:.1f}x at {HOLD_TOLERANCE:g} yr"
        + ("" if fine_count == len(floors) else f" on {fine_count} depths")
    )


if __name__ == "__main__":
    main()
