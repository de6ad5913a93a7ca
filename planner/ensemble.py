"""Ensembles: how likely each schedule is to bring the lake back, when the model's parameters are
uncertain, yearly loads swing with wet and dry years, and the state itself is noisy.

Each member draws its parameters from the priors of ``[uncertainty]``, its yearly load factors
and (with process noise) its Brownian path; every schedule is then run for every member at once,
vectorised over members, in chunks so memory stays bounded.

Numerical schemes (all fixed-step over a grid shared by the members of a schedule, split at
every kink of the control path, every action and every calendar year, so no step straddles a
discontinuity):

- without process noise: the classical fourth-order Runge-Kutta method (global order 4) with
  ``STEPS_PER_YEAR`` steps a year, or more for a fast model: the step is shortened until h times
  the largest |eigenvalue| of the Jacobian (nominal parameters, at the initial state and at the
  equilibria the schedule visits) is at most ``STABILITY_LIMIT``, well inside the method's
  stability interval (2.78 on the negative real axis);
- with process noise dx = f(x, u) dt + sigma dW (additive noise): Euler-Maruyama with
  ``NOISY_STEPS_PER_YEAR`` steps a year (strong order 0.5 in general, 1 for additive noise; weak
  order 1: Kloeden & Platen 1992, Numerical Solution of Stochastic Differential Equations,
  sections 10.2 and 14.1, section numbers from memory). For models whose state is an amount, a
  step that ends below zero is set to zero.
- the verdict, as in :mod:`planner.outcomes`: after the horizon the control is held at the
  schedule's final value (no load factor, no noise, actions over) and the state is integrated
  until it settles, with the linearly implicit Rosenbrock method of Shampine & Reichelt 1997
  (The MATLAB ODE Suite, SIAM J. Sci. Comput. 18:1-22; order 2 with an order-3 error estimate,
  L-stable) and a step size of each member's own. The settled state is then matched to the
  member's stable equilibria at that control, found by Newton from the nominal equilibria
  (those of the diagram) with the member's parameters: recovered when it sits on the one with
  the lowest (or highest) target variable.

Load variability: the control of member i in calendar year k (t in [k, k + 1)) is the schedule's
u(t) times exp(sigma z_ik - sigma^2 / 2), where z_i is a stationary AR(1) series with unit
variance and the given lag-1 autocorrelation, so each factor has mean one.

Reproducibility: member i's random numbers depend only on (seed, i): they come from blocks of
``RNG_BLOCK`` members, each with its own generator seeded by (seed, stream, block), generated
whole and sliced, so chunking and scheduler change nothing. Members share parameter draws and
load factors across schedules (common random numbers); process noise is drawn per schedule,
keyed by its name.

Costs: the abatement and action costs of a schedule are those of its planned path (the
measures the manager pays for; weather moves the load, not the bill) and equal for all members;
damages accrue per member while its target is not met, the crossing times within a step found by
linear interpolation. Present values follow :mod:`planner.costs`.

Recovery probability: k recovered of n members, with the Wilson score interval at 95% (Wilson
1927, J. Am. Stat. Assoc. 22:209-212), which scipy.stats.binomtest(k, n).proportion_ci(
method="wilson") also gives.
"""

from __future__ import annotations

import math
import zlib
from collections.abc import Sequence
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import Any

import numpy as np
from scipy.special import ndtri

from planner.costs import scenario_costs
from planner.equilibria import Diagram, diagram_for
from planner.errors import InputError, Problem
from planner.models import System
from planner.outcomes import Verdict
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, Schedule, Uncertainty
from planner.scenario.uncertainty import (
    MAX_MEMBERS,
    LognormalPrior,
    NormalPrior,
    TriangularPrior,
    UniformPrior,
)
from planner.schedules import ActionTimeline, ControlPath, action_timeline, check_limits
from planner.schedules import control_path as make_control_path
from planner.simulate import SCALE_FLOOR, SETTLED_RATE, lower_state_bound
from planner.simulate import _segment_system as segment_system  # one rule for actions

# Tuning constants.
STEPS_PER_YEAR = 20  # Runge-Kutta steps a year (h = 0.05 yr) without process noise
NOISY_STEPS_PER_YEAR = 100  # Euler-Maruyama steps a year with process noise
STABILITY_LIMIT = 1.0  # largest h * |eigenvalue| allowed for the explicit steps
DEFAULT_CHUNK = 8192  # members simulated together (bounds memory; cache-friendly)
RNG_BLOCK = 1024  # members sharing one generator; chunk boundaries may cut blocks anywhere
SAME_TIME = 1e-12
SETTLE_RTOL = 1e-7  # relative tolerance of the settling integration
SETTLE_ATOL = 1e-10  # absolute tolerance, times max(scale, 1)
SETTLE_FIRST_STEP = 1e-2  # years, at most
SETTLE_MAX_STEPS = 5000  # accepted or rejected steps per member before giving up
NEWTON_ITERATIONS = 30
NEWTON_RESIDUAL = 1e-8  # |f| <= this * (1 + max|x|) counts as an equilibrium
DESIRED_TOLERANCE = 1e-3  # scaled distance to the desired attractor (as Diagram.is_desired)
CONFIDENCE = 0.95
QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
FAN_MEMBERS = 20_000  # the fan chart's quantiles come from the first members (all if fewer)
FIRST_PASSAGE_BATCH = 64  # noise steps drawn at a time by first_passage_times

STREAM_PARAMETERS, STREAM_LOADS, STREAM_NOISE = 1, 2, 3
VERDICTS = (Verdict.RECOVERED, Verdict.NOT_RECOVERED, Verdict.DIVERGED, Verdict.UNSETTLED)
RECOVERED, NOT_RECOVERED, DIVERGED, UNSETTLED = range(4)

SCHEME_DETERMINISTIC = "classical Runge-Kutta, order 4, fixed step"
SCHEME_NOISY = "Euler-Maruyama, additive noise: strong order 1, weak order 1, fixed step"
SCHEME_SETTLE = "Rosenbrock (Shampine & Reichelt 1997), order 2, adaptive per member"
INTERVAL_METHOD = "wilson"


# ---------------------------------------------------------------------------------------------
# Random draws: a function of (seed, member index) only


def _generator(seed: int, *key: int) -> np.random.Generator:
    return np.random.default_rng([seed, *key])


def _blocks(start: int, stop: int) -> range:
    return range(start // RNG_BLOCK, (stop - 1) // RNG_BLOCK + 1)


def _sliced(blocks: list[np.ndarray], start: int, stop: int) -> np.ndarray:
    """Members start..stop-1 from whole blocks stacked on their last axis."""
    offset = (start // RNG_BLOCK) * RNG_BLOCK
    return np.concatenate(blocks, axis=-1)[..., start - offset : stop - offset]


def _inverse_cdf(prior, p: np.ndarray) -> np.ndarray:
    """Values of a prior at probabilities p in (0, 1) of its truncated distribution."""
    point = prior.point
    if point is not None:
        return np.full(p.shape, float(point))
    low = 0.0 if prior.lower is None else prior.cdf(prior.lower)
    high = 1.0 if prior.upper is None else prior.cdf(prior.upper)
    q = np.clip(low + p * (high - low), np.nextafter(low, 1.0), np.nextafter(high, 0.0))
    if isinstance(prior, NormalPrior):
        x = prior.mean + prior.sd * ndtri(q)
    elif isinstance(prior, LognormalPrior):
        x = prior.median * np.exp(prior.sigma * ndtri(q))
    elif isinstance(prior, UniformPrior):
        x = prior.low + q * (prior.high - prior.low)
    elif isinstance(prior, TriangularPrior):
        a, c, b = prior.low, prior.mode, prior.high
        peak = (c - a) / (b - a)
        x = np.where(
            q < peak,
            a + np.sqrt(q * (b - a) * (c - a)),
            b - np.sqrt((1.0 - q) * (b - a) * (b - c)),
        )
    else:  # pragma: no cover - the schema admits no other kind
        raise TypeError(type(prior).__name__)
    if prior.lower is not None or prior.upper is not None:
        x = np.clip(x, prior.lower, prior.upper)  # only rounding can reach past a bound
    return x


def draw_parameters(uncertainty: Uncertainty, start: int, stop: int) -> dict[str, np.ndarray]:
    """Each prior's values for members start..stop-1 (truncated priors by inverse CDF)."""
    priors = uncertainty.priors
    if not priors:
        return {}
    blocks = [
        _generator(uncertainty.seed, STREAM_PARAMETERS, b).random((len(priors), RNG_BLOCK))
        for b in _blocks(start, stop)
    ]
    uniforms = _sliced(blocks, start, stop)
    return {prior.parameter: _inverse_cdf(prior, uniforms[j]) for j, prior in enumerate(priors)}


def draw_load_factors(
    uncertainty: Uncertainty, years: int, start: int, stop: int
) -> np.ndarray | None:
    """Yearly multiplicative load factors, shape (years, members), mean one; None without
    load variability. log factor = sigma z - sigma^2 / 2, z a stationary unit AR(1) series."""
    variability = uncertainty.load_variability
    if variability is None or variability.sigma_log == 0.0:
        return None
    sigma, rho = variability.sigma_log, variability.autocorrelation
    blocks = [
        _generator(uncertainty.seed, STREAM_LOADS, b).standard_normal((years, RNG_BLOCK))
        for b in _blocks(start, stop)
    ]
    shocks = _sliced(blocks, start, stop)
    z = np.empty_like(shocks)
    z[0] = shocks[0]
    innovation = math.sqrt(1.0 - rho * rho)
    for k in range(1, years):
        z[k] = rho * z[k - 1] + innovation * shocks[k]
    return np.exp(sigma * z - 0.5 * sigma * sigma)


# ---------------------------------------------------------------------------------------------
# Small batched linear algebra (n is the number of state variables, m the members)


def _solve(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve matrix[:, :, j] y[:, j] = rhs[:, j] for every member j; (n, n, m), (n, m)."""
    n = rhs.shape[0]
    if n == 1:
        return rhs / matrix[0]
    if n == 2:
        a, b, c, d = matrix[0, 0], matrix[0, 1], matrix[1, 0], matrix[1, 1]
        det = a * d - b * c
        return np.stack([(d * rhs[0] - b * rhs[1]) / det, (a * rhs[1] - c * rhs[0]) / det])
    stacked = np.moveaxis(matrix, -1, 0)
    return np.linalg.solve(stacked, np.moveaxis(rhs, -1, 0)[..., None])[..., 0].T


def _stable(jacobian: np.ndarray) -> np.ndarray:
    """Whether every eigenvalue has a negative real part, per member; (n, n, m) -> (m,)."""
    n = jacobian.shape[0]
    if n == 1:
        return jacobian[0, 0] < 0
    if n == 2:
        trace = jacobian[0, 0] + jacobian[1, 1]
        det = jacobian[0, 0] * jacobian[1, 1] - jacobian[0, 1] * jacobian[1, 0]
        return (trace < 0) & (det > 0)
    finite = np.isfinite(jacobian).all(axis=(0, 1))
    safe = np.where(finite, jacobian, 0.0)
    eigenvalues = np.linalg.eigvals(np.moveaxis(safe, -1, 0))
    return finite & (eigenvalues.real.max(axis=1) < 0)


# ---------------------------------------------------------------------------------------------
# Steppers (shared by the ensemble and first-passage times)


def rk4_step(rhs, x: np.ndarray, t: float, h: float) -> np.ndarray:
    """One classical Runge-Kutta step of dx/dt = rhs(x, t) (global order 4)."""
    k1 = rhs(x, t)
    k2 = rhs(x + (0.5 * h) * k1, t + 0.5 * h)
    k3 = rhs(x + (0.5 * h) * k2, t + 0.5 * h)
    k4 = rhs(x + h * k3, t + h)
    return x + (h / 6.0) * (k1 + 2.0 * (k2 + k3) + k4)


def euler_maruyama_step(rhs, x: np.ndarray, t: float, h: float, kick: np.ndarray) -> np.ndarray:
    """One Euler-Maruyama step of dx = rhs(x, t) dt + sigma dW; ``kick`` is sigma * dW."""
    return x + h * rhs(x, t) + kick


_D = 1.0 / (2.0 + math.sqrt(2.0))
_E32 = 6.0 + math.sqrt(2.0)


def _rosenbrock_step(system: System, x: np.ndarray, u: float, h: np.ndarray, f0: np.ndarray):
    """One step of the Shampine & Reichelt (1997) Rosenbrock pair for autonomous problems.

    Returns the new state, its right-hand side and the local error estimate, all (n, m).
    """
    jacobian = system.jac(x, u)
    n = x.shape[0]
    w = -(h * _D) * jacobian
    for i in range(n):
        w[i, i] += 1.0
    k1 = _solve(w, f0)
    f1 = system.rhs(x + (0.5 * h) * k1, u)
    k2 = _solve(w, f1 - k1) + k1
    new = x + h * k2
    f2 = system.rhs(new, u)
    k3 = _solve(w, f2 - _E32 * (k2 - f1) - 2.0 * (k1 - f0))
    error = (h / 6.0) * (k1 - 2.0 * k2 + k3)
    return new, f2, error


# ---------------------------------------------------------------------------------------------
# Plans: what every chunk needs to know about a schedule (computed once, picklable)


@dataclass(frozen=True)
class _Interval:
    start: float
    stop: float
    steps: int
    year: int  # calendar year whose load factor applies
    record: bool  # the state at ``stop`` is a yearly sample


@dataclass(frozen=True)
class _Plan:
    noise_key: int  # from the schedule's name: its noise is the same whatever else is run
    name: str
    kind: str
    path: ControlPath
    timeline: ActionTimeline
    intervals: tuple[_Interval, ...]
    final_control: float
    equilibria: np.ndarray  # nominal equilibria at the final control, (k, n)
    planned_present_value: float  # abatement and actions (equal for every member)
    infeasible: str | None


@dataclass(frozen=True)
class _Settings:
    horizon: float
    years: int  # calendar years with a load factor: ceil(horizon)
    sample_times: np.ndarray  # yearly sample times (years)
    scale: np.ndarray  # per-variable scale of the desired-attractor test
    noise: np.ndarray  # sigma per variable (0: none)
    keep_trajectories: bool
    fan_members: int


@dataclass(frozen=True)
class _Task:
    scenario: Scenario
    uncertainty: Uncertainty
    plans: tuple[_Plan, ...]
    settings: _Settings
    start: int
    stop: int


@dataclass(frozen=True)
class _MemberResults:
    """Per-member results of one schedule for one chunk."""

    verdicts: np.ndarray  # int8 codes, see VERDICTS
    meets_target_at: np.ndarray  # years; NaN: not met at the horizon
    present_value: np.ndarray
    samples: np.ndarray  # target variable at the sample times, (len(samples), members kept)
    trajectories: np.ndarray | None  # (members, n, len(samples)) when asked


def _step_count(length: float, per_year: float) -> int:
    return max(1, math.ceil(length * per_year - 1e-9))


def _intervals(
    path: ControlPath, timeline: ActionTimeline, horizon: float, per_year: float
) -> tuple[_Interval, ...]:
    samples = set(np.arange(0.0, math.floor(horizon) + 1.0)) | {float(horizon)}
    cuts = [0.0, float(horizon), *path.kinks(horizon), *timeline.kinks(horizon), *samples]
    cuts = np.unique(np.clip(np.array(cuts, dtype=float), 0.0, horizon))
    out = []
    for a, b in zip(cuts[:-1], cuts[1:], strict=True):
        if b - a <= SAME_TIME:
            continue
        out.append(
            _Interval(
                float(a),
                float(b),
                _step_count(b - a, per_year),
                int(math.floor(0.5 * (a + b))),
                float(b) in samples,
            )
        )
    return tuple(out)


def _spectral_radius(system: System, states: Sequence[np.ndarray], controls: Sequence[float]):
    largest = 0.0
    for x in states:
        for u in controls:
            with np.errstate(all="ignore"):
                eigenvalues = np.linalg.eigvals(system.jac(np.asarray(x, dtype=float), u))
            if np.all(np.isfinite(eigenvalues)):
                largest = max(largest, float(np.max(np.abs(eigenvalues))))
    return largest


def steps_per_year(scenario: Scenario, diagram: Diagram, paths: Sequence[ControlPath]) -> float:
    """Fixed steps a year: the scenario's choice, else the default of the scheme, shortened so
    that h * |eigenvalue| <= STABILITY_LIMIT for the explicit Runge-Kutta steps."""
    uncertainty = scenario.uncertainty
    noisy = uncertainty is not None and any(v > 0 for v in uncertainty.process_noise.values())
    if uncertainty is not None and uncertainty.steps_per_year is not None:
        return float(uncertainty.steps_per_year)
    if noisy:
        return float(NOISY_STEPS_PER_YEAR)
    horizon = scenario.simulation.horizon
    controls = {scenario.current_control}
    for path in paths:
        controls |= {float(v) for v in path.values} | {float(path(horizon))}
    states = [scenario.initial_state]
    for u in sorted(controls):
        states += [e.state for e in diagram.equilibria_at(u)]
    radius = _spectral_radius(scenario.system(), states, sorted(controls))
    return float(max(STEPS_PER_YEAR, math.ceil(radius / STABILITY_LIMIT)))


# ---------------------------------------------------------------------------------------------
# One chunk of members


def _target_gap(x_target: np.ndarray, threshold: float, regime: str) -> np.ndarray:
    """Positive while the target is not met (the threshold is met when the gap is <= 0)."""
    return x_target - threshold if regime == "lowest" else threshold - x_target


def _simulate_schedule(
    system: System,
    scenario: Scenario,
    uncertainty: Uncertainty,
    plan: _Plan,
    settings: _Settings,
    factors: np.ndarray | None,
    start: int,
    stop: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Integrate members start..stop-1 over the horizon under one schedule.

    Returns the state at the horizon (n, m), diverged flags, the time each member last began to
    meet the target (NaN: not meeting at the horizon), the discounted damages, the yearly
    samples of the state (samples, n, m).
    """
    m = stop - start
    n = system.n
    names = system.variables
    x = np.repeat(scenario.initial_state[:, None], m, axis=1)
    limit = scenario.simulation.state_limit
    lower = lower_state_bound(system, limit)
    k_target = scenario.target_index
    target = scenario.target
    threshold = target.threshold
    costs = scenario.costs
    damage_rate = 0.0 if costs is None or threshold is None else costs.damage_per_year
    growth = 1.0 + (0.0 if costs is None else costs.discount_rate)
    noisy = np.nonzero(settings.noise > 0)[0]
    nonnegative = system.model.spec.nonnegative_state
    diverged = np.zeros(m, dtype=bool)
    damage = np.zeros(m)
    became = np.zeros(m)
    samples = np.empty((len(settings.sample_times), n, m))
    sample = 0
    gap = None if threshold is None else _target_gap(x[k_target], threshold, target.regime)
    for number, piece in enumerate(plan.intervals):
        a, b = piece.start, piece.stop
        for when, variable, factor in plan.timeline.state_events:
            if abs(when - a) <= SAME_TIME or (a == 0.0 and when < SAME_TIME):
                x[names.index(variable)] *= factor
        if gap is not None:
            new_gap = _target_gap(x[k_target], threshold, target.regime)
            became = np.where((gap > 0) & (new_gap <= 0), a, became)
            gap = new_gap
        if a == 0.0:
            samples[sample] = x
            sample += 1
        system_at = segment_system(system, plan.timeline, a, b)
        u_a, slope = float(plan.path(a)), float(plan.path.slope(a))
        factor = 1.0 if factors is None else factors[min(piece.year, factors.shape[0] - 1)]

        def rhs(y, t, system_at=system_at, u_a=u_a, slope=slope, a=a, factor=factor):
            return system_at(t).rhs(y, (u_a + slope * (t - a)) * factor)

        h = (b - a) / piece.steps
        kicks = None
        if noisy.size:
            blocks = [
                _generator(
                    uncertainty.seed, STREAM_NOISE, plan.noise_key, number, block
                ).standard_normal((piece.steps, noisy.size, RNG_BLOCK))
                for block in _blocks(start, stop)
            ]
            kicks = _sliced(blocks, start, stop) * (
                settings.noise[noisy][None, :, None] * math.sqrt(h)
            )
        discount = growth ** -(piece.year + 1.0)
        for j in range(piece.steps):
            t = a + j * h
            if kicks is None:
                x = rk4_step(rhs, x, t, h)
            else:
                kick = np.zeros_like(x)
                kick[noisy] = kicks[j]
                x = euler_maruyama_step(rhs, x, t, h, kick)
                if nonnegative:
                    x = np.maximum(x, 0.0)
            outside = ~(np.abs(x) <= limit)
            if lower is not None:
                outside |= x < lower
            diverged |= outside.any(axis=0)
            if gap is not None:
                new_gap = _target_gap(x[k_target], threshold, target.regime)
                entering = (gap > 0) & (new_gap <= 0)
                if entering.any():
                    with np.errstate(all="ignore"):
                        share = gap / (gap - new_gap)
                    became = np.where(entering, t + h * share, became)
                if damage_rate > 0:
                    with np.errstate(all="ignore"):
                        missing = np.where(
                            gap > 0,
                            np.where(new_gap > 0, 1.0, gap / (gap - new_gap)),
                            np.where(new_gap > 0, new_gap / (new_gap - gap), 0.0),
                        )
                    damage += (damage_rate * h * discount) * missing
                gap = new_gap
        if piece.record:
            samples[sample] = x
            sample += 1
    if gap is None:
        meets_at = np.where(diverged, np.nan, 0.0)
    else:
        meets_at = np.where(diverged | (gap > 0), np.nan, became)
    return x, diverged, meets_at, damage, samples


def _settle(
    system: System, x: np.ndarray, u: float, active: np.ndarray, cap: float, limit: float
) -> tuple[np.ndarray, np.ndarray]:
    """Hold the control at ``u`` and integrate each active member until it settles.

    Settled means every |dx_i/dt| / max(scale_i, |x_i|) < SETTLED_RATE per year, scale being the
    magnitude of the state at the start (as planner.simulate.settle). Returns the final states
    and a code per member: RECOVERED is used here for "settled", then DIVERGED or UNSETTLED.
    """
    n, m = x.shape
    codes = np.full(m, UNSETTLED, dtype=np.int8)
    state = x.copy()
    lower = lower_state_bound(system, limit)
    index = np.nonzero(active)[0]
    if index.size == 0:
        return state, codes
    y = x[:, index].copy()
    sub = _member_system(system, index)
    scale = np.maximum(np.abs(y), SCALE_FLOOR)
    tolerance_floor = SETTLE_ATOL * np.maximum(scale, 1.0)
    f = sub.rhs(y, u)
    t = np.zeros(index.size)
    with np.errstate(all="ignore"):
        rate = np.max(np.abs(f) / np.maximum(scale, np.abs(y)), axis=0)
        h = np.minimum(SETTLE_FIRST_STEP, 0.01 / np.maximum(rate, 1e-12))
    done_codes = np.full(index.size, UNSETTLED, dtype=np.int8)
    running = rate >= SETTLED_RATE
    done_codes[~running] = RECOVERED
    for _ in range(SETTLE_MAX_STEPS):
        live = np.nonzero(running)[0]
        if live.size == 0:
            break
        part = sub if live.size == index.size else _member_system(sub, live)
        yl, fl, hl, tl = y[:, live], f[:, live], h[live], t[live]
        hl = np.minimum(hl, cap - tl)
        with np.errstate(all="ignore"):
            new, f_new, error = _rosenbrock_step(part, yl, u, hl, fl)
            weight = tolerance_floor[:, live] + SETTLE_RTOL * np.maximum(np.abs(yl), np.abs(new))
            norm = np.max(np.abs(error) / weight, axis=0)
        finite = np.isfinite(new).all(axis=0) & np.isfinite(norm)
        accept = finite & (norm <= 1.0)
        with np.errstate(all="ignore"):
            grow = np.where(
                finite, np.clip(0.8 * np.maximum(norm, 1e-10) ** (-1.0 / 3.0), 0.2, 5.0), 0.2
            )
        tl = np.where(accept, tl + hl, tl)
        yl = np.where(accept, new, yl)
        fl = np.where(accept, f_new, fl)
        y[:, live], f[:, live], t[live], h[live] = yl, fl, tl, hl * grow
        with np.errstate(all="ignore"):
            out = ~(np.abs(yl) <= limit)
            if lower is not None:
                out |= yl < lower
            escaped = accept & out.any(axis=0)
            rate = np.max(np.abs(fl) / np.maximum(scale[:, live], np.abs(yl)), axis=0)
        settled = accept & ~escaped & (rate < SETTLED_RATE)
        capped = ~settled & ~escaped & (tl >= cap * (1 - 1e-12))
        stuck = ~finite & (hl < 1e-12)
        done_codes[live[escaped | stuck]] = DIVERGED
        done_codes[live[settled]] = RECOVERED
        running[live[settled | escaped | capped | stuck]] = False
    state[:, index] = y
    codes[index] = done_codes
    return state, codes


def _member_system(system: System, index: np.ndarray) -> System:
    """The system restricted to some members (parameter arrays indexed, scalars kept)."""
    values = tuple(
        value if value is None or np.ndim(value) == 0 else np.asarray(value)[index]
        for value in system.parameter_values
    )
    return System(system.model, values)


def _follow_equilibria(
    system: System, u: float, starts: np.ndarray, m: int
) -> tuple[np.ndarray, np.ndarray]:
    """Each nominal equilibrium followed to every member's parameters by Newton.

    Returns states (k, n, m) and whether each is a converged, stable equilibrium (k, m).
    """
    k = starts.shape[0]
    n = system.n
    states = np.empty((k, n, m))
    good = np.zeros((k, m), dtype=bool)
    for e in range(k):
        x = np.repeat(starts[e][:, None], m, axis=1)
        with np.errstate(all="ignore"):
            for _ in range(NEWTON_ITERATIONS):
                step = _solve(system.jac(x, u), -system.rhs(x, u))
                x = np.where(np.isfinite(step).all(axis=0), x + step, x)
            residual = np.max(np.abs(system.rhs(x, u)), axis=0)
            converged = residual <= NEWTON_RESIDUAL * (1.0 + np.max(np.abs(x), axis=0))
            stable = _stable(system.jac(x, u))
        states[e] = x
        good[e] = converged & stable & np.isfinite(x).all(axis=0)
    return states, good


def _classify(
    system: System,
    settled: np.ndarray,
    codes: np.ndarray,
    plan: _Plan,
    settings: _Settings,
    k_target: int,
    regime: str,
) -> np.ndarray:
    """Recovered when the settled state sits on the member's stable equilibrium with the lowest
    (or highest) target variable, among those followed from the nominal diagram."""
    m = settled.shape[1]
    verdicts = codes.copy()
    candidates = np.nonzero(codes == RECOVERED)[0]
    if candidates.size == 0:
        return verdicts
    if plan.equilibria.shape[0] == 0:
        verdicts[candidates] = NOT_RECOVERED
        return verdicts
    sub = _member_system(system, candidates) if candidates.size < m else system
    states, good = _follow_equilibria(sub, plan.final_control, plan.equilibria, candidates.size)
    sign = 1.0 if regime == "lowest" else -1.0
    values = np.where(good, sign * states[:, k_target, :], np.inf)
    best = np.argmin(values, axis=0)
    desired = states[best, :, np.arange(candidates.size)].T  # (n, members)
    any_good = good.any(axis=0)
    own = settled[:, candidates]
    lower_than_all = sign * own[k_target] < values.min(axis=0)
    distance = np.max(np.abs(own - desired) / settings.scale[:, None], axis=0)
    recovered = any_good & ((distance < DESIRED_TOLERANCE) | lower_than_all)
    verdicts[candidates] = np.where(recovered, RECOVERED, NOT_RECOVERED)
    return verdicts


def _run_chunk(task: _Task, progress: Progress = silent) -> list[_MemberResults]:
    """Every schedule for members task.start..task.stop-1 (runs on a worker or locally)."""
    scenario, uncertainty, settings = task.scenario, task.uncertainty, task.settings
    start, stop = task.start, task.stop
    system = scenario.system()
    parameters = draw_parameters(uncertainty, start, stop)
    if parameters:
        system = system.with_parameters(**parameters)
    factors = draw_load_factors(uncertainty, settings.years, start, stop)
    keep = max(0, min(stop, settings.fan_members) - start)
    out = []
    for i, plan in enumerate(task.plans):
        share = 1.0 / len(task.plans)
        state, diverged, meets_at, damage, samples = _simulate_schedule(
            system, scenario, uncertainty, plan, settings, factors, start, stop
        )
        progress((i + 0.8) * share, f"{plan.name}: settling")
        settled, codes = _settle(
            system,
            state,
            plan.final_control,
            ~diverged,
            scenario.simulation.settle_cap,
            scenario.simulation.state_limit,
        )
        codes[diverged] = DIVERGED
        verdicts = _classify(
            system,
            settled,
            codes,
            plan,
            settings,
            scenario.target_index,
            scenario.target.regime,
        )
        meets_at = np.where(verdicts == DIVERGED, np.nan, meets_at)
        out.append(
            _MemberResults(
                verdicts=verdicts,
                meets_target_at=meets_at,
                present_value=plan.planned_present_value + damage,
                samples=samples[:, scenario.target_index, :keep].copy(),
                trajectories=np.transpose(samples, (2, 1, 0)).copy()
                if settings.keep_trajectories
                else None,
            )
        )
        progress((i + 1) * share, plan.name)
    return out


# ---------------------------------------------------------------------------------------------
# Results


def wilson_interval(successes: int, trials: int, confidence: float = CONFIDENCE):
    """Wilson score interval for a binomial proportion (Wilson 1927, JASA 22:209-212)."""
    if trials <= 0:
        raise ValueError("the interval needs at least one trial")
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    if not 0 <= successes <= trials:
        raise ValueError(f"successes {successes} must lie in 0..{trials}")
    p = successes / trials
    denominator = 1.0 + z * z / trials
    centre = (p + z * z / (2.0 * trials)) / denominator
    half = z * math.sqrt(p * (1.0 - p) / trials + z * z / (4.0 * trials * trials)) / denominator
    low = 0.0 if successes == 0 else max(0.0, centre - half)
    high = 1.0 if successes == trials else min(1.0, centre + half)
    return low, high


def _quantiles(values: np.ndarray) -> dict[float, float]:
    return {q: float(v) for q, v in zip(QUANTILES, np.quantile(values, QUANTILES), strict=True)}


@dataclass(frozen=True)
class FanChart:
    """Quantiles of the target variable at yearly sample times, from the first ``members``."""

    times: np.ndarray  # years
    levels: tuple[float, ...]
    values: np.ndarray  # (len(levels), len(times))
    members: int


@dataclass(frozen=True, eq=False)
class ScheduleEnsemble:
    """One schedule over every member: the recovery probability and the spread of outcomes.

    ``verdicts`` holds per member an index into :data:`VERDICTS`; ``meets_target_at`` the time
    (years) after which the target holds until the horizon (NaN: not met at the horizon);
    ``present_value`` the discounted costs in the scenario's currency. ``meets_target_by`` is
    the share of members whose target holds from year ``years[k]`` on (None without a
    threshold). ``trajectories`` (members, n, samples) only when asked for.
    """

    name: str
    kind: str
    members: int
    recovered: int
    diverged: int
    unsettled: int
    p_recovered: float
    interval: tuple[float, float]
    infeasible: str | None
    years: np.ndarray
    meets_target_by: np.ndarray | None
    verdicts: np.ndarray = field(repr=False)
    meets_target_at: np.ndarray = field(repr=False)
    present_value: np.ndarray = field(repr=False)
    fan: FanChart = field(repr=False)
    trajectories: np.ndarray | None = field(default=None, repr=False)

    def present_value_quantiles(self) -> dict[float, float]:
        return _quantiles(self.present_value)

    def years_to_target_quantiles(self) -> dict[float, float] | None:
        """Quantiles over the members that meet the target (None when none does)."""
        met = self.meets_target_at[np.isfinite(self.meets_target_at)]
        if met.size == 0:
            return None
        return _quantiles(met)

    @property
    def p_meets_target(self) -> float:
        """Share of members meeting the target at the horizon (and from some time on)."""
        return float(np.mean(np.isfinite(self.meets_target_at)))


@dataclass(frozen=True, eq=False)
class Ensemble:
    """The result of :func:`run_ensemble`: one :class:`ScheduleEnsemble` per schedule."""

    scenario: Scenario
    members: int
    seed: int
    schedules: list[ScheduleEnsemble]
    steps_per_year: float
    scheme: str
    chunk_size: int
    scheduler: str


def _summarise(
    plan: _Plan, parts: list[_MemberResults], settings: _Settings, threshold: float | None
) -> ScheduleEnsemble:
    verdicts = np.concatenate([p.verdicts for p in parts])
    meets_at = np.concatenate([p.meets_target_at for p in parts])
    present_value = np.concatenate([p.present_value for p in parts])
    samples = np.concatenate([p.samples for p in parts], axis=1)
    members = verdicts.size
    recovered = int(np.sum(verdicts == RECOVERED))
    years = np.arange(0.0, math.floor(settings.horizon) + 1.0)
    meets_by = None
    if threshold is not None:
        met = np.where(np.isfinite(meets_at), meets_at, np.inf)
        meets_by = np.mean(met[None, :] <= years[:, None], axis=1)
    with np.errstate(all="ignore"):
        fan_values = (
            np.nanquantile(samples, QUANTILES, axis=1)
            if samples.shape[1]
            else np.full((len(QUANTILES), samples.shape[0]), np.nan)
        )
    trajectories = None
    if settings.keep_trajectories:
        trajectories = np.concatenate([p.trajectories for p in parts], axis=0)
    return ScheduleEnsemble(
        name=plan.name,
        kind=plan.kind,
        members=members,
        recovered=recovered,
        diverged=int(np.sum(verdicts == DIVERGED)),
        unsettled=int(np.sum(verdicts == UNSETTLED)),
        p_recovered=recovered / members,
        interval=wilson_interval(recovered, members),
        infeasible=plan.infeasible,
        years=years,
        meets_target_by=meets_by,
        verdicts=verdicts,
        meets_target_at=meets_at,
        present_value=present_value,
        fan=FanChart(settings.sample_times, QUANTILES, fan_values, samples.shape[1]),
        trajectories=trajectories,
    )


# ---------------------------------------------------------------------------------------------
# Driver


def _plan(scenario: Scenario, diagram: Diagram, schedule: Schedule, per_year: float) -> _Plan:
    horizon = scenario.simulation.horizon
    path = make_control_path(schedule, current=scenario.current_control)
    timeline = action_timeline(schedule)
    final = float(path(horizon))
    equilibria = [e.state for e in diagram.desired_candidates(final)]
    control = scenario.control
    infeasible = check_limits(
        path,
        horizon=horizon,
        lowest=control.least,
        max_change_per_year=control.max_change_per_year,
        unit=control.unit,
    )
    breakdown = scenario_costs(scenario, path, timeline)
    planned = breakdown.present_value
    if infeasible is None:
        infeasible = breakdown.infeasible
    return _Plan(
        noise_key=zlib.crc32(schedule.name.encode("utf-8")),
        name=schedule.name,
        kind=schedule.kind,
        path=path,
        timeline=timeline,
        intervals=_intervals(path, timeline, horizon, per_year),
        final_control=final,
        equilibria=np.array(equilibria, dtype=float).reshape(-1, len(scenario.spec.variables)),
        planned_present_value=float(planned),
        infeasible=None if infeasible is None else infeasible.message,
    )


def _options(
    scenario: Scenario, members: int | None, seed: int | None, chunk_size: int
) -> Uncertainty:
    base = scenario.uncertainty or Uncertainty()
    problems = []
    if members is not None and not 1 <= members <= MAX_MEMBERS:
        problems.append(Problem("--members", "members", f"must be between 1 and {MAX_MEMBERS}"))
    if seed is not None and not 0 <= seed < 2**63:
        problems.append(Problem("--seed", "seed", "must be a non-negative integer below 2**63"))
    if chunk_size < 1:
        problems.append(Problem("--chunk", "chunk", "must be a positive number of members"))
    if problems:
        raise InputError(problems)
    update: dict[str, Any] = {}
    if members is not None:
        update["members"] = members
    if seed is not None:
        update["seed"] = seed
    return base.model_copy(update=update) if update else base


def run_ensemble(
    scenario: Scenario,
    *,
    members: int | None = None,
    seed: int | None = None,
    schedules: Sequence[Schedule] | None = None,
    chunk_size: int = DEFAULT_CHUNK,
    scheduler: str = "local",
    keep_trajectories: bool = False,
    diagram: Diagram | None = None,
    progress: Progress = silent,
) -> Ensemble:
    """Run every schedule (or those given) for every member of the scenario's ensemble.

    ``members`` and ``seed`` override ``[uncertainty]`` (a scenario without that block runs
    identical members: the deterministic case). ``scheduler``: "local" (this process, no Dask),
    "processes" (a dask.distributed LocalCluster of 2 worker processes on 127.0.0.1) or the
    address of a running Dask scheduler ("tcp://host:port"). Results are bit-identical whatever
    the scheduler and ``chunk_size``. Yearly states of every member are kept only with
    ``keep_trajectories``.
    """
    uncertainty = _options(scenario, members, seed, chunk_size)
    check_scheduler(scheduler)
    if diagram is None:
        diagram = diagram_for(scenario, progress=scaled(progress, 0.0, 0.1))
    chosen = list(scenario.schedules if schedules is None else schedules)
    horizon = scenario.simulation.horizon
    paths = [make_control_path(s, current=scenario.current_control) for s in chosen]
    per_year = steps_per_year(scenario, diagram, paths)
    plans = tuple(_plan(scenario, diagram, s, per_year) for s in chosen)
    noise = np.array([uncertainty.process_noise.get(name, 0.0) for name in scenario.spec.variables])
    sample_times = np.unique(np.append(np.arange(0.0, math.floor(horizon) + 1.0), horizon))
    settings = _Settings(
        horizon=horizon,
        years=max(1, math.ceil(horizon)),
        sample_times=sample_times,
        scale=np.asarray(diagram.scale[:-1], dtype=float),
        noise=noise,
        keep_trajectories=keep_trajectories,
        fan_members=FAN_MEMBERS,
    )
    total = uncertainty.members
    bounds = [(a, min(a + chunk_size, total)) for a in range(0, total, chunk_size)]
    tasks = [_Task(scenario, uncertainty, plans, settings, a, b) for a, b in bounds]
    inner = scaled(progress, 0.1, 0.99)  # 1.0 (which ends a terminal bar) only when done
    if not plans:
        results: list[list[_MemberResults]] = []
    elif scheduler == "local":
        results = []
        for number, task in enumerate(tasks):
            part = scaled(inner, number / len(tasks), (number + 1) / len(tasks))
            results.append(_run_chunk(task, part))
    else:
        results = _run_distributed(tasks, scheduler, inner)
    summaries = [
        _summarise(plan, [chunk[i] for chunk in results], settings, scenario.target.threshold)
        for i, plan in enumerate(plans)
    ]
    noisy = bool(np.any(noise > 0))
    progress(1.0, "done")
    return Ensemble(
        scenario=scenario,
        members=total,
        seed=uncertainty.seed,
        schedules=summaries,
        steps_per_year=per_year,
        scheme=SCHEME_NOISY if noisy else SCHEME_DETERMINISTIC,
        chunk_size=chunk_size,
        scheduler=scheduler,
    )


def check_scheduler(scheduler: str) -> None:
    """Refuse a scheduler that is not "local", "processes" or "tcp://host:port"."""
    if scheduler in ("local", "processes"):
        return
    if scheduler.startswith("tcp://") and len(scheduler) > len("tcp://"):
        return
    raise InputError(
        [
            Problem(
                "--scheduler",
                "scheduler",
                f"{scheduler!r}: use local, processes or the address tcp://HOST:PORT of a "
                "running Dask scheduler",
            )
        ]
    )


def _run_distributed(tasks: list[_Task], scheduler: str, progress: Progress):
    """Run the chunks on Dask workers; results come back in member order."""
    try:
        from dask.distributed import Client, LocalCluster, as_completed
    except ImportError:
        raise InputError(
            [
                Problem(
                    "--scheduler",
                    "scheduler",
                    "Dask is not installed; install the 'scale' extra "
                    "(pip install 'regime-planner[scale]') or use --scheduler local",
                )
            ]
        ) from None
    cluster = None
    try:
        if scheduler == "processes":
            cluster = LocalCluster(
                n_workers=2,
                threads_per_worker=1,
                processes=True,
                host="127.0.0.1",
                dashboard_address=None,
            )
            client = Client(cluster)
        else:
            try:
                client = Client(scheduler, timeout="10s")
            except OSError as error:
                raise InputError(
                    [Problem("--scheduler", "scheduler", f"cannot reach {scheduler}: {error}")]
                ) from None
        try:
            futures = client.map(_run_chunk, tasks, pure=False)
            for done, _future in enumerate(as_completed(futures), start=1):
                progress(done / len(futures), f"{done} of {len(futures)} chunks")
            return client.gather(futures)
        finally:
            client.close()
    finally:
        if cluster is not None:
            cluster.close()


# ---------------------------------------------------------------------------------------------
# First-passage times (the same Euler-Maruyama stepping, one control value held)


@dataclass(frozen=True)
class FirstPassage:
    """Times (model time units) at which each member first reached the level; NaN if not by
    ``max_time``."""

    times: np.ndarray
    step: float

    @property
    def reached(self) -> np.ndarray:
        return np.isfinite(self.times)

    @property
    def mean(self) -> float:
        return float(np.mean(self.times))

    @property
    def standard_error(self) -> float:
        return float(np.std(self.times, ddof=1) / math.sqrt(self.times.size))


def first_passage_times(
    system: System,
    x0: np.ndarray,
    u: float,
    *,
    variable: int,
    level: float,
    noise: np.ndarray,
    members: int,
    seed: int,
    step: float,
    max_time: float,
    progress: Progress = silent,
) -> FirstPassage:
    """First time each member's ``variable`` reaches ``level`` from ``x0`` (absorbed there),
    for dx = f(x, u) dt + noise dW integrated by Euler-Maruyama with a fixed ``step``.

    The passage time is the end of the first step whose state is at or past the level. Random
    numbers depend only on (seed, member), as in the ensemble.
    """
    x0 = np.asarray(x0, dtype=float)
    n = x0.size
    noise = np.asarray(noise, dtype=float).reshape(n)
    rising = level >= x0[variable]
    times = np.full(members, np.nan)
    active = np.arange(members)  # members still on their way at the start of the batch
    x = np.repeat(x0[:, None], members, axis=1)
    scale = noise[:, None] * math.sqrt(step)
    steps = math.ceil(max_time / step)

    def drift(y: np.ndarray, t: float) -> np.ndarray:
        return system.rhs(y, u)

    for first in range(0, steps, FIRST_PASSAGE_BATCH):
        # Absorbed members leave at batch boundaries only, so within a batch each step's
        # noise is a plain slice; blocks are drawn whole, keyed by (seed, block, first step).
        pending = np.isnan(times[active])
        active, x = active[pending], x[:, pending]
        if active.size == 0:
            break
        blocks = np.unique(active // RNG_BLOCK)
        drawn = np.concatenate(
            [
                _generator(seed, STREAM_NOISE, int(b), first).standard_normal(
                    (FIRST_PASSAGE_BATCH, n, RNG_BLOCK)
                )
                for b in blocks
            ],
            axis=-1,
        )
        columns = np.searchsorted(blocks, active // RNG_BLOCK) * RNG_BLOCK + active % RNG_BLOCK
        kicks = drawn[:, :, columns] * scale[None]
        waiting = np.ones(active.size, dtype=bool)
        for j in range(first, min(first + FIRST_PASSAGE_BATCH, steps)):
            x = euler_maruyama_step(drift, x, j * step, step, kicks[j - first])
            crossed = x[variable] >= level if rising else x[variable] <= level
            if crossed.any():
                new = crossed & waiting
                times[active[new]] = (j + 1) * step
                waiting &= ~crossed
        progress(min((first + FIRST_PASSAGE_BATCH) / steps, 1.0), f"{active.size} on their way")
    progress(1.0, "done")
    return FirstPassage(times, step)
