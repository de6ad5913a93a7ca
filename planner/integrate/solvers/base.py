"""What every stepper gives the driver: accepted steps over one smooth piece.

A stepper's ``steps(piece, a, b, x, h, ...)`` is a generator of :class:`Step` from a to b
(the last step ends exactly at b). Batched steppers share one step size across the members
(the error norm is the worst member's), so every member sits at the same time and the driver
stays a plain loop over steps.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from dataclasses import dataclass

import numpy as np

from planner.integrate.options import Tolerance

SAFETY = 0.9
MIN_FACTOR = 0.2
MAX_FACTOR = 5.0
MIN_STEP = 1e-12  # years, relative to the piece length: below this a step fails


class StepError(Exception):
    """The stepper could not make progress (step size underflow or too many steps)."""


@dataclass(slots=True)
class Step:
    """One step from t0 to t1 for every stepped member: times (one for all, or one per member;
    a member that did not move has t1 == t0), states (n, m), right-hand sides (None where the
    stepper does not have them), the next step size and an interpolant over the step."""

    t0: float | np.ndarray
    t1: float | np.ndarray
    x0: np.ndarray
    x1: np.ndarray
    f0: np.ndarray | None
    f1: np.ndarray | None
    h_next: float | np.ndarray
    interpolant: Callable[[float | np.ndarray], np.ndarray] | None = None
    times: np.ndarray | None = None  # a single run's outputs inside the step, t0 and t1 included
    states: np.ndarray | None = None  # the state at ``times``, (n, len(times))

    def at(self, t: float | np.ndarray, columns: np.ndarray | None = None) -> np.ndarray:
        """State at time(s) t within the step: t scalar or one time per member (per column of
        ``columns`` when given: only those members are interpolated); (n, m) or (n, columns)."""
        if self.interpolant is not None:
            return self.interpolant(t) if columns is None else self.interpolant(t, columns)
        x0, x1, f0, f1 = self.x0, self.x1, self.f0, self.f1
        t0, t1 = np.asarray(self.t0, dtype=float), np.asarray(self.t1, dtype=float)
        if columns is not None:
            x0, x1 = x0[:, columns], x1[:, columns]
            f0 = None if f0 is None else f0[:, columns]
            f1 = None if f1 is None else f1[:, columns]
            t0 = t0 if t0.ndim == 0 else t0[columns]
            t1 = t1 if t1.ndim == 0 else t1[columns]
        h = t1 - t0
        if np.all(h <= 0):
            return x1.copy()
        with np.errstate(all="ignore"):
            s = np.where(h > 0, (np.asarray(t, dtype=float) - t0) / np.where(h > 0, h, 1), 1.0)
        if f0 is None or f1 is None:
            return x0 + s * (x1 - x0)
        # Cubic Hermite interpolation from both ends' states and slopes (fourth-order local).
        s2, s3 = s * s, s * s * s
        return (
            (2 * s3 - 3 * s2 + 1) * x0
            + (s3 - 2 * s2 + s) * h * f0
            + (-2 * s3 + 3 * s2) * x1
            + (s3 - s2) * h * f1
        )


def error_norm(
    error: np.ndarray, x0: np.ndarray, x1: np.ndarray, tolerance: Tolerance, scale: np.ndarray
) -> np.ndarray:
    """Per member: root mean square over variables of error / (atol scale + rtol |x|)."""
    weight = tolerance.atol * scale + tolerance.rtol * np.maximum(np.abs(x0), np.abs(x1))
    ratio = error / weight
    return np.sqrt(np.mean(ratio * ratio, axis=0))


def first_step(x: np.ndarray, f: np.ndarray, order: int, tolerance: Tolerance, scale, length):
    """A first step size from the state and slope magnitudes (Hairer, Norsett & Wanner 1993,
    Solving Ordinary Differential Equations I, section II.4, the first two estimates)."""
    weight = tolerance.atol * scale + tolerance.rtol * np.abs(x)
    with np.errstate(all="ignore"):
        d0 = float(np.max(np.sqrt(np.mean((x / weight) ** 2, axis=0))))
        d1 = float(np.max(np.sqrt(np.mean((f / weight) ** 2, axis=0))))
    h = 1e-6 if not (d0 > 1e-5 and d1 > 1e-5 and np.isfinite(d1)) else 0.01 * d0 / d1
    return float(min(max(h, 1e-6 * length), length))


class Stepper:
    """Base of the batched steppers: a name, an order and the step generator."""

    name = ""
    order = 1  # order of the error estimate's lower method (step control exponent 1/(order+1))
    adaptive = True
    stiff = False
    batched = True
    shared_step = False  # one step size for the whole batch (else one per member)

    def steps(
        self,
        piece,
        a: float,
        b: float,
        x: np.ndarray,
        h: float | None,
        *,
        tolerance: Tolerance,
        scale: np.ndarray,
        alive: np.ndarray,
        max_steps: int,
        members: np.ndarray,
        piece_number: int,
    ) -> Iterator[Step]:
        raise NotImplementedError


def adaptive_steps(stepper, piece, a, b, x, h, tolerance, scale, alive, max_steps, attempt):
    """Step-size control of the batched embedded pairs, one step size per member: every
    iteration each member still short of b attempts one step of its own size; ``attempt(t, x,
    f, h)`` (t and h per member) returns (x_new, f_new, error). A member's results therefore do
    not depend on which other members share its batch. Members whose ``alive`` flag the driver
    clears are left where they are."""
    m = x.shape[1]
    t = np.array(np.broadcast_to(np.asarray(a, dtype=float), (m,)))
    f = piece.rhs(t, x)
    length = b - float(np.min(t))
    if h is None or np.ndim(h) == 0 or np.shape(h)[0] != m:
        h = np.full(m, first_step(x, f, stepper.order, tolerance, scale, length))
    h = np.where(np.isfinite(h) & (h > 0), h, length)
    tries = 0
    exponent = -1.0 / (stepper.order + 1.0)
    floor = MIN_STEP * max(length, 1.0)
    end_slack = 1e-12 * max(1.0, abs(b))
    while True:
        moving = alive & (t < b)
        if not moving.any():
            return
        tries += 1
        if tries > max_steps:
            raise StepError(f"more than {max_steps} steps")
        last = h >= b - t - end_slack
        step = np.where(moving, np.where(last, b - t, h), 0.0)
        new, f_new, error = attempt(t, x, f, step)
        norms = error_norm(error, x, new, tolerance, scale)
        finite = np.isfinite(norms)
        # A member that turns non-finite is accepted once its step is tiny, so that the driver
        # can report it diverged; before that a smaller step may keep it finite.
        give_up = ~finite & (step <= 1e-6 * max(length, 1e-12))
        accept = moving & ((finite & (norms <= 1.0)) | give_up)
        factor = np.where(
            finite,
            np.where(norms == 0, MAX_FACTOR, SAFETY * norms**exponent),
            MIN_FACTOR,
        )
        grow = np.clip(factor, 1.0, MAX_FACTOR)
        shrink = np.clip(factor, MIN_FACTOR, 1.0)
        t_new = np.where(accept, np.where(last, b, t + step), t)
        h = np.where(accept, step * grow, np.where(moving, step * shrink, h))
        if np.any(moving & ~accept & (h < floor)):
            raise StepError(f"step size underflow at t = {float(np.min(t[moving])):g}")
        if accept.any():
            x1 = np.where(accept, new, x)
            f1 = np.where(accept, f_new, f)
            yield Step(t, t_new, x, x1, f, f1, h)
            t, x, f = t_new, x1, f1


def shared_steps(stepper, piece, a, b, x, h, tolerance, scale, alive, max_steps, attempt):
    """Step-size control with one step size for the whole batch, as a stacked system would
    have: the worst counted member's error norm decides. Cheaper per step than per-member
    control (scalar times, no per-member bookkeeping) and, on members that pass slowly near an
    unstable equilibrium, far more accurate at the same tolerance; the price is that a member's
    last digits depend on the batch it shares."""
    a = float(np.min(a))
    f = piece.rhs(a, x)
    length = b - a
    if h is not None:
        finite = np.atleast_1d(h)[np.isfinite(np.atleast_1d(h))]
        h = float(np.min(finite)) if finite.size else None
    if h is None or not (np.isfinite(h) and h > 0):
        h = first_step(x, f, stepper.order, tolerance, scale, length)
    t = a
    tries = 0
    exponent = -1.0 / (stepper.order + 1.0)
    while t < b:
        last = h >= b - t - 1e-12 * max(1.0, abs(b))
        if last:
            h = b - t
        new, f_new, error = attempt(t, x, f, h)
        # An attempt may hand back its error norms per member directly (shape (m,)).
        norms = error if error.ndim == 1 else error_norm(error, x, new, tolerance, scale)
        counted = norms[alive]
        worst = float(np.max(counted)) if counted.size else 0.0
        tries += 1
        if tries > max_steps:
            raise StepError(f"more than {max_steps} steps")
        if not np.isfinite(worst):
            # A member became non-finite: accept once the step is tiny, so that the driver can
            # report it diverged; before that a smaller step may keep it finite.
            if h > 1e-6 * max(length, 1e-12):
                h *= MIN_FACTOR
                continue
            worst = 1.0
        if worst <= 1.0:
            t_new = b if last else t + h
            factor = MAX_FACTOR if worst == 0 else min(MAX_FACTOR, SAFETY * worst**exponent)
            h_next = h * max(factor, 1.0)
            yield Step(t, t_new, x, new, f, f_new, h_next)
            t, x, f = t_new, new, f_new
            h = h_next
        else:
            h *= max(MIN_FACTOR, SAFETY * worst**exponent)
            if h < MIN_STEP * max(length, 1.0):
                raise StepError(f"step size underflow at t = {t:g}")
