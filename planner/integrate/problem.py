"""What to integrate: a compiled system under a control path, with actions, load factors and
process noise, for one member or many (the members are the last axis of every array)."""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from planner.integrate.codegen import Specialised, specialise
from planner.integrate.options import Limits
from planner.models import System
from planner.schedules import ActionTimeline, ControlPath

SAME_TIME = 1e-12  # years: cut points closer than this are one


@dataclass(frozen=True)
class ProcessNoise:
    """Additive noise dx = f dt + sigma dW on the variables with sigma > 0.

    ``draw(piece, steps, members)`` returns standard normal numbers (steps, noisy variables,
    len(members)) for piece number ``piece`` and the given member indices; it must depend only
    on its arguments so results do not depend on chunking. ``steps_per_year`` fixes the step.
    """

    sigma: np.ndarray
    draw: Callable[[int, int, np.ndarray], np.ndarray]
    steps_per_year: float

    @property
    def noisy(self) -> np.ndarray:
        return np.nonzero(np.asarray(self.sigma) > 0)[0]


@dataclass(frozen=True)
class Problem:
    """The state from ``initial_state`` ((n,) or (n, members)) under ``control`` over
    [0, horizon] years, with the actions of ``actions``; ``load_factors`` (years, members), when
    given, multiply the control in each calendar year k (t in [k, k + 1)). Parameters of
    ``system`` may be arrays over members."""

    system: System
    initial_state: np.ndarray
    control: ControlPath
    horizon: float
    actions: ActionTimeline | None = None
    load_factors: np.ndarray | None = None
    noise: ProcessNoise | None = None

    def __post_init__(self) -> None:
        if not (math.isfinite(self.horizon) and self.horizon > 0):
            raise ValueError(f"the horizon must be a positive number of years, not {self.horizon}")

    @property
    def members(self) -> int:
        sizes = {1}
        x0 = np.asarray(self.initial_state)
        if x0.ndim == 2:
            sizes.add(x0.shape[1])
        for value in self.system.parameter_values:
            if value is not None and np.ndim(value) > 0:
                sizes.add(int(np.shape(value)[0]))
        if self.load_factors is not None:
            sizes.add(self.load_factors.shape[1])
        sizes.discard(1)
        if len(sizes) > 1:
            raise ValueError(f"inconsistent member counts {sorted(sizes)}")
        return sizes.pop() if sizes else 1

    def start(self) -> np.ndarray:
        """The initial state as (n, members)."""
        x0 = np.asarray(self.initial_state, dtype=float)
        if x0.ndim == 1:
            return np.repeat(x0[:, None], self.members, axis=1)
        return x0.copy()

    def cuts(self, calendar_years: bool, extra: tuple[float, ...] = ()) -> np.ndarray:
        """Sorted times where the right-hand side may be non-smooth: kinks of the control path,
        action times, (when asked) calendar years, and ``extra`` times."""
        horizon = float(self.horizon)
        cuts = [0.0, horizon, *self.control.kinks(horizon), *extra]
        if self.actions is not None:
            cuts += list(self.actions.kinks(horizon))
        if calendar_years:
            cuts += list(np.arange(1.0, math.ceil(horizon)))
        cuts = np.unique(np.clip(np.array(cuts, dtype=float), 0.0, horizon))
        keep = np.append(True, np.diff(cuts) > SAME_TIME)
        return cuts[keep]

    def state_events_at(self, a: float) -> list[tuple[int, float]]:
        """(variable index, factor) of the state rescalings at time ``a``."""
        if self.actions is None:
            return []
        names = self.system.variables
        return [
            (names.index(variable), factor)
            for when, variable, factor in self.actions.state_events
            if abs(when - a) <= SAME_TIME or (a == 0.0 and when < SAME_TIME)
        ]


class Piece:
    """The problem on one smooth stretch [a, b]: the control linear in t (times a load factor),
    parameters fixed or decaying after a pulse. Batched calls take x (n, m) and t scalar or one
    time per member; scalar calls take y (n,)."""

    def __init__(
        self,
        functions: Specialised,
        values_at: Callable[[float | np.ndarray, np.ndarray | None], tuple],
        u_a: float,
        slope: float,
        a: float,
        factor: float | np.ndarray,
        index: np.ndarray | None = None,
        fixed: tuple | None = None,
    ):
        self.functions = functions
        self.values_at = values_at
        self.fixed = fixed  # the parameter values when they do not change over the stretch
        self.u_a, self.slope, self.a, self.factor = u_a, slope, a, factor
        self.index = index
        self.n = functions.n
        # a held load is the same array at every call: computed once, not a dozen times a step
        self.held = u_a * factor if slope == 0.0 else None

    def control(self, t):
        if self.held is not None:
            return self.held
        return (self.u_a + self.slope * (t - self.a)) * self.factor

    def _values(self, t) -> tuple:
        return self.values_at(t, self.index)

    @property
    def fixed_values(self) -> tuple | None:
        """The free and hoisted parameter values of this piece's members when they do not
        change over the stretch (else None)."""
        if self.fixed is None:
            return None
        return self.fixed if self.index is None else tuple(_pick(v, self.index) for v in self.fixed)

    def _stacked(self, function, t, x: np.ndarray, rows: int) -> np.ndarray:
        values = function(*x, self.control(t), *self._values(t))
        first = values[0]
        if rows == 1 and np.shape(first) == x.shape[1:] and not np.may_share_memory(first, x):
            # A view, not a copy: callers treat right-hand sides as read-only.
            return np.asarray(first, dtype=float).reshape(1, *x.shape[1:])
        out = np.empty((rows, *x.shape[1:]))
        for i, value in enumerate(values):
            out[i] = value
        return out

    def rhs(self, t, x: np.ndarray) -> np.ndarray:
        if self.n == 1:  # the common case, kept lean: it runs a dozen times per step
            u = self.held if self.held is not None else self.control(t)
            value = self.functions.batched_rhs(x[0], u, *self.values_at(t, self.index))[0]
            if (
                type(value) is np.ndarray
                and value.shape == x.shape[1:]
                and value.dtype == np.float64
                and not np.may_share_memory(value, x)
            ):
                return value.reshape(1, *x.shape[1:])  # a view: callers treat it as read-only
        return self._stacked(self.functions.batched_rhs, t, x, self.n)

    def jac(self, t, x: np.ndarray) -> np.ndarray:
        n = self.n
        return self._stacked(self.functions.batched_jac, t, x, n * n).reshape(n, n, *x.shape[1:])

    def dfdt(self, t, x: np.ndarray) -> np.ndarray:
        """Time derivative through the control (ramps); zero on held stretches."""
        if self.slope == 0.0:
            return np.zeros(x.shape)
        return self._stacked(self.functions.batched_dfdu, t, x, self.n) * (self.slope * self.factor)

    def scalar_functions(self):
        """(rhs, jac) of a single run on plain floats, for scipy's LSODA: the control and the
        parameters bound once for the piece, the state turned into floats once per call (numpy
        scalars are several times slower in plain arithmetic)."""
        rhs, jac = self.functions.scalar_rhs, self.functions.scalar_jac
        u_a, slope, a, factor, n = self.u_a, self.slope, self.a, float(self.factor), self.n
        values_at = self._values
        constant = self.fixed if self.index is None else None

        def scalar_rhs(t, y):
            values = constant if constant is not None else values_at(t)
            try:
                return rhs(*y.tolist(), (u_a + slope * (t - a)) * factor, *values)
            except (OverflowError, ZeroDivisionError, ValueError):
                return [math.nan] * n

        def scalar_jac(t, y):
            values = constant if constant is not None else values_at(t)
            try:
                entries = jac(*y.tolist(), (u_a + slope * (t - a)) * factor, *values)
            except (OverflowError, ZeroDivisionError, ValueError):
                entries = [math.nan] * (n * n)
            return np.array(entries, dtype=float).reshape(n, n)

        return scalar_rhs, scalar_jac

    def subset(self, index: np.ndarray) -> Piece:
        """The piece for some members only (per-member parameters and factors indexed)."""
        factor = self.factor if np.ndim(self.factor) == 0 else self.factor[index]
        composed = index if self.index is None else self.index[index]
        return Piece(
            self.functions,
            self.values_at,
            self.u_a,
            self.slope,
            self.a,
            factor,
            composed,
            self.fixed,
        )


class Pieces:
    """Builds the :class:`Piece` of each stretch of a problem (one specialisation per run)."""

    def __init__(self, problem: Problem):
        self.problem = problem
        actions = problem.actions
        self.pulses = () if actions is None else actions.pulses
        pulsed = tuple(sorted({pulse.parameter for pulse in self.pulses}))
        self.functions, base = specialise(problem.system, pulsed)
        self.base = dict(zip(self.functions.free, base, strict=True))
        # a single run's parameters as plain floats: a fading pulse asks for them at every
        # right-hand side, where numpy's per-call costs would dominate
        self.floats = (
            {name: float(value) for name, value in self.base.items()}
            if all(np.ndim(value) == 0 for value in base)
            else None
        )

    def _values_at(self, t, index: np.ndarray | None = None) -> tuple:
        """The free parameters at time t, then the values hoisted from them."""
        multipliers = self.problem.actions.multipliers(t, index) if self.pulses else {}
        if self.floats is not None and isinstance(t, float | int):
            free = tuple(
                self.floats[name] * multipliers.get(name, 1.0) for name in self.functions.free
            )
            try:
                return (*free, *self.functions.hoist(*free))
            except (OverflowError, ZeroDivisionError, ValueError):
                pass  # the numpy path below gives inf or nan instead
        free = tuple(
            _pick(self.base[name], index) * multipliers.get(name, 1.0)
            for name in self.functions.free
        )
        with np.errstate(all="ignore"):
            return (*free, *self.functions.hoist(*free))

    def piece(self, a: float, b: float, factor: float | np.ndarray = 1.0) -> Piece:
        control = self.problem.control
        decaying = any(
            p.decay_years > 0 and a >= p.start + p.duration - SAME_TIME for p in self.pulses
        )
        fixed = None
        if decaying:
            values_at = self._values_at
        else:
            fixed = self._values_at(0.5 * (a + b))

            def values_at(t, index=None, fixed=fixed):
                return fixed if index is None else tuple(_pick(v, index) for v in fixed)

        u_a, slope = float(control(a)), float(control.slope(a))
        return Piece(self.functions, values_at, u_a, slope, a, factor, fixed=fixed)


def _pick(value, index: np.ndarray | None):
    return value if index is None or np.ndim(value) == 0 else value[index]


def system_limits(system, state_limit: float = 1e6) -> Limits:
    """The divergence limits of a system: the state limit, and non-negative states for models
    whose state is an amount."""
    return Limits(state_limit, system.model.spec.nonnegative_state)


def held(value: float) -> ControlPath:
    """A control path held at ``value`` from t = 0."""
    return ControlPath(np.array([0.0]), np.array([float(value)]))
