"""Single runs: LSODA (Hindmarsh 1983, ODEPACK; Petzold 1983, SIAM J. Sci. Stat. Comput.
4:136-148), Adams steps while non-stiff and BDF with the analytic Jacobian once stiff, fed
plain-float right-hand sides generated for the model.

The solver runs through scipy's ``odeint``, whose stepping loop is compiled: one call covers a
whole stretch and returns the state on a grid of outputs (every ``OUTPUT_SPACING`` years, and the
samples asked for; while settling, a geometric grid). The stretch comes back as ONE step that
carries those outputs; states between outputs come from a fresh short run started at the nearest
output (exact to the tolerance), which is how crossings are located.
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from planner.integrate.solvers.base import Step, StepError, Stepper

OUTPUT_SPACING = 0.1  # years between outputs within a stretch (plots, crossings, divergence)
SETTLE_FIRST_OUTPUT = 0.01  # years: first output of a settling run; then GROWTH times further
SETTLE_GROWTH = 1.25
SUCCESS = "Integration successful."


def output_grid(a: float, b: float, samples: np.ndarray | None, settling: bool) -> np.ndarray:
    """Output times of a stretch [a, b]: uniform (or geometric while settling) plus samples."""
    if settling:
        count = max(
            1,
            math.ceil(
                math.log(max(b - a, SETTLE_FIRST_OUTPUT) / SETTLE_FIRST_OUTPUT)
                / math.log(SETTLE_GROWTH)
            ),
        )
        grid = a + SETTLE_FIRST_OUTPUT * SETTLE_GROWTH ** np.arange(count + 1)
    else:
        grid = np.linspace(a, b, max(1, math.ceil((b - a) / OUTPUT_SPACING)) + 1)
    parts = [[a], grid[(grid > a) & (grid < b)], [b]]
    if samples is not None:
        parts.append(samples[(samples > a) & (samples < b)])
    return np.unique(np.concatenate(parts))


class Lsoda(Stepper):
    name = "lsoda"
    order = 4
    stiff = True
    batched = False

    def steps(
        self, piece, a, b, x, h, *, tolerance, scale, max_steps, outputs=None, settling=False, **_
    ):
        rhs, jac = piece.scalar_functions()
        grid = output_grid(a, b, outputs, settling)
        options = {
            "rtol": tolerance.rtol,
            "atol": tolerance.atol * scale[:, 0],
            "mxstep": int(min(max_steps, 2**31 - 1)),
        }
        states, info = _run(rhs, jac, x[:, 0], grid, options, h)
        valid = len(grid)
        if info["message"] != SUCCESS:
            reached = np.asarray(info["tcur"], dtype=float)
            # an output counts only once the solver has passed it
            valid = 1 + int(np.sum(np.cumprod(reached >= grid[1:] - 1e-12 * max(1.0, abs(b)))))
        times, states = grid[:valid], states[:valid].T.copy()
        steps_taken = np.asarray(info["hu"], dtype=float)
        h_next = float(steps_taken[valid - 2]) if valid >= 2 else 0.0
        yield Step(
            a,
            float(times[-1]),
            x,
            states[:, -1:].copy(),
            None,
            None,
            h_next,
            _Between(rhs, jac, times, states, options),
            times,
            states,
        )
        if valid < len(grid):
            last = states[:, -1]
            if np.all(np.isfinite(last)):
                raise StepError(str(info["message"]))


def _run(rhs, jac, y0, grid, options, h):
    from scipy.integrate import ODEintWarning, odeint

    with warnings.catch_warnings():
        # A failure is reported through full_output (and judged by the driver), not warned.
        warnings.simplefilter("ignore", ODEintWarning)
        return odeint(
            rhs,
            y0,
            grid,
            Dfun=jac,
            tfirst=True,
            full_output=True,
            h0=0.0 if h is None or not np.isfinite(h) else float(h),
            **options,
        )


class _Between:
    """States between a stretch's outputs: a short run from the nearest output at or before t."""

    def __init__(self, rhs, jac, times, states, options):
        self.rhs, self.jac, self.times, self.states, self.options = rhs, jac, times, states, options

    def many(self, times) -> np.ndarray:
        """States at several times, (n, len(times)): one short run per output interval."""
        times = np.asarray(times, dtype=float)
        out = np.empty((self.states.shape[0], times.size))
        order = np.argsort(times)
        index = np.clip(
            np.searchsorted(self.times, times[order], side="right") - 1, 0, len(self.times) - 1
        )
        for i in np.unique(index):
            chosen = order[index == i]
            start = self.times[i]
            wanted = times[chosen]
            later = wanted > start
            out[:, chosen[~later]] = self.states[:, i : i + 1]
            if later.any():
                distinct, back = np.unique(wanted[later], return_inverse=True)
                grid = np.concatenate([[start], distinct])
                run, _ = _run(self.rhs, self.jac, self.states[:, i], grid, self.options, None)
                out[:, chosen[later]] = run[1:][back].T
        return out

    def reach(self, t: float) -> np.ndarray | None:
        """The state at t, (n,), or None when the solver cannot get there (a blow-up)."""
        i = int(np.clip(np.searchsorted(self.times, t, side="right") - 1, 0, len(self.times) - 1))
        start = self.times[i]
        if t <= start:
            return self.states[:, i].copy()
        end, info = _run(self.rhs, self.jac, self.states[:, i], [start, t], self.options, None)
        if info["message"] != SUCCESS or not np.all(np.isfinite(end[-1])):
            return None
        return end[-1]

    def __call__(self, t, columns=None):
        t = float(np.asarray(t, dtype=float).reshape(-1)[0])
        i = int(np.clip(np.searchsorted(self.times, t, side="right") - 1, 0, len(self.times) - 1))
        start = self.times[i]
        if t <= start:
            return self.states[:, i : i + 1].copy()
        end, _ = _run(self.rhs, self.jac, self.states[:, i], [start, t], self.options, None)
        return end[-1][:, None]
