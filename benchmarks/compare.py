"""Time of `compare` on a demo against a plain solve_ivp loop at matched accuracy.

The plain loop is what one would write with scipy alone: for each schedule, one solve_ivp call
over the whole horizon with the control as a function of time, no splitting at kinks. Its
tolerance is tightened until its error at the horizon (against a Radau rtol 1e-12 reference
split at every kink) is no worse than the planner's. The planner's time includes everything it
reports (diagram, verdict after settling, metrics, costs); its integration alone is shown too.

Run: python benchmarks/compare.py [scenario.toml]
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import solve_ivp

from planner.equilibria import diagram_for
from planner.outcomes import compare
from planner.scenario import load_scenario
from planner.schedules import action_timeline, control_path
from planner.simulate import integrate_path

DEFAULT = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"


def plain_rhs(system, path, timeline):
    base = {p.parameter: system.parameter(p.parameter) for p in timeline.pulses}

    def rhs(t, y):
        factors = timeline.multipliers(t)
        bound = (
            system.with_parameters(**{k: base[k] * v for k, v in factors.items()})
            if factors
            else system
        )
        return bound.rhs(y, path(t))

    return rhs


def plain_loop(scenario, rtol):
    """One solve_ivp per schedule (LSODA, tolerance rtol), split only at state rescalings."""
    system, horizon = scenario.system(), scenario.simulation.horizon
    finals = []
    for schedule in scenario.schedules:
        path = control_path(schedule, current=scenario.current_control)
        timeline = action_timeline(schedule)
        stops = sorted({0.0, horizon, *(e[0] for e in timeline.state_events if 0 < e[0] < horizon)})
        x = scenario.initial_state.copy()
        for a, b in zip(stops[:-1], stops[1:], strict=True):
            for when, variable, factor in timeline.state_events:
                if when == a:
                    x[system.variables.index(variable)] *= factor
            x = solve_ivp(
                plain_rhs(system, path, timeline),
                (a, b),
                x,
                method="LSODA",
                rtol=rtol,
                atol=rtol * 1e-2,
            ).y[:, -1]
        finals.append(x)
    return finals


def reference(scenario):
    system, horizon = scenario.system(), scenario.simulation.horizon
    finals = []
    for schedule in scenario.schedules:
        path = control_path(schedule, current=scenario.current_control)
        timeline = action_timeline(schedule)
        run = integrate_path(
            system, scenario.initial_state, path, horizon, timeline=timeline, rtol=1e-12
        )
        finals.append(run.final_state)
    return finals


def error(finals, exact):
    return max(float(np.max(np.abs(a - b) / np.abs(b))) for a, b in zip(finals, exact, strict=True))


def main() -> None:
    file = Path(sys.argv[1]) if len(sys.argv) > 1 else DEFAULT
    scenario = load_scenario(file)
    exact = reference(scenario)
    compare(scenario)  # compile once
    start = time.perf_counter()
    comparison = compare(scenario)
    t_compare = time.perf_counter() - start
    ours = error([o.trajectory.final_state for o in comparison.outcomes], exact)
    diagram = diagram_for(scenario)
    start = time.perf_counter()
    for schedule in scenario.schedules:
        integrate_path(
            scenario.system(),
            scenario.initial_state,
            control_path(schedule, current=scenario.current_control),
            scenario.simulation.horizon,
            timeline=action_timeline(schedule),
        )
    t_integrate = time.perf_counter() - start
    del diagram
    rtol, t_plain, plain_error = 1e-6, None, np.inf
    while rtol >= 1e-13:
        start = time.perf_counter()
        finals = plain_loop(scenario, rtol)
        t_plain = time.perf_counter() - start
        plain_error = error(finals, exact)
        if plain_error <= ours:
            break
        rtol /= 10
    print(
        f"scenario: {scenario.name} ({len(scenario.schedules)} schedules, "
        f"horizon {scenario.simulation.horizon:g} yr)"
    )
    print(f"{'method':<46}{'time (s)':>10}{'max rel. error at horizon':>28}")
    print(f"{'planner compare (everything it reports)':<46}{t_compare:>10.4f}{ours:>28.2e}")
    print(f"{'planner integration only':<46}{t_integrate:>10.4f}{ours:>28.2e}")
    print(
        f"{f'plain solve_ivp loop (LSODA, rtol {rtol:.0e})':<46}"
        f"{t_plain:>10.4f}{plain_error:>28.2e}"
    )
    print(f"integration ratio plain / planner: {t_plain / t_integrate:.1f}x")


if __name__ == "__main__":
    main()
