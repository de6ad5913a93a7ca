"""Quasi-static sweep: dial the control up across the range in small steps, letting the state
settle at each step, then back down. The jumps of the loop bracket the folds within one step:
the hysteresis loop a slowly changed load would trace."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.equilibria import follow_branch
from planner.integrate import Status, settle, system_limits
from planner.models import System
from planner.progress import Progress, silent

DEFAULT_STEPS = 200
JUMP_TOLERANCE = 1e-3  # scaled distance between the settled state and the followed equilibrium


@dataclass(frozen=True)
class Jump:
    """A jump between two consecutive steps: the fold lies in [control_before, control_after]."""

    direction: str  # "up" or "down"
    control_before: float
    control_after: float
    state_before: np.ndarray
    state_after: np.ndarray


@dataclass(frozen=True)
class Sweep:
    controls_up: np.ndarray
    states_up: np.ndarray  # (n, k)
    controls_down: np.ndarray
    states_down: np.ndarray
    jumps: list[Jump]
    step: float
    unsettled: int  # steps whose state had not settled by the cap (shown, but suspect)


def _leg(system, x, controls, cap, limit, direction, progress, offset, share):
    states, jumps, unsettled = [], [], 0
    previous_u = None
    width = float(abs(controls[-1] - controls[0])) or 1.0
    magnitude = np.maximum(np.abs(x), 1e-3)
    for i, u in enumerate(controls):
        followed = None
        if previous_u is not None:
            followed = follow_branch(system, x, float(previous_u), float(u), width, magnitude)
        limits = system_limits(system, limit)
        run = settle(system, x, float(u), cap=cap, limits=limits)
        if run.status is Status.DIVERGED:
            break
        unsettled += run.status is not Status.SETTLED
        end = run.final_state[:, 0]
        scale = np.maximum(np.maximum(np.abs(x), np.abs(end)), 1e-9)
        if previous_u is not None and (
            followed is None or np.max(np.abs(end - followed) / scale) > JUMP_TOLERANCE
        ):
            jumps.append(Jump(direction, float(previous_u), float(u), x.copy(), end.copy()))
        x = end
        magnitude = np.maximum(magnitude, np.abs(x))
        states.append(x)
        previous_u = u
        progress(offset + share * (i + 1) / len(controls), f"sweeping {direction}: {u:.4g}")
    done = len(states)
    return controls[:done], np.array(states).T.reshape(len(x), done), jumps, unsettled, x


def quasi_static_sweep(
    system: System,
    control_range: tuple[float, float],
    start_state: np.ndarray,
    *,
    step: float | None = None,
    cap: float = 20000.0,
    limit: float = 1e6,
    progress: Progress = silent,
) -> Sweep:
    """Sweep up from the lower end (starting from ``start_state`` settled there), then down."""
    low, high = control_range
    step = (high - low) / DEFAULT_STEPS if step is None else float(step)
    if not step > 0:
        raise ValueError("the sweep step must be positive")
    count = int(np.floor((high - low) / step + 1e-9)) + 1
    up = low + step * np.arange(count)
    x = np.asarray(start_state, dtype=float)
    cu, su, jumps_up, unsettled_up, x = _leg(system, x, up, cap, limit, "up", progress, 0.0, 0.5)
    down = up[: len(cu)][::-1]
    cd, sd, jumps_down, unsettled_down, _ = _leg(
        system, x, down, cap, limit, "down", progress, 0.5, 0.5
    )
    progress(1.0, "done")
    return Sweep(cu, su, cd, sd, jumps_up + jumps_down, step, unsettled_up + unsettled_down)


def sweep_for(scenario, *, step: float | None = None, progress: Progress = silent) -> Sweep:
    return quasi_static_sweep(
        scenario.system(),
        scenario.control.range,
        scenario.initial_state,
        step=step,
        cap=scenario.simulation.settle_cap,
        limit=scenario.simulation.state_limit,
        progress=progress,
    )
