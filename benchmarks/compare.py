"""compare's single-run integrations against scipy LSODA with a hand-written scalar right-hand
side, at matched accuracy, on every demo in scenarios/.

For every schedule of every demo:

- Ours: planner.integrate.integrate(Problem(system, x0, path, horizon, actions), save=...,
  watch=..., limits=...) exactly as planner.outcomes.evaluate calls it (samples every 0.1 yr,
  solver steps kept, the target watched), timed alone; also "bare" (yearly samples only, no
  watch) and the whole compare(scenario, diagram=...) (integration, settling, verdict, metrics,
  costs) per demo.
- Baseline: what a careful engineer writes with scipy alone: solve_ivp(method="LSODA") with a
  scalar right-hand side written by hand in plain Python floats (math, returning a list) and its
  hand-written Jacobian, the load from a hand-written piecewise-linear function of the
  schedule's breakpoints; split at the in-lake actions (scale-state jumps and the start and end
  of each parameter pulse, whose multiplier is applied piecewise: constant during the pulse,
  exponential decay after it), with t_eval at the yearly samples. Its rtol is the loosest of
  1e-3, 7.5e-4, ... 1e-12 (eighths of a decade; atol = rtol * 1e-3) whose largest relative
  error over the demo's schedules is no worse than ours.
- Reference for both errors: Radau rtol 1e-12 with the same hand-written functions, split at
  every kink of the path, every action time and every yearly sample.

Errors: largest relative difference from the reference over the state variables at the yearly
samples (times of state rescalings left out: before or after is a convention).
Times: both warmed up (the first call compiles), best of 5 repetitions per schedule.
Target: our integration time / baseline time <= 1.0.

Run: python benchmarks/compare.py [scenario.toml ...] [--repeats N]
"""

from __future__ import annotations

import argparse
import math
import time
from pathlib import Path

import numpy as np
from hand_written import piecewise_linear, recycling  # noqa: I001 (a sibling script module)
from scipy.integrate import solve_ivp

from planner.equilibria import diagram_for
from planner.integrate import Problem, Save, integrate
from planner.metrics import limits_for, plan, watch_for
from planner.outcomes import compare
from planner.scenario import load_scenario

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
CANDIDATE_RTOLS = tuple(
    10.0 ** (-k / 8) for k in range(24, 97)
)  # 1e-3 ... 1e-12, eighths of a decade
ATOL_PER_RTOL = 1e-3
REFERENCE_RTOL, REFERENCE_ATOL = 1e-12, 1e-14
TARGET_RATIO = 1.0
SAME_TIME = 1e-9


# ---------------------------------------------------------------------------------------------
# Hand-written model functions (plain floats)


def load_function(path):
    """u(t) of a piecewise-linear path by hand: right-continuous at jumps, held after the end."""
    return piecewise_linear([float(t) for t in path.times], [float(v) for v in path.values])


def multiplier_function(pulses, parameter: str, a: float, b: float):
    """The product of ``parameter``'s pulse multipliers on [a, b] (no pulse boundary inside):
    a constant, or a function of t while some pulse decays."""
    constant, decaying = 1.0, []
    middle = 0.5 * (a + b)
    for pulse in pulses:
        if pulse.parameter != parameter:
            continue
        end = pulse.start + pulse.duration
        if pulse.start <= middle < end:
            constant *= pulse.factor
        elif middle >= end and pulse.decay_years > 0:
            decaying.append((pulse.factor - 1.0, end, pulse.decay_years))
    if not decaying:
        return constant, None

    def multiplier(t):
        value = constant
        for amplitude, end, decay in decaying:
            value *= 1.0 + amplitude * math.exp(-(t - end) / decay)
        return value

    return constant, multiplier


def hand_written(kind: str, parameters: dict, load, pulses, a: float, b: float):
    """(rhs, jac) on [a, b] in plain Python floats for the built-in models of the demos."""
    if kind == "recycling":
        s, m, q = parameters["s"], parameters["m"], parameters["q"]
        r0, r_of_t = multiplier_function(pulses, "r", a, b)
        r0 *= parameters["r"]
        base_r = parameters["r"]
        m_q = m**q
        if r_of_t is None:
            rhs, jac = recycling(load, s, r0, q, m_q)
        else:

            def rhs(t, y):
                p = y[0]
                p_q = p**q
                return [load(t) - s * p + base_r * r_of_t(t) * p_q / (m_q + p_q)]

            def jac(t, y):
                p = y[0]
                d = m_q + p**q
                return [[-s + base_r * r_of_t(t) * q * p ** (q - 1.0) * m_q / (d * d)]]

        return rhs, jac
    if kind == "recycling-sediment":
        s, h, burial = parameters["s"], parameters["h"], parameters["b"]
        m, q = parameters["m"], parameters["q"]
        r0, r_of_t = multiplier_function(pulses, "r", a, b)
        r0 *= parameters["r"]
        base_r = parameters["r"]
        m_q = m**q
        loss = s + h

        def rates(t):
            return r0 if r_of_t is None else base_r * r_of_t(t)

        def rhs(t, y):
            x, mud = y[0], y[1]
            x_q = x**q
            recycled = rates(t) * mud * x_q / (m_q + x_q)
            return [load(t) - loss * x + recycled, s * x - burial * mud - recycled]

        def jac(t, y):
            x, mud = y[0], y[1]
            x_q = x**q
            d = m_q + x_q
            r = rates(t)
            f = x_q / d
            df = q * x ** (q - 1.0) * m_q / (d * d)
            return [[-loss + r * mud * df, r * f], [s - r * mud * df, -burial - r * f]]

        return rhs, jac
    raise SystemExit(f"no hand-written right-hand side for model kind {kind!r}")


# ---------------------------------------------------------------------------------------------
# Baseline and reference


def sample_years(horizon: float) -> np.ndarray:
    return np.unique(np.append(np.arange(0.0, math.floor(horizon) + 1.0), horizon))


class Case:
    """One schedule of one demo, with everything both sides need."""

    def __init__(self, scenario, schedule):
        self.scenario = scenario
        self.schedule = schedule
        self.planned = plan(scenario, schedule)
        self.horizon = float(scenario.simulation.horizon)
        self.kind = scenario.model.kind
        self.parameters = {k: float(v) for k, v in scenario.model.parameters.items()}
        self.variables = scenario.spec.variables
        self.samples = sample_years(self.horizon)
        timeline = self.planned.timeline
        self.events = timeline.state_events
        self.pulses = timeline.pulses
        event_times = [e[0] for e in self.events]
        self.compared = np.array(
            [all(abs(t - e) > SAME_TIME for e in event_times) for t in self.samples]
        )
        self.action_cuts = self._cuts(())
        self.reference_cuts = self._cuts((*self.planned.path.kinks(self.horizon), *self.samples))

    def _cuts(self, extra) -> list[float]:
        times = [0.0, self.horizon, *extra]
        times += [e[0] for e in self.events]
        for pulse in self.pulses:
            times += [pulse.start, pulse.start + pulse.duration]
        times = sorted(t for t in set(float(t) for t in times) if 0.0 <= t <= self.horizon)
        kept = [times[0]]
        for t in times[1:]:
            if t - kept[-1] > SAME_TIME:
                kept.append(t)
        return kept

    def _rescale(self, x: np.ndarray, a: float) -> None:
        for when, variable, factor in self.events:
            if abs(when - a) <= SAME_TIME:
                x[self.variables.index(variable)] *= factor

    def solve(self, cuts, method: str, rtol: float, atol: float) -> np.ndarray:
        """States at the yearly samples (n, samples), one solve_ivp per stretch."""
        load = load_function(self.planned.path)
        x = np.array(self.scenario.initial_state, dtype=float)
        out = np.full((x.size, self.samples.size), np.nan)
        for a, b in zip(cuts[:-1], cuts[1:], strict=True):
            self._rescale(x, a)
            rhs, jac = hand_written(self.kind, self.parameters, load, self.pulses, a, b)
            inside = (self.samples >= a - SAME_TIME) & (self.samples <= b + SAME_TIME)
            # The stretch's end is always asked for: it is the next stretch's start.
            wanted = np.clip(self.samples[inside], a, b)
            t_eval = np.append(wanted[wanted < b], b)
            run = solve_ivp(
                rhs, (a, b), x, method=method, rtol=rtol, atol=atol, jac=jac, t_eval=t_eval
            )
            if run.status != 0:
                raise RuntimeError(f"{method} failed on [{a:g}, {b:g}]: {run.message}")
            out[:, inside] = run.y[:, : wanted.size]
            x = run.y[:, -1].copy()
        return out

    def baseline(self, rtol: float) -> np.ndarray:
        return self.solve(self.action_cuts, "LSODA", rtol, rtol * ATOL_PER_RTOL)

    def reference(self) -> np.ndarray:
        return self.solve(self.reference_cuts, "Radau", REFERENCE_RTOL, REFERENCE_ATOL)

    # Ours --------------------------------------------------------------------------------

    def problem(self) -> Problem:
        sc = self.scenario
        return Problem(
            sc.system(), sc.initial_state, self.planned.path, self.horizon, self.planned.timeline
        )

    def ours(self):
        """As planner.outcomes.evaluate integrates a schedule."""
        return integrate(
            self.problem(),
            save=Save(steps=True),
            watch=watch_for(self.scenario),
            limits=limits_for(self.scenario),
        )

    def ours_bare(self):
        return integrate(self.problem(), save=Save(every=1.0), limits=limits_for(self.scenario))

    def ours_at_samples(self, solution) -> np.ndarray:
        times = solution.sample_times
        index = [int(np.argmin(np.abs(times - t))) for t in self.samples]
        if np.max(np.abs(times[index] - self.samples)) > SAME_TIME:
            raise RuntimeError("our samples miss a yearly time")
        return solution.samples[index, :, 0].T


def error(values: np.ndarray, reference: np.ndarray, compared: np.ndarray) -> float:
    v, r = values[:, compared], reference[:, compared]
    return float(np.max(np.abs(v - r) / np.maximum(np.abs(r), 1e-300)))


def best_time(function, repeats: int) -> float:
    best = math.inf
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        best = min(best, time.perf_counter() - start)
    return best


# ---------------------------------------------------------------------------------------------


def run_demo(file: Path, repeats: int) -> tuple[float, float]:
    scenario = load_scenario(file)
    start = time.perf_counter()
    diagram = diagram_for(scenario)
    t_diagram = time.perf_counter() - start
    cases = [Case(scenario, s) for s in scenario.schedules]
    references = [case.reference() for case in cases]
    for case in cases:  # warm up: compile, specialise
        case.ours()
        case.ours_bare()
        case.baseline(1e-6)
    compare(scenario, diagram=diagram)
    ours_errors = [
        # the same integration as ours(), with the yearly states interpolated for the check
        error(c.ours_at_samples(c.ours_bare()), ref, c.compared)
        for c, ref in zip(cases, references, strict=True)
    ]
    e_ours = max(ours_errors)
    chosen, base_errors, tried = None, [], []
    for rtol in CANDIDATE_RTOLS:
        base_errors = [
            error(c.baseline(rtol), ref, c.compared)
            for c, ref in zip(cases, references, strict=True)
        ]
        tried.append(f"{rtol:.1e}: {max(base_errors):.1e}")
        if max(base_errors) <= e_ours:
            chosen = rtol
            break
    note = ""
    if chosen is None:
        chosen = CANDIDATE_RTOLS[-1]
        note = " (no candidate matched our accuracy; the tightest is shown)"
    print(
        f"\n{scenario.name}  [{scenario.model.kind}, {len(cases)} schedules, horizon "
        f"{scenario.simulation.horizon:g} yr]"
    )
    print(f"  baseline rtol {chosen:.1e}{note}; diagram {t_diagram:.2f} s (not in the times)")
    print(f"  LSODA rtol tried (largest error over the schedules): {', '.join(tried)}")
    header = (
        f"  {'schedule':<44}{'ours (s)':>10}{'bare (s)':>10}{'LSODA (s)':>11}"
        f"{'ours/LSODA':>12}{'err ours':>10}{'err LSODA':>11}"
    )
    print(header)
    total_ours = total_bare = total_base = 0.0
    for i, case in enumerate(cases):
        t_ours = best_time(case.ours, repeats)
        t_bare = best_time(case.ours_bare, repeats)
        t_base = best_time(lambda case=case: case.baseline(chosen), repeats)
        total_ours += t_ours
        total_bare += t_bare
        total_base += t_base
        name = (
            case.schedule.name if len(case.schedule.name) <= 42 else case.schedule.name[:41] + "~"
        )
        print(
            f"  {name:<44}{t_ours:>10.4f}{t_bare:>10.4f}{t_base:>11.4f}"
            f"{t_ours / t_base:>11.2f}x{ours_errors[i]:>10.1e}{base_errors[i]:>11.1e}"
        )
    t_compare = best_time(lambda: compare(scenario, diagram=diagram), repeats)
    print(
        f"  {'all schedules':<44}{total_ours:>10.4f}{total_bare:>10.4f}{total_base:>11.4f}"
        f"{total_ours / total_base:>11.2f}x{e_ours:>10.1e}{max(base_errors):>11.1e}"
    )
    ratio = total_ours / total_base
    verdict = "met" if ratio <= TARGET_RATIO else "NOT met: we are behind LSODA here"
    print(
        f"  integration ratio ours / LSODA: {ratio:.2f}x (target <= {TARGET_RATIO:g}x; {verdict})"
    )
    print(f"  whole compare(scenario, diagram=...): {t_compare:.4f} s")
    return total_ours, total_base


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("files", nargs="*", help="scenario files (default: every demo)")
    parser.add_argument("--repeats", type=int, default=5, help="best of this many timings")
    args = parser.parse_args()
    files = [Path(f) for f in args.files] or sorted(SCENARIOS.glob("*.toml"))
    print(
        "compare's integration vs solve_ivp(LSODA) with a hand-written scalar right-hand side; "
        f"best of {args.repeats}, wall-clock, 2 shared cores"
    )
    print(
        "columns: ours = integrate as compare calls it (0.1-yr samples, steps, watch); bare = "
        "yearly samples only; err = largest relative error at yearly samples vs Radau 1e-12"
    )
    totals = [run_demo(file, args.repeats) for file in files]
    ours = sum(t for t, _ in totals)
    base = sum(t for _, t in totals)
    print(
        f"\nall demos: ours {ours:.4f} s, LSODA {base:.4f} s, ratio ours / LSODA "
        f"{ours / base:.2f}x (target <= {TARGET_RATIO:g}x)"
    )


if __name__ == "__main__":
    main()
