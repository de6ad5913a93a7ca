"""Quasi-static sweep: dial the control up across the range in small steps, letting the state
settle at each step, then back down. The jumps of the loop bracket the folds within one step:
the hysteresis loop a slowly changed load would trace."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.equilibria import follow_branch
from planner.errors import InputError, Problem
from planner.integrate import Status, settle, system_limits
from planner.models import System
from planner.progress import Progress, silent

DEFAULT_STEPS = 200
MOST_STEPS = 5000  # each step settles the lake: a step so small would take hours, so it is refused
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
    diverged_at: float | None = None  # the control value where the state ran away, if it did


def _leg(system, x, controls, cap, limit, direction, progress, offset, share):
    """One leg of the sweep; stops where the state runs away (returned as the last value)."""
    states, jumps, unsettled = [], [], 0
    previous_u = None
    diverged_at = None
    if len(controls) == 0:
        return controls, np.empty((len(x), 0)), jumps, unsettled, x, diverged_at
    width = float(abs(controls[-1] - controls[0])) or 1.0
    magnitude = np.maximum(np.abs(x), 1e-3)
    for i, u in enumerate(controls):
        followed = None
        if previous_u is not None:
            followed = follow_branch(system, x, float(previous_u), float(u), width, magnitude)
        limits = system_limits(system, limit)
        run = settle(system, x, float(u), cap=cap, limits=limits)
        if run.status is Status.DIVERGED:
            diverged_at = float(u)
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
    states_array = np.array(states).T.reshape(len(x), done)
    return controls[:done], states_array, jumps, unsettled, x, diverged_at


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
    cu, su, jumps_up, unsettled_up, x, diverged_up = _leg(
        system, x, up, cap, limit, "up", progress, 0.0, 0.5
    )
    down = up[: len(cu)][::-1]
    cd, sd, jumps_down, unsettled_down, _, diverged_down = _leg(
        system, x, down, cap, limit, "down", progress, 0.5, 0.5
    )
    progress(1.0, "done")
    return Sweep(
        cu,
        su,
        cd,
        sd,
        jumps_up + jumps_down,
        step,
        unsettled_up + unsettled_down,
        diverged_up if diverged_up is not None else diverged_down,
    )


def checked_step(step: float | None, scenario, source: str = "--step") -> float | None:
    """The sweep step asked for (None: the default), checked before any work: positive and
    giving at most MOST_STEPS steps across the control range; else InputError naming it."""
    if step is None:
        return None
    low, high = scenario.control.range
    step = float(step)
    if not step > 0 or not (high - low) / step <= MOST_STEPS:
        raise InputError(
            [
                Problem(
                    source,
                    "step",
                    f"must be a positive number of {scenario.control.unit or 'control units'}, "
                    f"at least {(high - low) / MOST_STEPS:.3g} (at most {MOST_STEPS} steps)",
                )
            ]
        )
    return step


def sweep_for(
    scenario, *, step: float | None = None, progress: Progress = silent, source: str = "--step"
) -> Sweep:
    step = checked_step(step, scenario, source)
    return quasi_static_sweep(
        scenario.system(),
        scenario.control.range,
        scenario.initial_state,
        step=step,
        cap=scenario.simulation.settle_cap,
        limit=scenario.simulation.state_limit,
        progress=progress,
    )
