"""The one set of metrics of a schedule, for one run or many members: what it plans (path,
actions, limits, planned costs), when the target is met and whether it relapsed, how far and how
long the control overshoots below the recovery threshold, the damages, and the years spent in
the desired basin. compare, ensemble, frontier and search all read them from here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.costs import CostBreakdown, damage_present_value, scenario_costs
from planner.integrate import Limits, Status, Watch, WatchRecord, system_limits
from planner.schedules import (
    ActionTimeline,
    ControlPath,
    Infeasibility,
    action_timeline,
    check_limits,
    control_path,
)


@dataclass(frozen=True, eq=False)
class Plan:
    """A schedule as the manager plans it: the control path, the actions, the first limit it
    breaks (None: feasible) and its planned costs (abatement and actions; no damages)."""

    name: str
    kind: str
    path: ControlPath
    timeline: ActionTimeline
    final_control: float
    infeasible: Infeasibility | None
    planned_costs: CostBreakdown


def plan(scenario, schedule) -> Plan:
    """Path, actions, limits and planned costs of one schedule under a scenario."""
    horizon = scenario.simulation.horizon
    control = scenario.control
    path = control_path(schedule, current=scenario.current_control)
    timeline = action_timeline(schedule)
    infeasible = check_limits(
        path,
        horizon=horizon,
        lowest=control.least,
        max_change_per_year=control.max_change_per_year,
        unit=control.unit,
    )
    planned = scenario_costs(scenario, path, timeline)
    if infeasible is None:
        infeasible = planned.infeasible
    return Plan(
        name=schedule.name,
        kind=schedule.kind,
        path=path,
        timeline=timeline,
        final_control=float(path(horizon)),
        infeasible=infeasible,
        planned_costs=planned,
    )


def limits_for(scenario) -> Limits:
    """The scenario's divergence limits (its state limit; amounts stay non-negative)."""
    return system_limits(scenario.system(), scenario.simulation.state_limit)


def watch_for(scenario) -> Watch | None:
    """The scenario's water-quality target as the engine's watch (None without a threshold)."""
    target = scenario.target
    if target.threshold is None:
        return None
    return Watch(scenario.target_index, float(target.threshold), target.regime)


@dataclass(frozen=True, eq=False)
class TargetMetrics:
    """Per member: the time after which the target holds until the horizon (NaN: not met at the
    end, or the run stopped early), whether it relapsed (met, then lost) and the years meeting
    it; ``not_met_by_year`` (years, members) feeds the damages."""

    meets_target_at: np.ndarray
    relapsed: np.ndarray
    years_meeting: np.ndarray
    not_met_by_year: np.ndarray


def target_metrics(record: WatchRecord, codes: np.ndarray, t_end: np.ndarray) -> TargetMetrics:
    """From the engine's record of the watched target and each member's run status."""
    from planner.integrate import STATUSES

    finished = np.array([STATUSES[int(c)] is Status.FINISHED for c in codes])
    meets_at = np.where(finished, record.entered_at, np.nan)
    years_meeting = t_end - record.not_met_by_year.sum(axis=0)
    return TargetMetrics(meets_at, record.relapsed.copy(), years_meeting, record.not_met_by_year)


def overshoot(path: ControlPath, recovery_threshold: float | None, horizon: float):
    """(depth, time below): how far (control units) the control goes below the recovery
    threshold and for how long (years) over [0, horizon]; zeros without a threshold."""
    if recovery_threshold is None:
        return 0.0, 0.0
    depth = max(0.0, recovery_threshold - path.minimum(horizon))
    return float(depth), float(path.time_below(recovery_threshold, horizon))


def damages(scenario, not_met_by_year: np.ndarray) -> np.ndarray:
    """Present value of the damages per member (zeros without costs or threshold)."""
    costs = scenario.costs
    if costs is None or scenario.target.threshold is None:
        return np.zeros(not_met_by_year.shape[1:])
    return damage_present_value(costs, not_met_by_year)


def schedule_costs_with_damages(scenario, planned: Plan, not_met_by_year: np.ndarray | None):
    """The full cost breakdown of one run: planned costs plus its damages."""
    if scenario.target.threshold is None:
        not_met_by_year = None
    return scenario_costs(scenario, planned.path, planned.timeline, not_met_by_year)


def years_in_desired_basin(diagram, times: np.ndarray, control: np.ndarray, x: np.ndarray):
    """Years the state lay in the basin of the desired attractor of the moment's control.

    Exact for one-variable models: the basins are the intervals between unstable equilibria, so
    the state is in the desired basin when no unstable equilibrium lies between it and the
    desired attractor. Equilibria at each sample come from the traced branches by interpolation
    (in 1-D a run of equal stability is a graph over the control). None for n-D models, whose
    basins this does not resolve. ``x`` is the one state variable at ``times``.
    """
    if diagram.system.n != 1:
        return None
    u = control
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
    widths = np.diff(times)
    both = inside[:-1] & inside[1:]
    one = inside[:-1] ^ inside[1:]
    return float(np.sum(widths * both) + 0.5 * np.sum(widths * one))
