"""Equilibrium curves against the control: continuation, folds, stability, window and verdict.

Method (pseudo-arclength continuation, e.g. Keller 1977; Allgower & Georg 2003, Introduction to
Numerical Continuation Methods, ch. 2): equilibria f(x, u) = 0 form curves in (x, u). Each curve is
traced by a tangent predictor and a Newton corrector on the hyperplane orthogonal to the tangent,
in coordinates scaled so that state and control weigh alike, with a step that adapts to the
curvature. Curves are seeded from every equilibrium found at several control values (root
brackets in 1-D, a cloud of Newton starts in n-D), so isolated branches are found too. A fold
(saddle-node) is a sign change of the control component of the tangent, refined by Newton on the
extended system f = 0, J v = 0, c.v = 1 until |f| < 1e-10. Stability is read from the real parts
of the Jacobian's eigenvalues.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from typing import Literal

import numpy as np
from scipy.optimize import brentq

from planner.integrate import Status, Tolerance, settle, system_limits
from planner.models import System

# Tuning constants (scaled units: state by its magnitude, control by the range width).
EXTEND = 0.5  # continue this fraction of the range width beyond each end, to find folds just out
SEED_CONTROLS_1D = 21
SEED_CONTROLS_ND = 9
SEED_GRID_1D = 1500
BISECTIONS = 45
NEWTON_STARTS_ND = 256
STEP_START = 0.002
STEP_MAX = 0.04
STEP_MIN = 1e-9
PREDICTOR_ERROR = 5e-4  # target distance between predicted and corrected point
CORRECTOR_ITERATIONS = 8
CORRECTOR_TOL = 1e-10
MAX_POINTS = 20000
UPRIGHT_STEP = 0.05
UPRIGHT_FLOOR = 1e-5
COVER_DISTANCE = 2e-3
NEGATIVE_MARGIN = 0.02  # scaled state allowed below zero for non-negative models
RUN_MATCH = 0.05  # scaled distance within which an equilibrium belongs to a traced run
FOLD_NUDGE = 1e-3  # how far past a fold (fraction of the range width) the jump is probed

Classification = Literal["reversible", "hysteretic", "irreversible"]
FoldKind = Literal["collapse", "recovery", "fold"]


@dataclass(frozen=True)
class Fold:
    """A saddle-node: where two equilibria meet and vanish as the control passes ``control``.

    ``vanish_direction`` is +1 when they vanish as the control rises past the fold, -1 when it
    falls. ``kind``: collapse (passing it loses the desired state), recovery (passing it loses
    the undesired state), fold (neither, e.g. the state leaves every equilibrium).
    """

    control: float
    state: np.ndarray
    kind: FoldKind
    residual: float
    vanish_direction: int
    in_range: bool


@dataclass(frozen=True)
class Branch:
    """One traced equilibrium curve, in arclength order."""

    controls: np.ndarray
    states: np.ndarray  # (k, n)
    stable: np.ndarray  # (k,) bool
    closed: bool = False

    def runs(self) -> list[tuple[bool, slice]]:
        """Maximal runs of equal stability; neighbouring runs share their end point."""
        out: list[tuple[bool, slice]] = []
        start = 0
        for i in range(1, len(self.stable) + 1):
            if i == len(self.stable) or self.stable[i] != self.stable[start]:
                out.append((bool(self.stable[start]), slice(start, min(i + 1, len(self.stable)))))
                start = i
        return out


@dataclass(frozen=True)
class Equilibrium:
    state: np.ndarray
    stable: bool
    eigenvalues: np.ndarray


@dataclass(frozen=True)
class StabilityChange:
    """Where a branch changes stability away from a fold (``oscillatory``: a complex pair
    crosses, a Hopf point; otherwise a real eigenvalue crosses). Located by linear
    interpolation between traced points, not refined."""

    control: float
    state: np.ndarray
    oscillatory: bool
    in_range: bool


@dataclass(frozen=True)
class StableRun:
    """Stable equilibria between folds, sorted by control; ``undesired``: see stable_runs."""

    controls: np.ndarray
    states: np.ndarray  # (k, n)
    undesired: bool


ThresholdKind = Literal["fold", "hopf", "stability change"]


@dataclass(frozen=True)
class Window:
    """A bistable window: between the recovery and the collapse threshold, each the control
    value where a regime stops being a stable attractor along its branch (``*_kind``: at a
    fold, a Hopf point, or a real eigenvalue crossing zero away from a fold); ``*_state`` the
    equilibrium there."""

    recovery: float | None
    collapse: float | None
    recovery_kind: ThresholdKind = "fold"
    collapse_kind: ThresholdKind = "fold"
    recovery_state: np.ndarray | None = field(default=None, repr=False, compare=False)
    collapse_state: np.ndarray | None = field(default=None, repr=False, compare=False)


@dataclass(frozen=True)
class Threshold:
    """Where one regime stops being a stable attractor as the control passes ``location``.

    ``lost``: the regime that ends there ("undesired" for the recovery threshold, "desired"
    for the collapse threshold). ``kind``: a fold (the equilibrium meets the basin boundary and
    vanishes), a Hopf point (it turns into a growing spiral: the lake swings before it leaves)
    or another stability change. ``location`` is where that happens along the branch, None
    when the regime persists over the whole searched range. ``reachable`` is False when the
    location lies outside what the control can do (below the lowest achievable load, outside
    the control range); ``reason`` then says why in words, and :attr:`value` is None: such a
    threshold is never an actionable load.
    """

    lost: Literal["undesired", "desired"]
    kind: ThresholdKind
    location: float | None
    state: np.ndarray | None = field(repr=False, compare=False)
    reachable: bool
    reason: str | None = None

    @property
    def value(self) -> float | None:
        return self.location if self.reachable else None


@dataclass(frozen=True)
class Diagram:
    """Everything known about the equilibria of one system over one control range."""

    system: System
    control_range: tuple[float, float]
    least: float
    target_index: int
    regime: Literal["lowest", "highest"]
    branches: list[Branch]
    folds: list[Fold]
    windows: list[Window]
    window: Window | None
    classification: Classification
    scale: np.ndarray = field(repr=False)
    stability_changes: list[StabilityChange] = field(default_factory=list)
    recovery: Threshold | None = None
    collapse: Threshold | None = None

    @property
    def recovery_threshold(self) -> float | None:
        """The control value below which the undesired regime is no longer a stable attractor;
        None when there is none the control can reach (see :attr:`recovery`)."""
        return None if self.recovery is None else self.recovery.value

    @property
    def collapse_threshold(self) -> float | None:
        """The control value above which the desired regime is lost; None when unreachable."""
        return None if self.collapse is None else self.collapse.value

    @cached_property
    def most_stable_states(self) -> int:
        """The largest number of stable equilibria that coexist at one control value in range
        (2 for a hysteretic lake, 3 or more for multi-stable ones)."""
        low, high = self.control_range
        spans = [
            (float(run.controls[0]), float(run.controls[-1]))
            for run in self.stable_runs
            if run.controls[-1] >= low and run.controls[0] <= high
        ]
        probes = [np.clip(0.5 * (a + b), low, high) for a, b in spans]
        ends = sorted({min(max(v, low), high) for span in spans for v in span} | {low, high})
        probes += [0.5 * (a + b) for a, b in zip(ends, ends[1:], strict=False)]
        return int(max((sum(bool(a <= u <= b) for a, b in spans) for u in probes), default=0))

    def equilibria_at(self, u: float) -> list[Equilibrium]:
        """All traced equilibria at control ``u``, polished by Newton, in branch order."""
        found: list[Equilibrium] = []
        for branch in self.branches:
            c = branch.controls
            guesses = []
            for i in np.nonzero((c[:-1] - u) * (c[1:] - u) <= 0)[0]:
                bracketed = self._bracketed_root(branch.states[i], branch.states[i + 1], u)
                if bracketed is not None:
                    guesses.append(bracketed)
                    continue
                w = 0.0 if c[i + 1] == c[i] else (u - c[i]) / (c[i + 1] - c[i])
                guesses.append((1 - w) * branch.states[i] + w * branch.states[i + 1])
            for end in (0, -1):  # a branch that stops just short of u (e.g. at zero state)
                if abs(c[end] - u) < 1e-6 * self.scale[-1]:
                    guesses.append(branch.states[end])
            for guess in guesses:
                x = _newton_fixed_control(self.system, guess, u)
                if x is None:
                    continue
                if any(np.max(np.abs(x - e.state) / self.scale[:-1]) < 1e-6 for e in found):
                    continue
                eigenvalues = np.linalg.eigvals(self.system.jac(x, u))
                found.append(Equilibrium(x, bool(np.max(eigenvalues.real) < 0), eigenvalues))
        return found

    def _bracketed_root(self, a: np.ndarray, b: np.ndarray, u: float) -> np.ndarray | None:
        """In 1-D, the root between two neighbouring branch points by bisection (robust next to
        a fold, where Newton from an interpolated guess can slide to the partner root)."""
        if self.system.n != 1 or a[0] == b[0]:
            return None
        f = lambda x: float(self.system.rhs(np.array([x]), u)[0])  # noqa: E731
        fa, fb = f(a[0]), f(b[0])
        if fa == 0.0:
            return a.copy()
        if not (np.isfinite(fa) and np.isfinite(fb)) or fa * fb > 0:
            return None
        return np.array([brentq(f, a[0], b[0], xtol=1e-15, rtol=4 * np.finfo(float).eps)])

    @cached_property
    def stable_runs(self) -> list[StableRun]:
        """Every run of stable equilibria, sorted by control, each flagged ``undesired`` when
        somewhere along it another stable run lies lower (``regime`` "lowest") at the same
        control: the turbid branch of a hysteretic lake stays turbid beyond the collapse
        threshold, where it is the only equilibrium left."""
        runs = []
        for branch in self.branches:
            for stable, part in branch.runs():
                if stable and part.stop - part.start >= 2:
                    order = np.argsort(branch.controls[part], kind="stable")
                    runs.append((branch.controls[part][order], branch.states[part][order]))
        sign = 1.0 if self.regime == "lowest" else -1.0
        k = self.target_index
        tolerance = 1e-9 * self.scale[k]
        out = []
        for i, (c, x) in enumerate(runs):
            undesired = False
            for j, (c2, x2) in enumerate(runs):
                low, high = max(c[0], c2[0]), min(c[-1], c2[-1])
                if i == j or not high > low:
                    continue
                probe = np.linspace(low, high, 7)[1:-1]
                mine = np.interp(probe, c, x[:, k])
                other = np.interp(probe, c2, x2[:, k])
                undesired |= bool(np.any(sign * other < sign * mine - tolerance))
            out.append(StableRun(c, x, undesired))
        return out

    def desired_candidates(self, u: float) -> list[Equilibrium]:
        """Stable equilibria at ``u`` that do not lie on an undesired run."""
        found = []
        for e in self.equilibria_at(u):
            if not e.stable:
                continue
            nearest, distance = None, np.inf
            for run in self.stable_runs:
                if run.controls[0] <= u <= run.controls[-1]:
                    guess = np.array(
                        [np.interp(u, run.controls, run.states[:, i]) for i in range(len(e.state))]
                    )
                    d = float(np.max(np.abs(guess - e.state) / self.scale[:-1]))
                    if d < distance:
                        nearest, distance = run, d
            if nearest is None or distance > RUN_MATCH or not nearest.undesired:
                found.append(e)
        return found

    def desired_attractor(self, u: float) -> Equilibrium | None:
        """The stable equilibrium at ``u`` with the lowest (or highest) target variable, among
        those not on an undesired run; None when only undesired states exist at ``u``."""
        stable = self.desired_candidates(u)
        if not stable:
            return None
        sign = 1.0 if self.regime == "lowest" else -1.0
        return min(stable, key=lambda e: sign * e.state[self.target_index])


# ---------------------------------------------------------------------------------------------
# Newton helpers


def _newton_fixed_control(system: System, x: np.ndarray, u: float) -> np.ndarray | None:
    x = np.array(x, dtype=float)
    for _ in range(30):
        f = system.rhs(x, u)
        try:
            dx = np.linalg.solve(system.jac(x, u), -f)
        except np.linalg.LinAlgError:
            return None
        x = x + dx
        if not np.all(np.isfinite(x)):
            return None
        if np.max(np.abs(dx) / np.maximum(np.abs(x), 1e-12)) < 1e-13:
            break
    if np.max(np.abs(system.rhs(x, u))) > 1e-8 * (1 + np.max(np.abs(x))):
        return None
    return x


def _batched_newton(system: System, x: np.ndarray, u: float, nonnegative: bool) -> np.ndarray:
    """Newton from many starts at once; x is (n, P). Returns the converged columns."""
    x = np.array(x, dtype=float)
    for _ in range(60):
        f = system.rhs(x, u)
        jac = np.moveaxis(system.jac(x, u), -1, 0)
        with np.errstate(all="ignore"):
            ok = np.isfinite(jac).all(axis=(1, 2)) & (np.abs(np.linalg.det(jac)) > 1e-300)
            step = np.zeros_like(x)
            if ok.any():
                step[:, ok] = -np.linalg.solve(jac[ok], f.T[ok][..., None])[..., 0].T
        limit = 0.5 * np.maximum(np.abs(x), 1e-3)  # damping: at most half the magnitude per step
        step = np.clip(step, -limit * 4, limit * 4)
        new = x + step
        if nonnegative:
            new = np.where(new < 0, x / 4, new)
        x = np.where(ok, new, np.nan)
    f = system.rhs(x, u)
    with np.errstate(invalid="ignore"):
        good = np.all(np.isfinite(x), axis=0) & np.all(np.abs(f) < 1e-9 * (1 + np.abs(x)), axis=0)
    return x[:, good]


def _unique_columns(x: np.ndarray, scale: np.ndarray) -> list[np.ndarray]:
    out: list[np.ndarray] = []
    for column in x.T:
        if not any(np.max(np.abs(column - y) / scale) < 1e-6 for y in out):
            out.append(column)
    return out


# ---------------------------------------------------------------------------------------------
# Seeds


def _seeds_1d(system: System, controls: np.ndarray, span: float, nonnegative: bool) -> list:
    """All roots of the scalar f(x, u) at each control, from sign changes on a wide grid."""
    linear = np.linspace(0.0 if nonnegative else -span, span, SEED_GRID_1D)
    logs = np.logspace(-8, 6, 500)
    grid = np.unique(np.concatenate([linear, logs] if nonnegative else [linear, logs, -logs]))
    with np.errstate(all="ignore"):
        values = system.rhs(grid[None, :, None], controls[None, :])[0]  # (grid, controls)
    finite = np.isfinite(values)
    sign = np.sign(values)
    i, k = np.nonzero(finite[:-1] & finite[1:] & (sign[:-1] * sign[1:] <= 0) & (sign[1:] != 0))
    a, b = grid[i], grid[i + 1]
    u = controls[k]
    fa = values[i, k]
    for _ in range(BISECTIONS):  # all brackets at once; the corrector polishes the rest
        middle = 0.5 * (a + b)
        fm = system.rhs(middle[None, :], u)[0]
        left = np.sign(fm) * np.sign(fa) <= 0
        b = np.where(left, middle, b)
        a = np.where(left, a, middle)
        fa = np.where(left, fa, fm)
    roots = np.where(values[i, k] == 0, grid[i], 0.5 * (a + b))
    return [(np.array([root]), float(control)) for root, control in zip(roots, u, strict=True)]


def _seeds_nd(
    system: System, controls: np.ndarray, reference: np.ndarray, nonnegative: bool
) -> list:
    rng = np.random.default_rng(20261202)
    n = system.n
    high = 10 * np.maximum(np.abs(reference), 1.0)
    starts = np.exp(rng.uniform(np.log(1e-4), np.log(high)[:, None], size=(n, NEWTON_STARTS_ND)))
    if not nonnegative:
        starts *= rng.choice([-1.0, 1.0], size=starts.shape)
    starts = np.concatenate([starts, reference[:, None]], axis=1)
    seeds = []
    for u in controls:
        roots = _batched_newton(system, starts, float(u), nonnegative)
        for x in _unique_columns(roots, np.maximum(np.abs(reference), 1e-3)):
            seeds.append((x, float(u)))
    return seeds


# ---------------------------------------------------------------------------------------------
# Continuation


@dataclass
class _Tracer:
    system: System
    scale: np.ndarray  # (n + 1,): state scales, then the control scale
    u_bounds: tuple[float, float]
    nonnegative: bool
    limit: float

    @property
    def _last(self) -> np.ndarray:
        e = np.zeros(len(self.scale))
        e[-1] = 1.0
        return e

    def linearised(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Residual f and its derivative in the scaled coordinates z, from one compiled call."""
        x, u = z[:-1] * self.scale[:-1], z[-1] * self.scale[-1]
        f, jac, dfdu = self.system.linearised(x, u)
        return f, np.column_stack([jac * self.scale[:-1][None, :], dfdu * self.scale[-1]])

    def derivative(self, z: np.ndarray) -> np.ndarray:
        return self.linearised(z)[1]

    def tangent(self, z: np.ndarray, previous: np.ndarray | None) -> np.ndarray | None:
        """Unit null vector of the derivative, oriented along ``previous`` when given."""
        derivative = self.derivative(z)
        if not np.all(np.isfinite(derivative)):
            return None
        if previous is not None:  # bordered solve [DF; t_prev] v = e_last: cheaper than an SVD
            try:
                t = np.linalg.solve(np.vstack([derivative, previous]), self._last)
                return t / np.linalg.norm(t)
            except np.linalg.LinAlgError:
                pass
        _, _, vt = np.linalg.svd(derivative)
        t = vt[-1]
        if previous is not None and t @ previous < 0:
            t = -t
        return t / np.linalg.norm(t)

    def correct(self, z_pred: np.ndarray, t: np.ndarray) -> np.ndarray | None:
        z = z_pred.copy()
        for _ in range(CORRECTOR_ITERATIONS):
            f, derivative = self.linearised(z)
            g = np.concatenate([f, [t @ (z - z_pred)]])
            a = np.vstack([derivative, t])
            if not (np.all(np.isfinite(g)) and np.all(np.isfinite(a))):
                return None
            try:
                dz = np.linalg.solve(a, -g)
            except np.linalg.LinAlgError:
                return None
            z = z + dz
            if np.max(np.abs(dz)) < CORRECTOR_TOL:
                return z
        return None

    def inside(self, z: np.ndarray) -> bool:
        x, u = z[:-1] * self.scale[:-1], z[-1] * self.scale[-1]
        if not (self.u_bounds[0] <= u <= self.u_bounds[1]):
            return False
        if not np.all(np.isfinite(x)) or np.max(np.abs(x)) > self.limit:
            return False
        # A little below zero is allowed so that a branch ending at zero state (no load, no
        # phosphorus) is traced across the lower end of the range rather than stopping short.
        return not (self.nonnegative and np.min(z[:-1]) < -NEGATIVE_MARGIN)

    def trace(self, z0: np.ndarray, direction: float) -> tuple[list[np.ndarray], bool]:
        """Follow the curve from z0 in one direction; returns points and whether it closed."""
        t0 = self.tangent(z0, None)
        if t0 is None:
            return [z0], False
        t = direction * t0
        points = [z0]
        h = STEP_START
        z = z0
        travelled = 0.0
        while len(points) < MAX_POINTS:
            z_pred = z + h * t
            z_new = self.correct(z_pred, t)
            t_new = None if z_new is None else self.tangent(z_new, t)
            if t_new is None:
                z_new = None
            else:
                error = np.linalg.norm(z_new - z_pred)
                turn = t_new @ t
                if error > 4 * PREDICTOR_ERROR or turn < 0.95:
                    z_new = None  # too far from the prediction or too sharp a turn: smaller step
            if z_new is None:
                h /= 2
                if h < STEP_MIN:
                    break
                continue
            if not self.inside(z_new):
                end = self._boundary_point(z, z_new)
                if end is not None:
                    points.append(end)
                break
            travelled += np.linalg.norm(z_new - z)
            points.append(z_new)
            if (
                travelled > 10 * h
                and np.linalg.norm(z_new - z0) < 1.5 * h
                and t_new @ (z0 - z_new) > 0
            ):
                points.append(z0)
                return points, True
            z, t = z_new, t_new
            factor = np.sqrt(PREDICTOR_ERROR / max(error, 1e-12))
            h = float(np.clip(h * min(max(factor, 0.5), 2.0), STEP_MIN, STEP_MAX))
            # Where the curve stands nearly upright in the control (|t_u| small) an S-bend as
            # narrow as a window near a cusp can hide between two steps; capping the step by
            # sqrt(|t_u|) makes steps shrink in proportion to the distance from such a point.
            h = max(min(h, UPRIGHT_STEP * np.sqrt(abs(t[-1]))), UPRIGHT_FLOOR)
        return points, False

    def _boundary_point(self, z_in: np.ndarray, z_out: np.ndarray) -> np.ndarray | None:
        """Where the segment leaves the control range, corrected onto the curve."""
        u_in, u_out = z_in[-1] * self.scale[-1], z_out[-1] * self.scale[-1]
        low, high = self.u_bounds
        edge = high if u_out > high else low if u_out < low else None
        if edge is None or u_out == u_in:
            return None
        w = (edge - u_in) / (u_out - u_in)
        guess = ((1 - w) * z_in + w * z_out)[:-1] * self.scale[:-1]
        x = _newton_fixed_control(self.system, guess, edge)
        if x is None:
            return None
        z = np.concatenate([x / self.scale[:-1], [edge / self.scale[-1]]])
        return z if np.linalg.norm(z - z_in) < 4 * STEP_MAX else None


def follow_branch(
    system: System, x: np.ndarray, u: float, u_new: float, width: float, state_scale: np.ndarray
) -> np.ndarray | None:
    """Continue the equilibrium (x, u) along its branch to the control ``u_new``.

    Returns the equilibrium reached at ``u_new``, or None when the branch turns back at a fold
    (or ends) before getting there: the state must then jump to another branch.
    """
    scale = np.concatenate([np.maximum(np.abs(x), state_scale), [width]])
    low, high = min(u, u_new), max(u, u_new)
    tracer = _Tracer(system, scale, (low, high), system.model.spec.nonnegative_state, np.inf)
    z0 = np.concatenate([x / scale[:-1], [u / scale[-1]]])
    tangent = tracer.tangent(z0, None)
    if tangent is None or tangent[-1] == 0:
        return None
    direction = np.sign(tangent[-1]) * np.sign(u_new - u)
    points, _ = tracer.trace(z0, float(direction))
    end = points[-1]
    if abs(end[-1] * scale[-1] - u_new) > 1e-9 * width:
        return None
    return end[:-1] * scale[:-1]


def _refine_change(
    system: System, states: np.ndarray, controls: np.ndarray, leading: np.ndarray
) -> tuple[float, np.ndarray, bool]:
    """Where the leading eigenvalue's real part crosses zero between two traced points away
    from a fold: bisection on the control (the control is a good coordinate there), each
    equilibrium polished by Newton at a fixed control. Returns the control, the equilibrium and
    whether a complex pair crosses (a Hopf point) rather than a real eigenvalue."""
    (u_a, u_b), (x_a, x_b) = controls, states
    sign_a = leading[0] < 0
    x_mid = x_a
    for _ in range(BISECTIONS):
        u_mid = 0.5 * (u_a + u_b)
        w = 0.0 if u_b == u_a else (u_mid - controls[0]) / (controls[1] - controls[0])
        polished = _newton_fixed_control(system, (1 - w) * states[0] + w * states[1], u_mid)
        if polished is None:
            break
        x_mid = polished
        if (np.max(np.linalg.eigvals(system.jac(x_mid, u_mid)).real) < 0) == sign_a:
            u_a, x_a = u_mid, x_mid
        else:
            u_b, x_b = u_mid, x_mid
    u_c = 0.5 * (u_a + u_b)
    x_c = 0.5 * (x_a + x_b)
    eigenvalues = np.linalg.eigvals(system.jac(x_c, u_c))
    critical = eigenvalues[np.argmax(eigenvalues.real)]
    return float(u_c), x_c, bool(abs(critical.imag) > 1e-9 * (1 + abs(critical)))


def _refine_fold(system: System, x: np.ndarray, u: float) -> tuple[np.ndarray, float, float]:
    """Newton on f = 0, J v = 0, c.v = 1 (unknowns x, u, v). Returns x, u and |f|."""
    n = system.n
    _, _, vt = np.linalg.svd(system.jac(x, u))
    v = vt[-1]
    c = v.copy()
    for _ in range(40):
        f = system.rhs(x, u)
        jac = system.jac(x, u)
        g = np.concatenate([f, jac @ v, [c @ v - 1.0]])
        a = np.zeros((2 * n + 1, 2 * n + 1))
        a[:n, :n] = jac
        a[:n, n] = system.dfdu(x, u)
        a[n : 2 * n, :n] = np.einsum("ijk,j->ik", system.hessians(x, u), v)
        a[n : 2 * n, n] = system.jac_u(x, u) @ v
        a[n : 2 * n, n + 1 :] = jac
        a[2 * n, n + 1 :] = c
        try:
            step = np.linalg.solve(a, -g)
        except np.linalg.LinAlgError:
            break
        x, u, v = x + step[:n], u + step[n], v + step[n + 1 :]
        if not (np.all(np.isfinite(x)) and np.isfinite(u)):
            raise FloatingPointError("fold refinement left the finite numbers")
        if np.max(np.abs(step)) < 1e-14 * (1 + np.max(np.abs(np.concatenate([x, [u]])))):
            break
    return x, float(u), float(np.max(np.abs(system.rhs(x, u))))


# ---------------------------------------------------------------------------------------------
# The diagram


def _distance_to_polyline(point: np.ndarray, line: np.ndarray) -> float:
    if len(line) == 1:
        return float(np.linalg.norm(point - line[0]))
    a, b = line[:-1], line[1:]
    ab = b - a
    length2 = np.maximum(np.sum(ab * ab, axis=1), 1e-300)
    w = np.clip(np.sum((point - a) * ab, axis=1) / length2, 0.0, 1.0)
    nearest = a + w[:, None] * ab
    return float(np.min(np.linalg.norm(point - nearest, axis=1)))


def compute_diagram(
    system: System,
    control_range: tuple[float, float],
    *,
    reference_state: np.ndarray,
    target_index: int = 0,
    regime: Literal["lowest", "highest"] = "lowest",
    least: float | None = None,
    current_control: float | None = None,
    limit: float = 1e6,
    progress: Callable[[float, str], None] | None = None,
) -> Diagram:
    """Trace every equilibrium curve of ``system`` over ``control_range`` and classify the lake.

    ``reference_state`` (the current state) sets the state scales and the Newton starts;
    ``least`` is the lowest achievable control (default: the lower end of the range).
    """
    report = progress or (lambda fraction, message: None)
    low, high = map(float, control_range)
    least = low if least is None else float(least)
    width = high - low
    u_bounds = (low - EXTEND * width, high + EXTEND * width)
    nonnegative = system.model.spec.nonnegative_state
    reference = np.asarray(reference_state, dtype=float)

    report(0.0, "finding equilibria at seed control values")
    if system.n == 1:
        controls = np.linspace(u_bounds[0], u_bounds[1], SEED_CONTROLS_1D)
        seeds = _seeds_1d(system, controls, 10 * max(abs(reference[0]), 1.0), nonnegative)
    else:
        controls = np.linspace(u_bounds[0], u_bounds[1], SEED_CONTROLS_ND)
        seeds = _seeds_nd(system, controls, reference, nonnegative)
        if current_control is not None:  # the attractor the lake is in now is a seed too
            run = _settle(system, reference, float(current_control), limit)
            if run.status is Status.SETTLED:
                seeds.insert(0, (run.final_state[:, 0], float(current_control)))

    magnitude = np.max(np.abs([x for x, _ in seeds]), axis=0) if seeds else np.abs(reference)
    scale = np.concatenate([np.maximum(np.maximum(magnitude, np.abs(reference)), 1e-3), [width]])
    tracer = _Tracer(system, scale, u_bounds, nonnegative, limit)

    traced: list[np.ndarray] = []
    closed_flags: list[bool] = []
    for k, (x, u) in enumerate(seeds):
        report(
            0.1 + 0.7 * k / max(len(seeds), 1), f"tracing equilibrium curves ({len(traced)} so far)"
        )
        z0 = np.concatenate([x / scale[:-1], [u / scale[-1]]])
        if any(_distance_to_polyline(z0, line) < COVER_DISTANCE for line in traced):
            continue
        forward, closed = tracer.trace(z0, +1.0)
        if closed:
            line = np.array(forward)
        else:
            backward, _ = tracer.trace(z0, -1.0)
            line = np.array(backward[::-1] + forward[1:])
        traced.append(line)
        closed_flags.append(closed)

    report(0.8, "refining folds and stability")
    branches = []
    raw_folds = []
    changes: list[StabilityChange] = []
    for line, closed in zip(traced, closed_flags, strict=True):
        states = line[:, :-1] * scale[:-1]
        controls_b = line[:, -1] * scale[-1]
        with np.errstate(all="ignore"):
            jac = np.moveaxis(system.jac(states.T, controls_b), -1, 0)
        finite = np.all(np.isfinite(jac), axis=(1, 2))
        if not finite.all():
            # Where the model overflows (a huge exponent or rate far out on a curve) its
            # stability cannot be judged: the curve is kept up to the first such point.
            first = int(np.argmin(finite))
            if first < 2:
                continue
            states, controls_b, jac = states[:first], controls_b[:first], jac[:first]
        eigenvalues = np.linalg.eigvals(jac)
        leading = np.max(eigenvalues.real, axis=1)
        stable = leading < 0
        steps = np.diff(controls_b)
        extremes = np.nonzero(np.sign(steps[:-1]) * np.sign(steps[1:]) < 0)[0] + 1
        for i in np.nonzero(stable[:-1] != stable[1:])[0]:
            if (
                np.min(np.abs(extremes - i), initial=99) <= 2
                or np.min(np.abs(extremes - i - 1), initial=99) <= 2
            ):
                continue  # the change belongs to a fold
            u_c, x_c, oscillatory = _refine_change(
                system, states[i : i + 2], controls_b[i : i + 2], leading[i : i + 2]
            )
            changes.append(StabilityChange(u_c, x_c, oscillatory, low <= u_c <= high))
        for extreme in extremes:
            x_f, u_f, residual = _refine_fold(system, states[extreme], controls_b[extreme])
            side = np.sign(controls_b[extreme - 1] - controls_b[extreme])
            raw_folds.append((len(branches), extreme, x_f, u_f, residual, -int(side or 1)))
            # The refined fold replaces the traced turning point, so the branch reaches the
            # fold itself and equilibria just short of it are found by interpolation.
            if np.max(np.abs(x_f - states[extreme]) / scale[:-1]) < 10 * STEP_MAX:
                states[extreme], controls_b[extreme] = x_f, u_f
                stable[extreme] = stable[extreme - 1]
        branches.append(Branch(controls_b, states, stable, closed))

    diagram = Diagram(
        system=system,
        control_range=(low, high),
        least=least,
        target_index=target_index,
        regime=regime,
        branches=branches,
        folds=[],
        windows=[],
        window=None,
        classification="reversible",
        scale=scale,
        stability_changes=changes,
    )
    folds: list[Fold] = []
    fold_places: list[tuple[int, int]] = []
    for branch_index, index, x_f, u_f, residual, vanish in raw_folds:
        if any(
            abs(u_f - f.control) < 1e-9 * width and np.allclose(x_f, f.state, rtol=1e-7)
            for f in folds
        ):
            continue
        change = _jump(diagram, x_f, u_f + vanish * FOLD_NUDGE * width, limit)
        kind: FoldKind = "fold"
        if change != 0:
            improves = change < 0 if regime == "lowest" else change > 0
            kind = "recovery" if improves else "collapse"
        folds.append(Fold(float(u_f), x_f, kind, residual, vanish, bool(low <= u_f <= high)))
        fold_places.append((branch_index, index))

    diagram = dataclasses.replace(diagram, folds=folds)
    windows = _windows(diagram, folds, fold_places)
    u_now = least if current_control is None else float(current_control)
    attractor = None
    if len(windows) > 1 and current_control is not None:
        # several windows (three or more stable states): the lake's own branch decides
        run = _settle(system, reference, u_now, limit)
        attractor = run.final_state[:, 0] if run.status is Status.SETTLED else None
    window = _main_window(diagram, windows, u_now, (low, high), attractor)
    recovery, collapse = _thresholds(window, (low, high), least)
    stable_at_least = [e for e in diagram.equilibria_at(least) if e.stable]
    if len(stable_at_least) >= 2:
        classification: Classification = "irreversible"
    elif any(_overlap(w, (low, high)) > 0 for w in windows):
        classification = "hysteretic"
    else:
        classification = "reversible"
    report(1.0, "done")
    fields = {"windows": windows, "window": window, "recovery": recovery, "collapse": collapse}
    return dataclasses.replace(diagram, **fields, classification=classification)


def _thresholds(
    window: Window | None, control_range: tuple[float, float], least: float
) -> tuple[Threshold | None, Threshold | None]:
    """The recovery and collapse thresholds of the main window, each reachable or not."""
    if window is None:
        return None, None
    low, high = control_range
    recovery = window.recovery
    if recovery is None:
        reason = "the undesired regime stays stable over the whole searched range"
    elif recovery < least:
        reason = (
            "the undesired regime stays stable down to the lowest achievable control value, "
            f"{least:g}"
        )
    elif recovery > high:
        reason = f"it lies above the control range, which ends at {high:g}"
    else:
        reason = None
    collapse = window.collapse
    if collapse is None:
        collapse_reason = "the desired regime stays stable over the whole searched range"
    elif collapse > high:
        collapse_reason = f"the desired regime stays stable up to the top of the range, {high:g}"
    elif collapse < low:
        collapse_reason = f"it lies below the control range, which starts at {low:g}"
    else:
        collapse_reason = None
    return (
        Threshold(
            "undesired",
            window.recovery_kind,
            recovery,
            window.recovery_state,
            reason is None,
            reason,
        ),
        Threshold(
            "desired",
            window.collapse_kind,
            collapse,
            window.collapse_state,
            collapse_reason is None,
            collapse_reason,
        ),
    )


def _settle(system: System, x: np.ndarray, u: float, limit: float):
    """Integrate at a frozen control until the state settles (cap 1e5 years)."""
    limits = system_limits(system, limit)
    return settle(system, x, u, cap=1e5, limits=limits, tolerance=Tolerance(rtol=1e-7, atol=1e-10))


def _jump(diagram: Diagram, x_f: np.ndarray, u_beyond: float, limit: float) -> float:
    """Sign of the change in the target variable when the control passes a fold a little.

    The kind of a fold follows this jump, not the local stability: in slow-fast lakes the
    turbid equilibrium can lose stability (a Hopf point) before its fold, and the fold still
    marks where the turbid branch ends (:attr:`Diagram.stability_changes` reports such points).
    In 1-D the destination is exact: the nearest stable equilibrium in the direction of the
    flow (none: the state runs off that way). In n-D the state is integrated until it settles.
    Returns -1, +1, or 0 when the state does not move measurably.
    """
    k = diagram.target_index
    system = diagram.system
    if system.n == 1:
        direction = np.sign(system.rhs(x_f, u_beyond)[0])
        return float(direction)
    run = _settle(system, x_f, u_beyond, limit)
    if run.status not in (Status.SETTLED, Status.DIVERGED):
        return 0.0
    change = run.final_state[k, 0] - x_f[k]
    if not np.isfinite(change) or abs(change) < 1e-6 * max(abs(x_f[k]), 1e-9):
        return 0.0
    return float(np.sign(change))


def _windows(diagram: Diagram, folds: list[Fold], places: list[tuple[int, int]]) -> list[Window]:
    """Pair consecutive recovery and collapse folds along each branch into bistable windows.

    A fold left without its partner (the other one lies beyond the search) gives a half-open
    window, Window(None, collapse): the undesired state persists below the whole search; but
    only where two stable states really coexist next to the fold.
    """
    windows = []
    width = diagram.control_range[1] - diagram.control_range[0]
    for b in range(len(diagram.branches)):
        on_branch = sorted(
            ((index, fold) for (bb, index), fold in zip(places, folds, strict=True) if bb == b),
            key=lambda pair: pair[0],
        )
        kinds = [fold for _, fold in on_branch if fold.kind in ("recovery", "collapse")]
        paired: set[int] = set()
        for first, second in zip(kinds, kinds[1:], strict=False):
            if {first.kind, second.kind} == {"recovery", "collapse"}:
                recovery = first if first.kind == "recovery" else second
                collapse = second if recovery is first else first
                if recovery.control < collapse.control:
                    windows.append(
                        Window(
                            *_window_ends(
                                diagram,
                                b,
                                {id(f): i for i, f in on_branch},
                                recovery,
                                collapse,
                            )
                        )
                    )
                    paired.update({id(first), id(second)})
        for fold in kinds:
            if id(fold) in paired:
                continue
            inside = fold.control - fold.vanish_direction * FOLD_NUDGE * width
            if sum(e.stable for e in diagram.equilibria_at(inside)) < 2:
                continue
            index = {id(f): i for i, f in on_branch}
            if fold.kind == "collapse":
                u, kind, x = _stable_end(diagram, b, index[id(fold)], fold)
                windows.append(Window(None, u, collapse_kind=kind, collapse_state=x))
            else:
                u, kind, x = _stable_end(diagram, b, index[id(fold)], fold)
                windows.append(Window(u, None, recovery_kind=kind, recovery_state=x))
    return windows


def _window_ends(diagram: Diagram, b: int, index: dict, recovery: Fold, collapse: Fold) -> tuple:
    """Window fields for a recovery and a collapse fold on branch b (see :func:`_stable_end`)."""
    u_r, kind_r, x_r = _stable_end(diagram, b, index[id(recovery)], recovery)
    u_c, kind_c, x_c = _stable_end(diagram, b, index[id(collapse)], collapse)
    return u_r, u_c, kind_r, kind_c, x_r, x_c


def _stable_end(
    diagram: Diagram, b: int, index: int, fold: Fold
) -> tuple[float, ThresholdKind, np.ndarray]:
    """Where the stable run that ends at ``fold`` really stops being stable.

    Usually at the fold itself; but in slow-fast lakes the turbid equilibrium can lose its
    stability at a Hopf point before its fold (the branch between them is an unstable spiral),
    and then the regime ends there: the lake leaves it at the Hopf point, not at the fold.
    Walks along the branch from the fold on each side to the first stable point (not passing
    another fold); one right next to the fold means the fold ends the run.
    """
    branch = diagram.branches[b]
    stable, controls = branch.stable, branch.controls
    steps = np.diff(controls)
    turning = set((np.nonzero(np.sign(steps[:-1]) * np.sign(steps[1:]) < 0)[0] + 1).tolist())
    for direction in (1, -1):
        j = index + direction
        while 0 <= j < len(stable) and not stable[j] and j not in turning:
            j += direction
        if not 0 <= j < len(stable) or j in turning:
            continue
        if abs(j - index) <= 2:
            break
        low, high = sorted((controls[j - direction], controls[j]))
        width = diagram.control_range[1] - diagram.control_range[0]
        for change in diagram.stability_changes:
            if low - 1e-9 * width <= change.control <= high + 1e-9 * width:
                kind: ThresholdKind = "hopf" if change.oscillatory else "stability change"
                return change.control, kind, change.state
    return fold.control, "fold", fold.state


def _overlap(window: Window, interval: tuple[float, float]) -> float:
    low = -np.inf if window.recovery is None else window.recovery
    high = np.inf if window.collapse is None else window.collapse
    return max(0.0, min(high, interval[1]) - max(low, interval[0]))


def _main_window(
    diagram: Diagram,
    windows: list[Window],
    u_now: float,
    interval: tuple[float, float],
    attractor: np.ndarray | None = None,
) -> Window | None:
    """The window of the lake's own branch. With several windows (three or more stable
    states), the one whose threshold ends the stable run the lake's ``attractor`` lies on: its
    recovery threshold when that run is undesired, its collapse threshold when desired (not
    the one that happens to hold the current control, which would make the thresholds depend
    on the control value rather than on where the lake is). Otherwise the window holding the
    current control, else the one overlapping the range most."""
    if not windows:
        return None
    holding = [w for w in windows if _contains(w, u_now)]
    if len(windows) > 1 and attractor is not None:
        run = _run_of(diagram, attractor, u_now)
        if run is not None:
            ends = run.states[[0, -1]]

            def distance(w: Window) -> float:
                x = w.recovery_state if run.undesired else w.collapse_state
                if x is None:
                    return np.inf
                return float(np.min(np.max(np.abs(ends - x) / diagram.scale[:-1], axis=1)))

            # the windows whose threshold ends the lake's run; among ties, one holding u_now
            ranked = sorted(windows, key=lambda w: (distance(w), w not in holding))
            if distance(ranked[0]) < RUN_MATCH:
                return ranked[0]
    if holding:
        return holding[0]
    return max(windows, key=lambda w: _overlap(w, interval))


def _run_of(diagram: Diagram, state: np.ndarray, u: float) -> StableRun | None:
    """The stable run passing nearest to ``state`` at control ``u``."""
    best, distance = None, np.inf
    for run in diagram.stable_runs:
        if run.controls[0] <= u <= run.controls[-1]:
            at = np.array([np.interp(u, run.controls, run.states[:, i]) for i in range(len(state))])
            d = float(np.max(np.abs(at - state) / diagram.scale[:-1]))
            if d < distance:
                best, distance = run, d
    return best if distance < RUN_MATCH else None


def _contains(window: Window, u: float) -> bool:
    low = -np.inf if window.recovery is None else window.recovery
    high = np.inf if window.collapse is None else window.collapse
    return bool(low <= u <= high)


# ---------------------------------------------------------------------------------------------
# Where the current state stands


@dataclass(frozen=True)
class Standing:
    """Where the lake is now: the attractor its basin leads to and how far each threshold is.

    ``separatrix`` (1-D models) lists the unstable equilibria at the current control: the basin
    boundaries. ``to_recovery`` is how far the control must still fall to pass the recovery
    threshold (negative: already below it; None when no reachable recovery threshold exists or
    the lake is in the desired regime already);
    ``to_collapse`` how far it may rise before collapse (only for a lake in the desired regime).
    """

    control: float
    state: np.ndarray
    attractor: np.ndarray | None
    desired: bool | None
    status: str
    separatrix: list[float]
    stable_equilibria: list[np.ndarray]
    to_recovery: float | None
    to_collapse: float | None


def locate(diagram: Diagram, state: np.ndarray, control: float, *, limit: float = 1e6) -> Standing:
    """Integrate at the frozen current control to the attractor of the current state's basin."""
    equilibria = diagram.equilibria_at(control)
    stable = [e.state for e in equilibria if e.stable]
    separatrix = (
        sorted(float(e.state[0]) for e in equilibria if not e.stable)
        if diagram.system.n == 1
        else []
    )
    from planner.verdict import attractors, on_desired

    run = _settle(diagram.system, np.asarray(state, dtype=float), control, limit)
    attractor = run.final_state[:, 0] if run.status is Status.SETTLED else None
    desired = None
    if attractor is not None:
        where = attractors(diagram, control)
        desired = bool(on_desired(where, diagram.system, attractor[:, None])[0])
    recovery, collapse = diagram.recovery_threshold, diagram.collapse_threshold
    if desired is not True:
        collapse = None  # a lake already out of the desired regime has no collapse ahead
    if desired is True:
        recovery = None  # nor has a lake in the desired regime a recovery still to make
    return Standing(
        control=float(control),
        state=np.asarray(state, dtype=float),
        attractor=attractor,
        desired=desired,
        status=run.status.value,
        separatrix=separatrix,
        stable_equilibria=stable,
        to_recovery=None if recovery is None else float(control - recovery),
        to_collapse=None if collapse is None else float(collapse - control),
    )


def diagram_for(scenario, progress: Callable[[float, str], None] | None = None) -> Diagram:
    """The diagram of a scenario: its system over its control range, with its target."""
    return compute_diagram(
        scenario.system(),
        scenario.control.range,
        reference_state=scenario.initial_state,
        target_index=scenario.target_index,
        regime=scenario.target.regime,
        least=scenario.control.least,
        current_control=scenario.current_control,
        limit=scenario.simulation.state_limit,
        progress=progress,
    )
