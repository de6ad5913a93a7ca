"""The one rule for "does the lake recover?", for one run or many members at once.

After the horizon the control is held at the schedule's final value, every temporary action has
ended (no load factor, no noise), and the state is integrated by :func:`planner.integrate.settle`
until it stops moving (or the scenario's cap); for one state variable the destination is read
off the equilibria instead, exactly (:func:`destinations_1d`, the basins of a 1-D flow being the
intervals between unstable equilibria). The settled state is then matched to the stable
equilibria at that control: those of the diagram that do not lie on an undesired run, followed
by Newton to each member's own parameters. Recovered means it sits on the one with the lowest
(or, for regime "highest", the highest) target variable, within ``DESIRED_TOLERANCE`` (scaled
distance), or lies beyond all of them on the desired side. Divergence and failure are outcomes
of their own, never recovered.
"""

from __future__ import annotations

import enum
from dataclasses import dataclass

import numpy as np

from planner.integrate import Status, Tolerance, settle, system_limits
from planner.integrate.solvers import batched_solve
from planner.models import System

DESIRED_TOLERANCE = 1e-3  # scaled distance to the desired attractor
NEWTON_ITERATIONS = 30
NEWTON_RESIDUAL = 1e-8  # |f| <= this * (1 + max|x|) counts as an equilibrium
SCAN_POINTS = 32  # points checked between a 1-D state and its destination
# Settling only has to find the attractor (the rate test stops it there), not the path to it.
SETTLE_TOLERANCE = Tolerance(rtol=1e-7, atol=1e-10)


class Verdict(enum.Enum):
    """What becomes of the lake under a schedule; the value is a readable phrase."""

    RECOVERED = "recovers"
    NOT_RECOVERED = "stays in the undesired regime"
    DIVERGED = "diverges (leaves the model's physical range)"
    UNSETTLED = "has not settled by the cap"
    FAILED = "integration failed"


VERDICTS = tuple(Verdict)
RECOVERED, NOT_RECOVERED, DIVERGED, UNSETTLED, FAILED = range(len(VERDICTS))


@dataclass(frozen=True, eq=False)
class Verdicts:
    """Per member: a code (index into :data:`VERDICTS`), the settled state (n, members; NaN
    where it did not settle) and the time of divergence (years from t = 0; NaN if none)."""

    codes: np.ndarray
    settled: np.ndarray
    diverged_at: np.ndarray

    @property
    def first(self) -> Verdict:
        return VERDICTS[int(self.codes[0])]

    def count(self, verdict: Verdict) -> int:
        return int(np.sum(self.codes == VERDICTS.index(verdict)))


def _stable(jacobian: np.ndarray) -> np.ndarray:
    """Whether every eigenvalue has a negative real part, per member; (n, n, m) -> (m,)."""
    n = jacobian.shape[0]
    finite = np.isfinite(jacobian).all(axis=(0, 1))
    if n == 1:
        return finite & (jacobian[0, 0] < 0)
    if n == 2:
        trace = jacobian[0, 0] + jacobian[1, 1]
        det = jacobian[0, 0] * jacobian[1, 1] - jacobian[0, 1] * jacobian[1, 0]
        return finite & (trace < 0) & (det > 0)
    safe = np.where(finite, jacobian, 0.0)
    eigenvalues = np.linalg.eigvals(np.moveaxis(safe, -1, 0))
    return finite & (eigenvalues.real.max(axis=1) < 0)


def follow_equilibria(system: System, u: float, starts: np.ndarray, m: int, stable_only=True):
    """Each equilibrium in ``starts`` (k, n) followed by Newton to every member's parameters.

    Returns states (k, n, m) and whether each is a converged (and, with ``stable_only``,
    stable) equilibrium (k, m).
    """
    k, n = starts.shape[0], system.n
    states = np.empty((k, n, m))
    good = np.zeros((k, m), dtype=bool)
    for e in range(k):
        x = np.repeat(starts[e][:, None], m, axis=1)
        with np.errstate(all="ignore"):
            for _ in range(NEWTON_ITERATIONS):
                step = batched_solve(system.jac(x, u).reshape(n, n, m), -system.rhs(x, u))
                moving = np.isfinite(step).all(axis=0)
                x = np.where(moving, x + step, x)
                if not np.any(moving & (np.abs(step) > 1e-14 * (1.0 + np.abs(x))).any(axis=0)):
                    break
            residual = np.max(np.abs(system.rhs(x, u)), axis=0)
            converged = residual <= NEWTON_RESIDUAL * (1.0 + np.max(np.abs(x), axis=0))
            stable = _stable(system.jac(x, u).reshape(n, n, m))
        states[e] = x
        good[e] = converged & (stable | (not stable_only)) & np.isfinite(x).all(axis=0)
    return states, good


def destinations_1d(where: Attractors, system: System, states: np.ndarray):
    """One state variable: where each state (1, m) goes with the control held, read off the
    equilibria instead of integrating (the basins of a 1-D flow are the intervals between
    unstable equilibria: the state moves monotonically to the first equilibrium in the
    direction of the flow). Returns the destinations (1, m) and whether each is known for sure:
    a stable equilibrium ahead, with no sign change of the flow on the way (a scan of
    ``SCAN_POINTS`` points guards against an equilibrium the diagram did not have)."""
    m = states.shape[1]
    u = where.control
    x = states[0]
    with np.errstate(all="ignore"):
        flow = system.rhs(states, u)[0]
    roots, converged = where.followed(system, where.equilibria, m, stable_only=False)
    roots = roots[:, 0, :]  # (k, m)
    direction = np.sign(flow)
    with np.errstate(invalid="ignore"):
        ahead = converged & ((roots - x) * direction > 0)
    distance = np.where(ahead, np.abs(roots - x), np.inf)
    nearest = np.argmin(distance, axis=0) if roots.shape[0] else np.zeros(m, dtype=int)
    found = np.isfinite(distance.min(axis=0)) if roots.shape[0] else np.zeros(m, dtype=bool)
    goal = np.where(found, roots[nearest, np.arange(m)] if roots.shape[0] else x, x)
    at_rest = flow == 0
    goal = np.where(at_rest, x, goal)
    with np.errstate(all="ignore"):
        slope = system.jac(goal[None, :], u).reshape(m)
        share = (np.arange(1, SCAN_POINTS + 1) / (SCAN_POINTS + 1))[:, None]
        scan = system.rhs((x + share * (goal - x))[None], u)[0] * direction
    clear_way = np.all(scan > 0, axis=0) | at_rest
    known = (found | at_rest) & clear_way & (slope < 0) & np.isfinite(goal)
    return goal[None, :], known


@dataclass(frozen=True, eq=False)
class Attractors:
    """What the verdict needs of the diagram at one control value (plain arrays, picklable for
    worker processes): the stable equilibria not on an undesired run (k, n), the target
    variable, the desired side (+1: lowest, -1: highest) and the per-variable scales."""

    control: float
    candidates: np.ndarray
    target_index: int
    sign: float
    scale: np.ndarray
    equilibria: np.ndarray  # every equilibrium at the control, stable or not (k, n)
    parameters: tuple = ()  # the diagram's parameter values: members with these need no Newton

    def followed(self, system: System, starts: np.ndarray, m: int, stable_only: bool):
        """``starts`` followed to every member's parameters (see :func:`follow_equilibria`);
        members with the diagram's own parameters keep them as they are."""
        own = system.parameter_values
        if (
            self.parameters
            and len(own) == len(self.parameters)
            and all(
                (a is None and b is None) or (np.ndim(a) == 0 and a is not None and a == b)
                for a, b in zip(own, self.parameters, strict=True)
            )
        ):
            states = np.repeat(starts[:, :, None], m, axis=2)
            return states, np.ones((starts.shape[0], m), dtype=bool)
        return follow_equilibria(system, self.control, starts, m, stable_only=stable_only)


def attractors(diagram, u: float) -> Attractors:
    """The diagram's desired candidates at control ``u``."""
    found = [e.state for e in diagram.desired_candidates(u)]
    n = diagram.system.n
    return Attractors(
        control=float(u),
        candidates=np.array(found, dtype=float).reshape(-1, n),
        target_index=diagram.target_index,
        sign=1.0 if diagram.regime == "lowest" else -1.0,
        scale=np.asarray(diagram.scale[:-1], dtype=float),
        equilibria=np.array([e.state for e in diagram.equilibria_at(u)], dtype=float).reshape(
            -1, n
        ),
        parameters=tuple(diagram.system.parameter_values),
    )


def on_desired(where: Attractors, system: System, states: np.ndarray) -> np.ndarray:
    """Whether each settled state (n, m) sits on the member's desired attractor."""
    m = states.shape[1]
    if where.candidates.shape[0] == 0:
        return np.zeros(m, dtype=bool)
    followed, good = where.followed(system, where.candidates, m, stable_only=True)
    k = where.target_index
    values = np.where(good, where.sign * followed[:, k, :], np.inf)
    best = np.argmin(values, axis=0)
    desired = followed[best, :, np.arange(m)].T  # (n, m)
    with np.errstate(invalid="ignore"):
        distance = np.max(np.abs(states - desired) / where.scale[:, None], axis=0)
        beyond = where.sign * states[k] < values.min(axis=0)
    return good.any(axis=0) & ((distance < DESIRED_TOLERANCE) | beyond)


def decide(
    where: Attractors,
    system: System,
    final_state: np.ndarray,
    run_codes: np.ndarray,
    run_ends: np.ndarray,
    *,
    horizon: float,
    cap: float,
    limit: float,
) -> Verdicts:
    """The verdict of every member from the end of its run under the schedule.

    ``final_state`` (n, m) at the horizon, ``run_codes`` the engine's statuses
    (planner.integrate.STATUSES indices) and ``run_ends`` their end times. Members that finished
    are settled with the control held at ``where.control`` and matched to the desired attractor.
    """
    from planner.integrate import STATUSES

    m = final_state.shape[1]
    codes = np.full(m, UNSETTLED, dtype=np.int8)
    diverged_at = np.full(m, np.nan)
    settled = np.full(final_state.shape, np.nan)
    status = np.array([STATUSES[int(c)] for c in run_codes])
    diverged = status == Status.DIVERGED
    codes[diverged] = DIVERGED
    diverged_at[diverged] = run_ends[diverged]
    codes[status == Status.FAILED] = FAILED
    finished = np.nonzero(status == Status.FINISHED)[0]
    if finished.size == 0:
        return Verdicts(codes, settled, diverged_at)
    sub = _members(system, finished, m)
    if system.n == 1 and where.equilibria.size:
        goal, known = destinations_1d(where, sub, final_state[:, finished])
        if known.any():
            read = finished[known]
            settled[:, read] = goal[:, known]
            good = on_desired(
                where, _members(sub, np.nonzero(known)[0], finished.size), goal[:, known]
            )
            codes[read] = np.where(good, RECOVERED, NOT_RECOVERED)
            sub = _members(sub, np.nonzero(~known)[0], finished.size)
            finished = finished[~known]
            if finished.size == 0:
                return Verdicts(codes, settled, diverged_at)
    limits = system_limits(system, limit)
    run = settle(
        sub,
        final_state[:, finished],
        where.control,
        cap=cap,
        limits=limits,
        tolerance=SETTLE_TOLERANCE,
    )
    settled[:, finished] = np.where(run.has(Status.SETTLED), run.final_state, np.nan)
    end = np.array([STATUSES[int(c)] for c in run.codes])
    gone = end == Status.DIVERGED
    codes[finished[gone]] = DIVERGED
    diverged_at[finished[gone]] = horizon + run.t_end[gone]
    codes[finished[end == Status.FAILED]] = FAILED
    calm = np.nonzero(end == Status.SETTLED)[0]
    if calm.size:
        good = on_desired(where, _members(sub, calm, finished.size), run.final_state[:, calm])
        codes[finished[calm]] = np.where(good, RECOVERED, NOT_RECOVERED)
    return Verdicts(codes, settled, diverged_at)


def _members(system: System, index: np.ndarray, m: int) -> System:
    """The system restricted to some members (parameter arrays indexed, scalars kept)."""
    if index.size == m and np.all(index == np.arange(m)):
        return system
    values = tuple(
        value if value is None or np.ndim(value) == 0 else np.asarray(value)[index]
        for value in system.parameter_values
    )
    return System(system.model, values)
