"""Single runs: scipy's LSODA stepper (Hindmarsh 1983, ODEPACK; Petzold 1983, SIAM J. Sci.
Stat. Comput. 4:136-148), Adams steps while non-stiff and BDF with the analytic Jacobian once
stiff, fed plain-float right-hand sides generated for the model."""

from __future__ import annotations

import numpy as np

from planner.integrate.solvers.base import Step, StepError, Stepper


class Lsoda(Stepper):
    name = "lsoda"
    order = 4
    stiff = True
    batched = False

    def steps(self, piece, a, b, x, h, *, tolerance, scale, max_steps, dense=False, **_):
        from scipy.integrate import LSODA

        y0 = x[:, 0]
        rhs, jac = piece.scalar_functions()
        solver = LSODA(
            rhs,
            a,
            y0,
            b,
            rtol=tolerance.rtol,
            atol=tolerance.atol * scale[:, 0],
            jac=jac,
            first_step=None if h is None else min(h, b - a),
        )
        count = 0
        while solver.status == "running":
            message = solver.step()
            count += 1
            if solver.status == "failed" or count > max_steps:
                if not np.all(np.isfinite(solver.y)):
                    x1 = solver.y[:, None].copy()
                    yield Step(solver.t_old or a, solver.t, x, x1, None, None, 0.0)
                    return
                raise StepError(str(message or f"more than {max_steps} steps"))
            x1 = solver.y[:, None].copy()
            interpolant = _columns(solver.dense_output()) if dense else _Lazy(solver)
            yield Step(solver.t_old, solver.t, x, x1, None, None, solver.step_size, interpolant)
            x = x1


def _columns(dense):
    def at(t):
        return np.asarray(dense(np.asarray(t, dtype=float).reshape(-1)[0]), dtype=float)[:, None]

    def many(times):
        """States at several times at once, (n, len(times))."""
        return np.asarray(dense(np.asarray(times, dtype=float)), dtype=float).reshape(
            -1, len(times)
        )

    at.many = many
    return at


class _Lazy:
    """The solver's interpolant over its last step, built only when the driver asks."""

    def __init__(self, solver):
        self.solver = solver
        self.built = None

    def __call__(self, t):
        return self._built()(t)

    def many(self, times):
        return self._built().many(times)

    def _built(self):
        if self.built is None:
            self.built = _columns(self.solver.dense_output())
        return self.built
