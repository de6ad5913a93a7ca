"""Batched Dormand-Prince 5(4) with error control (Dormand & Prince 1980, J. Comput. Appl. Math.
6:19-26; the pair scipy's RK45 uses): explicit, for non-stiff stretches such as the years of a
schedule; first-same-as-last, so six new right-hand sides per step; one step size for the
batch (see :func:`planner.integrate.solvers.base.shared_steps`)."""

from __future__ import annotations

import numpy as np

from planner.integrate.solvers.base import Stepper, shared_steps

C = np.array([0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0])
A = np.array(
    [
        [0, 0, 0, 0, 0],
        [1 / 5, 0, 0, 0, 0],
        [3 / 40, 9 / 40, 0, 0, 0],
        [44 / 45, -56 / 15, 32 / 9, 0, 0],
        [19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729, 0],
        [9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656],
    ]
)
B = np.array([35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84])
E = np.array([-71 / 57600, 0.0, 71 / 16695, -71 / 1920, 17253 / 339200, -22 / 525, 1 / 40])


class DormandPrince(Stepper):
    name = "dopri5"
    order = 4
    shared_step = True

    def steps(self, piece, a, b, x, h, *, tolerance, scale, alive, max_steps, **_):
        stages = np.empty((7, x.size))  # the stages, flattened: combinations are one BLAS call

        def attempt(t, x, f, h):
            stages[0] = f.reshape(-1)
            flat = x.reshape(-1)
            for i in range(1, 6):
                y = flat + h * (A[i, :i] @ stages[:i])
                stages[i] = piece.rhs(t + C[i] * h, y.reshape(x.shape)).reshape(-1)
            new = (flat + h * (B @ stages[:6])).reshape(x.shape)
            f_new = piece.rhs(t + h, new)
            stages[6] = f_new.reshape(-1)
            error = (h * (E @ stages)).reshape(x.shape)
            return new, f_new, error

        return shared_steps(self, piece, a, b, x, h, tolerance, scale, alive, max_steps, attempt)
