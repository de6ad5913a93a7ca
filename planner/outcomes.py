"""Verdicts, metrics and costs of each schedule: the comparison a manager reads.

Verdict (DESIGN.md section 6): after the horizon the control is held at its final value, every
temporary action has ended, and the state is integrated until it settles (or a cap); it is then
matched to the stable equilibria at that control. ``recovered`` means it settles on the desired
attractor (lowest, or highest, target variable). Divergence is its own outcome, never recovered.
"""

from __future__ import annotations

import enum
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np

from planner.costs import CostBreakdown, scenario_costs
from planner.equilibria import Diagram, diagram_for
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, Schedule
from planner.schedules import Infeasibility, action_timeline, check_limits, control_path
from planner.simulate import Status, Trajectory, integrate_path, settle


class Verdict(enum.Enum):
    """What becomes of the lake under a schedule; the value is a readable phrase."""

    RECOVERED = "recovers"
    NOT_RECOVERED = "stays in the undesired regime"
    DIVERGED = "diverges (leaves the model's physical range)"
    UNSETTLED = "has not settled by the cap"
    FAILED = "integration failed"


@dataclass(frozen=True)
class ScheduleOutcome:
    """Everything the comparison reports for one schedule (times in years)."""

    name: str
    kind: str
    verdict: Verdict
    infeasible: Infeasibility | None
    diverged_at: float | None
    meets_target_at: float | None
    relapsed: bool
    min_control: float
    final_control: float
    overshoot_depth: float
    overshoot_duration: float
    years_in_desired_basin: float | None
    years_meeting_target: float | None
    settled_state: np.ndarray | None
    cost: CostBreakdown
    trajectory: Trajectory

    @property
    def recovered(self) -> bool:
        return self.verdict is Verdict.RECOVERED

    @property
    def feasible(self) -> bool:
        return self.infeasible is None


@dataclass(frozen=True)
class Comparison:
    scenario: Scenario
    diagram: Diagram
    outcomes: list[ScheduleOutcome]


def target_record(
    trajectory: Trajectory, target_index: int, meets: Callable[[float], bool]
) -> tuple[list[tuple[float, float]], float | None, bool]:
    """From the state at t = 0 and the exact threshold crossings: the intervals (years) when the
    target is not met, the first time after which it holds until the end (None: not met at the
    end), and whether it relapsed (was met, then lost)."""
    end = trajectory.t_end
    state = bool(meets(float(trajectory.states[target_index, 0])))
    switches = [0.0]
    flags = [state]
    for time, _direction in trajectory.crossings:
        midpoint_after = min(time + 1e-9 * max(end, 1.0), end)
        after = bool(meets(float(trajectory.state_at(midpoint_after)[target_index])))
        if after != flags[-1]:
            switches.append(time)
            flags.append(after)
    switches.append(end)
    not_meeting = [
        (switches[i], switches[i + 1])
        for i, flag in enumerate(flags)
        if not flag and switches[i + 1] > switches[i]
    ]
    meets_at = switches[-2] if flags[-1] else None
    if trajectory.status is not Status.FINISHED:
        meets_at = None
    relapsed = any(a and not b for a, b in zip(flags, flags[1:], strict=False))
    return not_meeting, meets_at, relapsed


def evaluate(
    scenario: Scenario, diagram: Diagram, schedule: Schedule, *, progress: Progress = silent
) -> ScheduleOutcome:
    """Simulate one schedule, then give its verdict, metrics and costs."""
    horizon = scenario.simulation.horizon
    control = scenario.control
    path = control_path(schedule, current=scenario.current_control)
    timeline = action_timeline(schedule)
    system = scenario.system()
    k = scenario.target_index
    trajectory = integrate_path(
        system,
        scenario.initial_state,
        path,
        horizon,
        timeline=timeline,
        target_index=k,
        threshold=scenario.target.threshold,
        limit=scenario.simulation.state_limit,
        progress=scaled(progress, 0.0, 0.8),
    )
    final_control = float(path(horizon))
    settled_state = None
    diverged_at = None
    if trajectory.status is Status.DIVERGED:
        verdict, diverged_at = Verdict.DIVERGED, trajectory.t_end
    elif trajectory.status is Status.FAILED:
        verdict = Verdict.FAILED
    else:
        progress(0.85, "letting the state settle")
        run = settle(
            system,
            trajectory.final_state,
            final_control,
            cap=scenario.simulation.settle_cap,
            limit=scenario.simulation.state_limit,
        )
        settled_state = run.state
        if run.status is Status.DIVERGED:
            verdict, diverged_at = Verdict.DIVERGED, horizon + run.t_end
        elif run.status is Status.SETTLED:
            desired = diagram.is_desired(run.state, final_control)
            verdict = Verdict.RECOVERED if desired else Verdict.NOT_RECOVERED
        else:
            verdict = Verdict.UNSETTLED
    not_meeting, meets_at, relapsed = target_record(trajectory, k, scenario.target.meets)
    years_desired = _years_in_desired_basin(diagram, trajectory)
    years_not_meeting = float(sum(b - a for a, b in not_meeting))
    recovery = diagram.recovery_threshold
    minimum = path.minimum(horizon)
    depth = 0.0 if recovery is None else max(0.0, recovery - minimum)
    duration = 0.0 if recovery is None else path.time_below(recovery, horizon)
    infeasible = check_limits(
        path,
        horizon=horizon,
        lowest=control.least,
        max_change_per_year=control.max_change_per_year,
        unit=control.unit,
    )
    met_or_not = not_meeting if scenario.target.threshold is not None else ()
    cost = scenario_costs(scenario, path, timeline, met_or_not)
    if infeasible is None and cost.infeasible is not None:
        infeasible = cost.infeasible
    progress(1.0, "done")
    return ScheduleOutcome(
        name=schedule.name,
        kind=schedule.kind,
        verdict=verdict,
        infeasible=infeasible,
        diverged_at=diverged_at,
        meets_target_at=meets_at,
        relapsed=relapsed,
        min_control=float(minimum),
        final_control=final_control,
        overshoot_depth=float(depth),
        overshoot_duration=float(duration),
        years_in_desired_basin=years_desired,
        years_meeting_target=(
            None if scenario.target.threshold is None else trajectory.t_end - years_not_meeting
        ),
        settled_state=settled_state,
        cost=cost,
        trajectory=trajectory,
    )


def _years_in_desired_basin(diagram: Diagram, trajectory: Trajectory) -> float | None:
    """Years the state lay in the basin of the desired attractor of the moment's control.

    Exact for one-variable models: the basins are the intervals between unstable equilibria, so
    the state is in the desired basin when no unstable equilibrium lies between it and the
    desired attractor. Equilibria at each sample come from the traced branches by interpolation
    (in 1-D a run of equal stability is a graph over the control). None for n-D models, whose
    basins this does not resolve.
    """
    if diagram.system.n != 1:
        return None
    u = trajectory.control
    x = trajectory.states[0]
    sign = 1.0 if diagram.regime == "lowest" else -1.0
    desired = np.full(len(u), np.inf)
    separatrices: list[np.ndarray] = []
    for run in diagram.stable_runs:
        inside = (u >= run.controls[0]) & (u <= run.controls[-1])
        if not run.undesired:
            value = np.interp(u, run.controls, run.states[:, 0])
            desired = np.where(inside, np.minimum(desired, sign * value), desired)
    for branch in diagram.branches:
        for stable, part in branch.runs():
            if stable:
                continue
            c, values = branch.controls[part], branch.states[part, 0]
            order = np.argsort(c)
            c, values = c[order], values[order]
            inside = (u >= c[0]) & (u <= c[-1])
            separatrices.append(np.where(inside, np.interp(u, c, values), np.nan))
    desired = sign * desired
    inside = np.isfinite(desired)
    for value in separatrices:
        inside &= ~((value - x) * (value - desired) < 0)
    widths = np.diff(trajectory.times)
    both = inside[:-1] & inside[1:]
    one = inside[:-1] ^ inside[1:]
    return float(np.sum(widths * both) + 0.5 * np.sum(widths * one))


def compare(
    scenario: Scenario,
    *,
    diagram: Diagram | None = None,
    schedules: Sequence[Schedule] | None = None,
    progress: Progress = silent,
) -> Comparison:
    """Evaluate every schedule of the scenario (or those given) against one diagram."""
    if diagram is None:
        diagram = diagram_for(scenario, progress=scaled(progress, 0.0, 0.3))
    chosen = list(scenario.schedules if schedules is None else schedules)
    outcomes = []
    for i, schedule in enumerate(chosen):
        share = 0.7 / max(len(chosen), 1)
        outcomes.append(
            evaluate(
                scenario,
                diagram,
                schedule,
                progress=scaled(progress, 0.3 + i * share, 0.3 + (i + 1) * share),
            )
        )
    progress(1.0, "done")
    return Comparison(scenario, diagram, outcomes)
