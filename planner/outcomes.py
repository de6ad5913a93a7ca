"""Verdicts, metrics and costs of each schedule: the comparison a manager reads.

Each schedule is one run of the engine (:mod:`planner.integrate`), judged by the one verdict
(:mod:`planner.verdict`) and measured by the one set of metrics (:mod:`planner.metrics`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from planner.costs import CostBreakdown
from planner.equilibria import Diagram, diagram_for
from planner.integrate import Problem, Save, Trajectory, integrate, trajectory
from planner.metrics import (
    limits_for,
    overshoot,
    plan,
    schedule_costs_with_damages,
    target_metrics,
    watch_for,
    years_in_desired_basin,
)
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, Schedule
from planner.schedules import Infeasibility
from planner.verdict import Verdict, attractors, decide
from planner.views import ResultViews

if TYPE_CHECKING:  # views for notebooks; pandas and plotly are imported when they are asked for
    pass


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
    time_below_threshold: float
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
class Comparison(ResultViews):
    scenario: Scenario
    diagram: Diagram
    outcomes: list[ScheduleOutcome]

    _views = ("comparison_frame", "comparison_figure")

    def _view_title(self) -> str:
        return self.scenario.name


def evaluate(
    scenario: Scenario,
    diagram: Diagram,
    schedule: Schedule,
    *,
    dense: bool = False,
    progress: Progress = silent,
) -> ScheduleOutcome:
    """Simulate one schedule, then give its verdict, metrics and costs. ``dense`` keeps the
    solver's interpolants so ``trajectory.state_at`` works at any time."""
    horizon = scenario.simulation.horizon
    planned = plan(scenario, schedule)
    watch = watch_for(scenario)
    solution = integrate(
        Problem(scenario.system(), scenario.initial_state, planned.path, horizon, planned.timeline),
        # The solver's own steps (dense where the state moves) serve the plots and the
        # years-in-basin metric; interpolated samples only cost time.
        save=Save(steps=True, dense=dense),
        watch=watch,
        limits=limits_for(scenario),
        progress=scaled(progress, 0.0, 0.8),
    )
    run = trajectory(solution, planned.path)
    progress(0.85, "letting the state settle")
    verdicts = decide(
        attractors(diagram, planned.final_control),
        scenario.system(),
        solution.final_state,
        solution.codes,
        solution.t_end,
        horizon=horizon,
        cap=scenario.simulation.settle_cap,
        limit=scenario.simulation.state_limit,
    )
    verdict = verdicts.first
    meets_at, relapsed, years_meeting, missing = None, False, None, None
    if watch is not None:
        metrics = target_metrics(solution.watch, solution.codes, solution.t_end)
        at = float(metrics.meets_target_at[0])
        meets_at = None if np.isnan(at) else at
        relapsed = bool(metrics.relapsed[0])
        years_meeting = float(metrics.years_meeting[0])
        missing = metrics.not_met_by_year[:, 0]
    depth, duration = overshoot(planned.path, diagram.recovery_threshold, horizon)
    cost = schedule_costs_with_damages(scenario, planned, missing)
    diverged_at = float(verdicts.diverged_at[0])
    settled = verdicts.settled[:, 0]
    progress(1.0, "done")
    return ScheduleOutcome(
        name=schedule.name,
        kind=schedule.kind,
        verdict=verdict,
        infeasible=planned.infeasible,
        diverged_at=None if np.isnan(diverged_at) else diverged_at,
        meets_target_at=meets_at,
        relapsed=relapsed,
        min_control=float(planned.path.minimum(horizon)),
        final_control=planned.final_control,
        overshoot_depth=depth,
        time_below_threshold=duration,
        years_in_desired_basin=years_in_desired_basin(
            diagram, run.times, run.control, run.states[0]
        ),
        years_meeting_target=years_meeting,
        settled_state=None if np.isnan(settled).any() else settled,
        cost=cost,
        trajectory=run,
    )


def compare(
    scenario: Scenario,
    *,
    diagram: Diagram | None = None,
    schedules: Sequence[Schedule] | None = None,
    dense: bool = False,
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
                dense=dense,
                progress=scaled(progress, 0.3 + i * share, 0.3 + (i + 1) * share),
            )
        )
    progress(1.0, "done")
    return Comparison(scenario, diagram, outcomes)
