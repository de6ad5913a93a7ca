"""Batched linearly implicit Rosenbrock pair of Shampine & Reichelt (1997, The MATLAB ODE Suite,
SIAM J. Sci. Comput. 18:1-22, section 3): order 2 with an order-3 error estimate, L-stable; for
stiff stretches such as the centuries over which sediment P settles."""

from __future__ import annotations

import math

import numpy as np

from planner.integrate.solvers.base import Stepper, adaptive_steps

D = 1.0 / (2.0 + math.sqrt(2.0))
E32 = 6.0 + math.sqrt(2.0)


def batched_solve(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve matrix[:, :, j] y[:, j] = rhs[:, j] for every member j; (n, n, m), (n, m)."""
    n = rhs.shape[0]
    if n == 1:
        return rhs / matrix[0]
    if n == 2:
        a, b, c, d = matrix[0, 0], matrix[0, 1], matrix[1, 0], matrix[1, 1]
        det = a * d - b * c
        return np.stack([(d * rhs[0] - b * rhs[1]) / det, (a * rhs[1] - c * rhs[0]) / det])
    stacked = np.moveaxis(matrix, -1, 0)
    finite = np.isfinite(stacked).all(axis=(1, 2))
    safe = np.where(finite[:, None, None], stacked, np.eye(n))
    try:
        out = np.linalg.solve(safe, np.moveaxis(rhs, -1, 0)[..., None])[..., 0].T
    except np.linalg.LinAlgError:
        out = np.full(rhs.shape, np.nan)
    return np.where(finite, out, np.nan)


class Rosenbrock23(Stepper):
    name = "rosenbrock23"
    order = 2
    stiff = True

    def steps(self, piece, a, b, x, h, *, tolerance, scale, alive, max_steps, **_):
        n = x.shape[0]

        def attempt(t, x, f0, h):
            w = -(h * D) * piece.jac(t, x)
            for i in range(n):
                w[i, i] += 1.0
            drift = (h * D) * piece.dfdt(t, x)
            k1 = batched_solve(w, f0 + drift)
            f1 = piece.rhs(t + 0.5 * h, x + (0.5 * h) * k1)
            k2 = batched_solve(w, f1 - k1) + k1
            new = x + h * k2
            f2 = piece.rhs(t + h, new)
            k3 = batched_solve(w, f2 - E32 * (k2 - f1) - 2.0 * (k1 - f0) + drift)
            return new, f2, (h / 6.0) * (k1 - 2.0 * k2 + k3)

        return adaptive_steps(self, piece, a, b, x, h, tolerance, scale, alive, max_steps, attempt)
