"""Batched Dormand-Prince 5(4) with error control (Dormand & Prince 1980, J. Comput. Appl. Math.
6:19-26; the pair scipy's RK45 uses): explicit, for non-stiff stretches such as the years of a
schedule; first-same-as-last, so six new right-hand sides per step."""

from __future__ import annotations

from planner.integrate.solvers.base import Stepper, adaptive_steps

C = (0.0, 1 / 5, 3 / 10, 4 / 5, 8 / 9, 1.0)
A = (
    (),
    (1 / 5,),
    (3 / 40, 9 / 40),
    (44 / 45, -56 / 15, 32 / 9),
    (19372 / 6561, -25360 / 2187, 64448 / 6561, -212 / 729),
    (9017 / 3168, -355 / 33, 46732 / 5247, 49 / 176, -5103 / 18656),
)
B = (35 / 384, 0.0, 500 / 1113, 125 / 192, -2187 / 6784, 11 / 84)
E = (-71 / 57600, 0.0, 71 / 16695, -71 / 1920, 17253 / 339200, -22 / 525, 1 / 40)


class DormandPrince(Stepper):
    name = "dopri5"
    order = 4

    def steps(self, piece, a, b, x, h, *, tolerance, scale, alive, max_steps, **_):
        def attempt(t, x, f, h):
            k = [f]
            for i in range(1, 6):
                dx = A[i][0] * k[0]
                for j in range(1, i):
                    if A[i][j]:
                        dx = dx + A[i][j] * k[j]
                k.append(piece.rhs(t + C[i] * h, x + h * dx))
            increment = B[0] * k[0] + B[2] * k[2] + B[3] * k[3] + B[4] * k[4] + B[5] * k[5]
            new = x + h * increment
            f_new = piece.rhs(t + h, new)
            error = E[0] * k[0] + E[2] * k[2] + E[3] * k[3] + E[4] * k[4] + E[5] * k[5]
            error = h * (error + E[6] * f_new)
            return new, f_new, error

        return adaptive_steps(self, piece, a, b, x, h, tolerance, scale, alive, max_steps, attempt)
