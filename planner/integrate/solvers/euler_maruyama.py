"""Euler-Maruyama for additive noise dx = f dt + sigma dW with a fixed step (Kloeden & Platen
1992, Numerical Solution of Stochastic Differential Equations, section 10.2: strong order 1 for
additive noise, weak order 1). States that are amounts are kept non-negative."""

from __future__ import annotations

import math

import numpy as np

from planner.integrate.solvers.base import Step, Stepper


class EulerMaruyama(Stepper):
    name = "euler-maruyama"
    order = 1
    adaptive = False

    def __init__(self, noise, nonnegative: bool):
        self.noise = noise
        self.nonnegative = nonnegative

    def steps(self, piece, a, b, x, h, *, members, piece_number, **_):
        count = max(1, math.ceil((b - a) * self.noise.steps_per_year - 1e-9))
        h = (b - a) / count
        noisy = self.noise.noisy
        sigma = np.asarray(self.noise.sigma, dtype=float)[noisy]
        kicks = self.noise.draw(piece_number, count, members) * (
            sigma[None, :, None] * math.sqrt(h)
        )
        rows = [int(i) for i in noisy]
        for j in range(count):
            t = a + j * h
            new = h * piece.rhs(t, x)  # a fresh array (the right-hand side may be a view)
            new += x
            for r, i in enumerate(rows):  # row views: no fancy-indexed copies
                new[i] += kicks[j, r]
            if self.nonnegative:
                np.maximum(new, 0.0, out=new)
            yield Step(t, b if j == count - 1 else t + h, x, new, None, None, h)
            x = new
