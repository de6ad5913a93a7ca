"""The one integration driver: a compiled model under a control path, or with the control held.

Integration uses scipy's LSODA (Hindmarsh & Petzold: Adams steps while the problem is non-stiff,
BDF steps with the model's analytic Jacobian once it turns stiff; sediment P turns over in
centuries while water P turns over in about a year). Every run stops with a
status: finished, settled (the state stopped moving), or diverged (non-finite, or outside the
physical range), and divergence is never mistaken for recovery.
"""

from __future__ import annotations

import enum
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.integrate import solve_ivp

from planner.models import System

RTOL = 1e-8
METHOD = "LSODA"
SETTLED_RATE = 1e-9  # |dx/dt| / scale (per year) below which the state counts as settled
SCALE_FLOOR = 1e-6


class Status(enum.Enum):
    """How an integration ended; the value is a readable message."""

    FINISHED = "reached the end of the period"
    SETTLED = "settled at an equilibrium"
    DIVERGED = "diverged: the state left the physical range or became non-finite"
    NOT_SETTLED = "had not settled by the cap"
    FAILED = "the integrator failed"


@dataclass(frozen=True)
class Run:
    """Result of one integration: status, the time it ended and the state then."""

    status: Status
    t_end: float
    state: np.ndarray
    message: str = ""


def state_scale(system: System, x: np.ndarray) -> np.ndarray:
    """A per-variable magnitude for tolerances and settled tests."""
    return np.maximum(np.abs(np.asarray(x, dtype=float)), SCALE_FLOOR)


def _divergence_event(limit: float, lower: float | None) -> Callable[[float, np.ndarray], float]:
    def event(t: float, x: np.ndarray) -> float:
        if not np.all(np.isfinite(x)):
            return -1.0
        margin = limit - float(np.max(np.abs(x)))
        if lower is not None:
            margin = min(margin, float(np.min(x)) - lower)
        return margin

    event.terminal = True  # type: ignore[attr-defined]
    event.direction = -1  # type: ignore[attr-defined]
    return event


def lower_state_bound(system: System, limit: float) -> float | None:
    """Phosphorus cannot be negative: built-in models diverge below a small negative margin."""
    if system.model.spec.nonnegative_state:
        return -1e-9 * limit
    return None


def settle(
    system: System,
    x0: np.ndarray,
    u: float,
    *,
    cap: float = 20000.0,
    limit: float = 1e6,
    scale: np.ndarray | None = None,
    rtol: float = 1e-9,
) -> Run:
    """Hold the control at ``u`` and integrate from ``x0`` until the state stops moving.

    Settled means every |dx_i/dt| / scale_i < SETTLED_RATE per year. Stops at ``cap`` years.
    """
    x0 = np.asarray(x0, dtype=float)
    scale = state_scale(system, x0) if scale is None else scale

    def rate(x: np.ndarray) -> float:
        return float(np.max(np.abs(system.rhs(x, u)) / np.maximum(scale, np.abs(x))))

    if rate(x0) < SETTLED_RATE:
        return Run(Status.SETTLED, 0.0, x0)

    def settled(t: float, x: np.ndarray) -> float:
        return rate(x) - SETTLED_RATE

    settled.terminal = True  # type: ignore[attr-defined]
    settled.direction = -1  # type: ignore[attr-defined]
    diverged = _divergence_event(limit, lower_state_bound(system, limit))
    solution = solve_ivp(
        lambda t, x: system.rhs(x, u),
        (0.0, cap),
        x0,
        method=METHOD,
        jac=lambda t, x: system.jac(x, u),
        rtol=rtol,
        atol=np.maximum(scale, 1.0) * rtol * 1e-3,
        events=(settled, diverged),
    )
    end = solution.y[:, -1]
    if solution.status == -1:
        return Run(Status.FAILED, float(solution.t[-1]), end, solution.message)
    if solution.t_events[1].size or not np.all(np.isfinite(end)):
        return Run(Status.DIVERGED, float(solution.t[-1]), end)
    if solution.t_events[0].size:
        return Run(Status.SETTLED, float(solution.t[-1]), end)
    return Run(Status.NOT_SETTLED, float(solution.t[-1]), end)


# ---------------------------------------------------------------------------------------------
# Integration under a schedule

SAMPLES_PER_YEAR = 10  # dense-output samples added between solver steps, for plots and metrics
SAME_TIME = 1e-12


@dataclass(frozen=True)
class Trajectory:
    """The state under a control path, from t = 0 to ``t_end`` (the horizon unless it diverged).

    ``times`` hold every solver step plus a regular grid; ``states`` is (n, len(times));
    ``crossings`` are the exact times (from root finding on the dense output) at which the target
    variable crossed the threshold, with +1 for upward and -1 for downward.
    """

    status: Status
    t_end: float
    times: np.ndarray
    states: np.ndarray
    control: np.ndarray
    crossings: tuple[tuple[float, int], ...]
    pieces: tuple[tuple[float, float, object], ...]
    message: str = ""

    @property
    def final_state(self) -> np.ndarray:
        return self.states[:, -1]

    def state_at(self, t: float | np.ndarray) -> np.ndarray:
        """Dense-output state at time(s) t within [0, t_end]; (n,) or (n, len(t))."""
        t = np.asarray(t, dtype=float)
        flat = np.atleast_1d(t)
        out = np.empty((self.states.shape[0], flat.size))
        starts = np.array([piece[0] for piece in self.pieces])
        which = np.clip(np.searchsorted(starts, flat, side="right") - 1, 0, len(self.pieces) - 1)
        for index in np.unique(which):
            mask = which == index
            out[:, mask] = self.pieces[index][2](flat[mask])
        return out[:, 0] if t.ndim == 0 else out


def _segment_system(system: System, timeline, a: float, b: float):
    """The system on (a, b): fixed parameters, or parameters that change with t (decay)."""
    if timeline is None or not timeline.pulses:
        return lambda t: system
    base = {pulse.parameter: system.parameter(pulse.parameter) for pulse in timeline.pulses}

    def at(t: float) -> System:
        factors = timeline.multipliers(t)
        return system.with_parameters(**{name: base[name] * f for name, f in factors.items()})

    decaying = any(
        p.decay_years > 0 and a >= p.start + p.duration - SAME_TIME for p in timeline.pulses
    )
    if decaying:
        return at
    fixed = at(0.5 * (a + b))
    return lambda t: fixed


def integrate_path(
    system: System,
    x0: np.ndarray,
    control,
    horizon: float,
    *,
    timeline=None,
    target_index: int | None = None,
    threshold: float | None = None,
    limit: float = 1e6,
    rtol: float = RTOL,
    progress=None,
) -> Trajectory:
    """Integrate the state from ``x0`` under the control path ``control`` (a ControlPath) and the
    actions of ``timeline`` (an ActionTimeline), over [0, horizon] years.

    The interval is split at every kink of the control path and every action, so no step
    straddles a discontinuity; each piece is integrated by LSODA with the analytic Jacobian and
    dense output. Divergence (non-finite, beyond ``limit``, or below zero for models whose state
    is an amount) ends the run with its time.
    """
    names = system.variables
    x = np.array(x0, dtype=float)
    cuts = [0.0, float(horizon), *control.kinks(horizon)]
    if timeline is not None:
        cuts += list(timeline.kinks(horizon))
    cuts = np.unique(np.clip(np.array(cuts, dtype=float), 0.0, horizon))
    scale = np.maximum(np.abs(x), 1.0)
    diverged = _divergence_event(limit, lower_state_bound(system, limit))
    events: list = [diverged]
    if target_index is not None and threshold is not None:

        def crossing(t: float, y: np.ndarray) -> float:
            return y[target_index] - threshold

        events.append(crossing)

    times: list[np.ndarray] = []
    states: list[np.ndarray] = []
    pieces: list[tuple[float, float, object]] = []
    crossings: list[tuple[float, int]] = []
    status, message, t_end = Status.FINISHED, "", float(horizon)
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        if b - a <= SAME_TIME:
            continue
        if timeline is not None:
            for when, variable, factor in timeline.state_events:
                if abs(when - a) <= SAME_TIME or (a == 0.0 and when < SAME_TIME):
                    x[names.index(variable)] *= factor
        system_at = _segment_system(system, timeline, a, b)
        u_a, slope = float(control(a)), float(control.slope(a))

        def u_of(t: float, u_a: float = u_a, slope: float = slope, a: float = a) -> float:
            return u_a + slope * (t - a)  # the path is linear between cuts

        solution = solve_ivp(
            lambda t, y, system_at=system_at, u_of=u_of: system_at(t).rhs(y, u_of(t)),
            (a, b),
            x,
            method=METHOD,
            jac=lambda t, y, system_at=system_at, u_of=u_of: system_at(t).jac(y, u_of(t)),
            rtol=rtol,
            atol=scale * rtol * 1e-2,
            dense_output=True,
            events=events,
        )
        if solution.status == -1:
            status, message, t_end = Status.FAILED, solution.message, float(solution.t[-1])
        grid = np.arange(
            np.ceil(a * SAMPLES_PER_YEAR), np.floor(solution.t[-1] * SAMPLES_PER_YEAR) + 1
        )
        sample_times = np.unique(np.concatenate([solution.t, grid / SAMPLES_PER_YEAR]))
        sample_times = sample_times[(sample_times >= a) & (sample_times <= solution.t[-1])]
        times.append(sample_times)
        states.append(solution.sol(sample_times))
        pieces.append((a, float(solution.t[-1]), solution.sol))
        if len(events) > 1:
            for t_cross in solution.t_events[1]:
                slope = system_at(t_cross).rhs(solution.sol(t_cross), control(t_cross))[
                    target_index
                ]
                crossings.append((float(t_cross), 1 if slope > 0 else -1))
        if solution.t_events[0].size:
            status, t_end = Status.DIVERGED, float(solution.t_events[0][0])
        if status is not Status.FINISHED:
            break
        x = solution.y[:, -1].copy()
        if progress is not None:
            progress(b / horizon, "integrating")
    all_times = np.concatenate(times) if times else np.array([0.0])
    all_states = np.concatenate(states, axis=1) if states else x[:, None]
    return Trajectory(
        status=status,
        t_end=t_end,
        times=all_times,
        states=all_states,
        control=np.asarray(control(all_times), dtype=float),
        crossings=tuple(crossings),
        pieces=tuple(pieces),
        message=message,
    )
