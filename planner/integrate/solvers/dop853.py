"""Batched Dormand-Prince 8(5,3) (Hairer, Norsett & Wanner 1993, Solving Ordinary Differential
Equations I, section II.10; the coefficient tables are scipy's, used by its DOP853): explicit,
order 8, so far fewer steps than the 5(4) pair at tight tolerances; twelve right-hand sides per
step; one step size for the batch (see :func:`planner.integrate.solvers.base.shared_steps`)."""

from __future__ import annotations

import numpy as np

from planner.integrate import fused
from planner.integrate.solvers.base import Stepper, shared_steps

STAGES = 12


def _tables():
    from scipy.integrate._ivp import dop853_coefficients as tables

    return tables


class _DenseOutput:
    """The method's own interpolant of degree 7 over one step (three more right-hand sides,
    evaluated only when asked, for the members asked): crossings inside long steps are then
    located to the method's accuracy, not to a cubic's."""

    def __init__(self, tables, piece, t0, h, x0, x1, f0, f1, stages):
        self.tables, self.piece = tables, piece
        self.t0, self.h = t0, h
        self.x0, self.x1, self.f0, self.f1 = x0, x1, f0, f1
        # None after a compiled attempt, which keeps no stages: recomputed for the members asked
        self.stages = None if stages is None else stages.reshape(stages.shape[0], *x0.shape).copy()
        self.cache: dict = {}

    def _stages(self, piece, x0, f0, f1, pick):
        if self.stages is not None:
            return pick(self.stages)
        tables, h = self.tables, self.h
        k = np.empty((STAGES + 1, *x0.shape))
        k[0], k[STAGES] = f0, f1
        for s in range(1, STAGES):
            y = x0 + h * np.tensordot(tables.A[s, :s], k[:s], axes=1)
            k[s] = piece.rhs(self.t0 + tables.C[s] * h, y)
        return k

    def _terms(self, columns):
        """The interpolant's coefficients for the members asked (built once per set)."""
        key = None if columns is None else np.asarray(columns).tobytes()
        if key not in self.cache:
            tables, h = self.tables, self.h
            pick = (lambda a: a) if columns is None else (lambda a: a[..., columns])
            x0, x1, f0, f1 = pick(self.x0), pick(self.x1), pick(self.f0), pick(self.f1)
            piece = self.piece if columns is None else self.piece.subset(columns)
            k = np.concatenate([self._stages(piece, x0, f0, f1, pick), np.empty((3, *x0.shape))])
            for s in range(STAGES + 1, STAGES + 4):
                y = x0 + h * np.tensordot(tables.A[s, :s], k[:s], axes=1)
                k[s] = piece.rhs(self.t0 + tables.C[s] * h, y)
            delta = x1 - x0
            terms = [delta, h * f0 - delta, 2 * delta - h * (f1 + f0)]
            terms += list(h * np.tensordot(tables.D, k, axes=1))
            self.cache[key] = (x0, terms[::-1])
        return self.cache[key]

    def __call__(self, t, columns=None):
        x0, terms = self._terms(columns)
        share = (np.asarray(t, dtype=float) - self.t0) / self.h
        out = np.zeros_like(x0)
        for i, term in enumerate(terms):
            out = out + term
            out = out * (share if i % 2 == 0 else 1 - share)
        return out + x0


class DormandPrince853(Stepper):
    name = "dop853"
    order = 7  # the error estimate's order: step control exponent 1/8
    shared_step = True

    def steps(self, piece, a, b, x, h, *, tolerance, scale, alive, max_steps, dense=False, **_):
        tables = _tables()
        A, B, C = tables.A[:STAGES, :STAGES], tables.B, tables.C[:STAGES]
        E = np.vstack([tables.E5, tables.E3])
        n = x.shape[0]
        stages = np.empty((STAGES + 1, x.size))

        def attempt(t, x, f, h):
            stages[0] = f.reshape(-1)
            flat = x.reshape(-1)
            for i in range(1, STAGES):
                y = (h * A[i, :i]) @ stages[:i]  # scale the short row, not the long result
                y += flat
                stages[i] = piece.rhs(t + C[i] * h, y.reshape(x.shape)).reshape(-1)
            new = (h * B) @ stages[:STAGES]
            new += flat
            new = new.reshape(x.shape)
            f_new = piece.rhs(t + h, new)
            stages[STAGES] = f_new.reshape(-1)
            # DOP853's error norm per member: the 5th-order estimate, damped by the 3rd-order one
            # (Hairer, Norsett & Wanner 1993, section II.10), weighted by the tolerance.
            weight = np.maximum(np.abs(x), np.abs(new))
            weight *= tolerance.rtol
            weight += tolerance.atol * scale
            both = E @ stages  # both estimates in one product: (2, n * members)
            both /= weight.reshape(-1)
            both *= both
            squares = both.reshape(2, *x.shape).sum(axis=1)
            e5, e3 = squares[0], squares[1]
            error = np.where(e5 > 0, abs(h) * e5 / np.sqrt((e5 + 0.01 * e3) * n), 0.0)
            return new, f_new, error

        compiled = _compiled_attempt(piece, x, tolerance, scale)
        for step in shared_steps(
            self, piece, a, b, x, h, tolerance, scale, alive, max_steps, compiled or attempt
        ):
            # The stages in the buffer are this step's until the next attempt: the driver asks
            # for states inside the step before it asks for the next step.
            step.interpolant = _LazyDense(
                tables, piece, step.t0, step.t1 - step.t0, step, None if compiled else stages
            )
            yield step


def _compiled_attempt(piece, x, tolerance, scale):
    """The same attempt as compiled code (:mod:`planner.integrate.fused`) when the batch is
    large, the parameters are fixed over the piece and the model compiles; else None."""
    m = x.shape[1] if x.ndim == 2 else 0
    if m < fused.FUSED_MIN_MEMBERS or piece.fixed_values is None or np.shape(scale)[-1] != 1:
        return None
    kernel = fused.kernel_for(piece.functions)
    if kernel is None:
        return None
    values = fused.member_values(piece.fixed_values, m)
    factor = np.broadcast_to(np.asarray(piece.factor, dtype=float), (m,))
    atol_scale = np.ascontiguousarray(tolerance.atol * np.asarray(scale, dtype=float)[:, 0])
    rtol = float(tolerance.rtol)
    u_a, slope, start = float(piece.u_a), float(piece.slope), float(piece.a)

    def attempt(t, x, f, h):
        new = np.empty_like(x)
        f_new = np.empty_like(x)
        error = np.empty(m)
        kernel(
            float(t),
            float(h),
            x,
            f,
            u_a,
            slope,
            start,
            factor,
            values,
            rtol,
            atol_scale,
            new,
            f_new,
            error,
        )
        return new, f_new, error

    return attempt


class _LazyDense:
    def __init__(self, tables, piece, t0, h, step, stages):
        self.arguments = (tables, piece, t0, h, step, stages)
        self.built = None

    def __call__(self, t, columns=None):
        if self.built is None:
            tables, piece, t0, h, step, stages = self.arguments
            self.built = _DenseOutput(
                tables, piece, t0, h, step.x0, step.x1, step.f0, step.f1, stages
            )
        return self.built(t, columns)
