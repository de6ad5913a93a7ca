"""The one integration driver: a compiled model under a control path, or with the control held.

Integration uses scipy's Radau (implicit, stiff-capable: sediment P turns over in centuries while
water P turns over in about a year) with the model's analytic Jacobian. Every run stops with a
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

RTOL = 1e-10
ATOL_FRACTION = 1e-12  # absolute tolerance per variable, times that variable's scale
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
        method="Radau",
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
