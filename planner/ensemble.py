"""Ensembles: how likely each schedule is to bring the lake back, when the model's parameters are
uncertain, yearly loads swing with wet and dry years, and the state itself is noisy.

Each member draws its parameters from the priors of ``[uncertainty]`` (independent priors, and
the multivariate normal of ``[uncertainty.joint]`` for correlated ones, e.g. written by
``planner fit``), its yearly load factors and (with process noise) its Brownian path; every
schedule is then run for every member at once, vectorised over members, in chunks so memory
stays bounded.

Numerical schemes: every member runs through the one engine (:mod:`planner.integrate`), split at
every kink of the control path, every action and every calendar year (where the load factor
changes), so no step straddles a discontinuity:

- without process noise: the batched Dormand-Prince 8(5,3) method with error control, one step
  size shared by the members of a chunk (the worst member's error decides);
- with process noise dx = f(x, u) dt + sigma dW (additive noise): Euler-Maruyama with
  ``NOISY_STEPS_PER_YEAR`` steps a year (or the scenario's ``steps_per_year``); for models whose
  state is an amount, a step that ends below zero is set to zero;
- the verdict is :mod:`planner.verdict`'s, the one every command uses: after the horizon the
  control is held at the schedule's final value (no load factor, no noise, actions over), the
  state settles (batched Rosenbrock, stiff), and is matched to the member's own stable
  equilibria, followed by Newton from the diagram's.

Load variability: the control of member i in calendar year k (t in [k, k + 1)) is the schedule's
u(t) times exp(sigma z_ik - sigma^2 / 2), where z_i is a stationary AR(1) series with unit
variance and the given lag-1 autocorrelation, so each factor has mean one.

Reproducibility: member i's random numbers depend only on (seed, i): they come from blocks of
``RNG_BLOCK`` members, each with its own generator seeded by (seed, stream, block), generated
whole and sliced, so chunking and scheduler change no draw. With process noise (fixed steps) and
in the verdict (a step size per member) results are bit-identical whatever the chunking; without
noise the members of a chunk share the Dormand-Prince step size, so a member's last digits (at
the integration tolerance) depend on the chunk it is in. Members share parameter draws and load
factors across schedules (common random numbers); process noise is drawn per schedule, keyed by
its name.

In-lake measures (catalogue actions, :mod:`planner.measures`): each member draws its own effect
factor and longevity from the catalogue's distributions (:func:`draw_measures`, a random stream
of their own, so the other draws are those of the same ensemble without the measure), and the
engine cuts the run wherever a member's dose stops working (longevities in whole months); a
value fixed in the action is every member's.

Costs: the abatement and action costs of a schedule are those of its planned path (the
measures the manager pays for; weather moves the load, not the bill) and equal for all members;
damages accrue per member while its target is not met (:mod:`planner.metrics`, crossing times
from the engine). Present values follow :mod:`planner.costs`.

Recovery probability: k recovered of n members, with the Wilson score interval at 95% (Wilson
1927, J. Am. Stat. Assoc. 22:209-212), which scipy.stats.binomtest(k, n).proportion_ci(
method="wilson") also gives.
"""

from __future__ import annotations

import math
import warnings
import zlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from statistics import NormalDist
from typing import TYPE_CHECKING, Any

import numpy as np

from planner.equilibria import Diagram, diagram_for
from planner.errors import InputError, Problem
from planner.integrate import Problem as Run
from planner.integrate import ProcessNoise, Save, Tolerance, Watch, held, integrate, system_limits
from planner.metrics import Plan, damages, limits_for, plan, target_metrics, watch_for
from planner.models import System
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, Schedule, Uncertainty
from planner.scenario.uncertainty import MAX_MEMBERS, JointPrior, prior_quantiles
from planner.schedules import ActionTimeline
from planner.verdict import DIVERGED, RECOVERED, UNSETTLED, VERDICTS, Attractors, attractors, decide
from planner.views import ResultViews

if TYPE_CHECKING:  # views for notebooks; pandas and plotly are imported when they are asked for
    pass

# Tuning constants.
NOISY_STEPS_PER_YEAR = 100  # Euler-Maruyama steps a year with process noise
ENSEMBLE_TOLERANCE = Tolerance(rtol=1e-7, atol=1e-10)  # Dormand-Prince 8(5,3) local error per step
DEFAULT_CHUNK = 8192  # members simulated together (bounds memory; cache-friendly)
RNG_BLOCK = 1024  # members sharing one generator; chunk boundaries may cut blocks anywhere
CONFIDENCE = 0.95
QUANTILES = (0.05, 0.25, 0.5, 0.75, 0.95)
FAN_MEMBERS = 20_000  # the fan chart's quantiles come from the first members (all if fewer)
FIRST_PASSAGE_YEARS = 1.0  # first-passage runs draw their noise this many time units at a time

JOINT_REDRAWS = 100  # rounds of redrawing joint-prior members below a physical bound

STREAM_PARAMETERS, STREAM_LOADS, STREAM_NOISE, STREAM_JOINT, STREAM_MEASURES = 1, 2, 3, 4, 5
__all__ = ["VERDICTS", "first_passage_times", "run_ensemble", "wilson_interval"]

SCHEME_DETERMINISTIC = "Dormand-Prince 8(5,3), adaptive, shared step"
SCHEME_SETTLE = "Rosenbrock (Shampine & Reichelt 1997), order 2, stiff, shared step"
SCHEME_NOISY = "Euler-Maruyama, additive noise: strong order 1, weak order 1, fixed step"
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


def draw_parameters(
    uncertainty: Uncertainty,
    start: int,
    stop: int,
    *,
    bounds: Mapping[str, tuple[float, bool]] | None = None,
) -> dict[str, np.ndarray]:
    """Each prior's values for members start..stop-1: independent priors by inverse CDF
    (truncated ones too), the joint prior as a multivariate normal on its scales (draws below a
    parameter's physical bound in ``bounds``, name -> (lower, strict), redrawn)."""
    priors = uncertainty.priors
    drawn: dict[str, np.ndarray] = {}
    if priors:
        blocks = [
            _generator(uncertainty.seed, STREAM_PARAMETERS, b).random((len(priors), RNG_BLOCK))
            for b in _blocks(start, stop)
        ]
        uniforms = _sliced(blocks, start, stop)
        drawn = {
            prior.parameter: prior_quantiles(prior, uniforms[j]) for j, prior in enumerate(priors)
        }
    joint = uncertainty.joint
    if joint is not None:
        factor = _joint_factor(joint)
        blocks = [
            _joint_block(joint, factor, bounds or {}, _generator(uncertainty.seed, STREAM_JOINT, b))
            for b in _blocks(start, stop)
        ]
        values = _sliced(blocks, start, stop)
        drawn.update(zip(joint.parameters, values, strict=True))
    return drawn


def _joint_factor(joint: JointPrior) -> np.ndarray:
    """A matrix A with A A^T = the joint covariance, from its eigendecomposition (unlike a
    Cholesky factor it exists for a singular matrix too: perfectly correlated parameters, or a
    point mass)."""
    matrix = np.array(joint.covariance, dtype=float)
    eigenvalues, vectors = np.linalg.eigh(0.5 * (matrix + matrix.T))
    return vectors * np.sqrt(np.clip(eigenvalues, 0.0, None))


def _joint_block(
    joint: JointPrior,
    factor: np.ndarray,
    bounds: Mapping[str, tuple[float, bool]],
    generator: np.random.Generator,
) -> np.ndarray:
    """RNG_BLOCK draws (k, RNG_BLOCK) of the joint prior from one generator: normal on each
    parameter's scale, mapped to values; members below a physical bound draw again from the
    same generator (rejection: the normal truncated to the physical region)."""
    centre = np.array(joint.centre, dtype=float)
    log = np.array([scale == "log" for scale in joint.scales])
    mean = np.where(log, np.log(np.where(log, centre, 1.0)), centre)[:, None]
    lower = np.array([bounds.get(name, (-np.inf, False))[0] for name in joint.parameters])
    strict = np.array([bounds.get(name, (-np.inf, False))[1] for name in joint.parameters])

    def values(count: int) -> np.ndarray:
        normal = mean + factor @ generator.standard_normal((centre.size, count))
        return np.where(log[:, None], np.exp(normal), normal)

    def outside(x: np.ndarray) -> np.ndarray:
        below = np.where(strict[:, None], x <= lower[:, None], x < lower[:, None])
        return np.any(below, axis=0)

    drawn = values(RNG_BLOCK)
    for _ in range(JOINT_REDRAWS):
        redo = np.nonzero(outside(drawn))[0]
        if redo.size == 0:
            return drawn
        drawn[:, redo] = values(redo.size)
    raise InputError(
        [
            Problem(
                "[uncertainty]",
                "uncertainty.joint",
                f"draws keep falling below a physical bound after {JOINT_REDRAWS} redraws; "
                "centre the prior inside the physical range or use log scales",
            )
        ]
    )


def physical_bounds(scenario: Scenario) -> dict[str, tuple[float, bool]]:
    """Each bounded model parameter's physical lower bound and whether it is strict."""
    return {
        info.name: (float(info.lower), info.strict)
        for info in scenario.model_info.parameters
        if info.lower is not None
    }


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


def draw_measures(
    seed: int, timeline: ActionTimeline, start: int, stop: int
) -> dict[int, tuple[np.ndarray | float, np.ndarray | float]]:
    """Each uncertain in-lake measure's effect factors and longevities (years) for members
    start..stop-1, by action index: drawn from the catalogue's distributions for its lake type
    (:mod:`planner.measures`) by inverse CDF, longevities in whole months
    (:func:`planner.measures.whole_months`), a value fixed in the action kept as it is.

    Two uniforms per member come from the measures' own stream, keyed by (seed, catalogue
    entry, how many earlier actions of the schedule use that entry, block): independent of
    the parameter, load and noise streams (a measure changes no other draw), of chunking, and
    the same for the same use of an entry in every schedule (common random numbers).
    """
    from planner.measures import CATALOGUE, whole_months

    out: dict[int, tuple[np.ndarray | float, np.ndarray | float]] = {}
    for measure in timeline.uncertain_measures:
        action = measure.action
        figures = CATALOGUE[action.measure].figures(action.lake_type)
        key = zlib.crc32(action.measure.encode("utf-8"))
        blocks = [
            _generator(seed, STREAM_MEASURES, key, measure.occurrence, b).random((2, RNG_BLOCK))
            for b in _blocks(start, stop)
        ]
        uniforms = _sliced(blocks, start, stop)
        effect = action.effect
        if effect is None:
            effect = prior_quantiles(figures.effect, uniforms[0])
        longevity = action.longevity_years
        if longevity is None:
            longevity = whole_months(prior_quantiles(figures.longevity, uniforms[1]))
        out[measure.index] = (effect, longevity)
    return out


# ---------------------------------------------------------------------------------------------
# Plans: what every chunk needs to know about a schedule (computed once, picklable)


@dataclass(frozen=True)
class _Plan:
    noise_key: int  # from the schedule's name: its noise is the same whatever else is run
    plan: Plan
    attractors: Attractors  # the diagram's desired candidates at the final control

    @property
    def name(self) -> str:
        return self.plan.name

    @property
    def kind(self) -> str:
        return self.plan.kind

    @property
    def infeasible(self) -> str | None:
        return None if self.plan.infeasible is None else self.plan.infeasible.message


@dataclass(frozen=True)
class _Settings:
    horizon: float
    years: int  # calendar years with a load factor: ceil(horizon)
    sample_times: np.ndarray  # yearly sample times (years)
    noise: np.ndarray  # sigma per variable (0: none)
    steps_per_year: float  # Euler-Maruyama steps a year (with noise)
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


def _noise_draw(seed: int, key: int, start: int, stop: int, noisy: int):
    """Standard normal numbers of piece ``piece`` for members start..stop-1, drawn in whole
    blocks keyed by (seed, stream, schedule, piece, block): independent of chunking."""

    def draw(piece: int, steps: int, members: np.ndarray) -> np.ndarray:
        blocks = [
            _generator(seed, STREAM_NOISE, key, piece, block).standard_normal(
                (steps, noisy, RNG_BLOCK)
            )
            for block in _blocks(start, stop)
        ]
        drawn = _sliced(blocks, start, stop)
        if members.size == stop - start:  # every member of the chunk: no copy
            return drawn
        return drawn[:, :, members]

    return draw


def _run_chunk(task: _Task, progress: Progress = silent) -> list[_MemberResults]:
    """Every schedule for members task.start..task.stop-1 (runs on a worker or locally)."""
    scenario, uncertainty, settings = task.scenario, task.uncertainty, task.settings
    start, stop = task.start, task.stop
    m = stop - start
    system = scenario.system()
    parameters = draw_parameters(uncertainty, start, stop, bounds=physical_bounds(scenario))
    if parameters:
        system = system.with_parameters(**parameters)
    factors = draw_load_factors(uncertainty, settings.years, start, stop)
    keep = max(0, min(stop, settings.fan_members) - start)
    limits = limits_for(scenario)
    watch = watch_for(scenario)
    noisy = np.nonzero(settings.noise > 0)[0]
    x0 = np.repeat(scenario.initial_state[:, None], m, axis=1)
    out = []
    for i, entry in enumerate(task.plans):
        share = 1.0 / len(task.plans)
        noise = None
        if noisy.size:
            draw = _noise_draw(uncertainty.seed, entry.noise_key, start, stop, noisy.size)
            noise = ProcessNoise(settings.noise, draw, settings.steps_per_year)
        planned = entry.plan
        timeline = planned.timeline.for_members(
            draw_measures(uncertainty.seed, planned.timeline, start, stop)
        )
        problem = Run(system, x0, planned.path, settings.horizon, timeline, factors, noise)
        run = integrate(
            problem,
            save=Save(every=1.0),
            watch=watch,
            limits=limits,
            tolerance=ENSEMBLE_TOLERANCE,
        )
        progress((i + 0.8) * share, f"{entry.name}: settling")
        verdicts = decide(
            entry.attractors,
            system,
            run.final_state,
            run.codes,
            run.t_end,
            horizon=settings.horizon,
            cap=scenario.simulation.settle_cap,
            limit=scenario.simulation.state_limit,
        ).codes
        if watch is None:
            meets_at = np.where(verdicts == DIVERGED, np.nan, 0.0)
            damage = np.zeros(m)
        else:
            metrics = target_metrics(run.watch, run.codes, run.t_end)
            meets_at = np.where(verdicts == DIVERGED, np.nan, metrics.meets_target_at)
            damage = damages(scenario, metrics.not_met_by_year)
        samples = run.samples
        out.append(
            _MemberResults(
                verdicts=verdicts,
                meets_target_at=meets_at,
                present_value=planned.planned_costs.present_value + damage,
                samples=samples[:, scenario.target_index, :keep].copy(),
                trajectories=np.transpose(samples, (2, 1, 0)).copy()
                if settings.keep_trajectories
                else None,
            )
        )
        progress((i + 1) * share, entry.name)
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
class Ensemble(ResultViews):
    """The result of :func:`run_ensemble`: one :class:`ScheduleEnsemble` per schedule."""

    scenario: Scenario
    members: int
    seed: int
    schedules: list[ScheduleEnsemble]
    steps_per_year: float
    scheme: str
    chunk_size: int
    scheduler: str

    _views = ("ensemble_frame", "ensemble_figure")

    def _view_title(self) -> str:
        return f"Ensemble: {self.scenario.name}"


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
    with np.errstate(all="ignore"), warnings.catch_warnings():
        # years where every member has run away have no quantiles: NaN, not a warning
        warnings.simplefilter("ignore", RuntimeWarning)
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


def _plan(scenario: Scenario, diagram: Diagram, schedule: Schedule) -> _Plan:
    planned = plan(scenario, schedule)
    return _Plan(
        noise_key=zlib.crc32(schedule.name.encode("utf-8")),
        plan=planned,
        attractors=attractors(diagram, planned.final_control),
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


MEMORY_BUDGET = 2 * 1024**3  # bytes an ensemble may hold at once (a laptop's share)
COPIES_PER_SAMPLE = 4  # the state samples, the target record, damages by year, scratch


def _memory_plan(
    scenario: Scenario, members: int, schedules: int, samples: int, chunk: int, source: str
) -> int:
    """The chunk size that keeps an ensemble within MEMORY_BUDGET, estimated before any work:
    a chunk holds every member's state at every sample time a few times over; the fan chart
    keeps up to FAN_MEMBERS members' target per schedule. An ensemble whose fan alone would
    not fit (a very long horizon with many schedules) is refused, naming what to shrink."""
    n = len(scenario.spec.variables)
    per_member = samples * (n + COPIES_PER_SAMPLE) * 8
    fan = min(members, FAN_MEMBERS) * samples * 8 * max(schedules, 1)
    if fan > MEMORY_BUDGET // 2:
        reason = (
            f"{members} members over {samples} yearly samples and {schedules} schedules would "
            f"hold about {fan / 1e9:.1f} GB of results (the limit is "
            f"{MEMORY_BUDGET / 2 / 1e9:.1f} GB): shorten the horizon or compare fewer schedules"
        )
        raise InputError([Problem(source, "simulation.horizon", reason)])
    return max(1, min(chunk, (MEMORY_BUDGET // 2) // per_member))


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
    source: str = "<scenario>",
) -> Ensemble:
    """Run every schedule (or those given) for every member of the scenario's ensemble.

    ``members`` and ``seed`` override ``[uncertainty]`` (a scenario without that block runs
    identical members: the deterministic case). ``scheduler``: "local" (this process, no Dask),
    "processes" (a dask.distributed LocalCluster of 2 worker processes on 127.0.0.1) or the
    address of a running Dask scheduler ("tcp://host:port"). Draws never depend on the scheduler
    or ``chunk_size``; results are bit-identical with process noise and agree to the integration
    tolerance without (see the module notes). Yearly states of every member are kept only with
    ``keep_trajectories``.
    """
    uncertainty = _options(scenario, members, seed, chunk_size)
    check_scheduler(scheduler)
    if diagram is None:
        diagram = diagram_for(scenario, progress=scaled(progress, 0.0, 0.1))
    chosen = list(scenario.schedules if schedules is None else schedules)
    horizon = scenario.simulation.horizon
    plans = tuple(_plan(scenario, diagram, s) for s in chosen)
    noise = np.array([uncertainty.process_noise.get(name, 0.0) for name in scenario.spec.variables])
    noisy = bool(np.any(noise > 0))
    per_year = float(uncertainty.steps_per_year or NOISY_STEPS_PER_YEAR) if noisy else math.nan
    sample_times = np.unique(np.append(np.arange(0.0, math.floor(horizon) + 1.0), horizon))
    settings = _Settings(
        horizon=horizon,
        years=max(1, math.ceil(horizon)),
        sample_times=sample_times,
        noise=noise,
        steps_per_year=per_year,
        keep_trajectories=keep_trajectories,
        fan_members=FAN_MEMBERS,
    )
    total = uncertainty.members
    chunk_size = _memory_plan(scenario, total, len(plans), len(sample_times), chunk_size, source)
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
    for dx = f(x, u) dt + noise dW integrated by Euler-Maruyama with a fixed ``step``, through
    the engine (an absorbing watch; the crossing time is located within the step).

    Random numbers depend only on (seed, member), as in the ensemble.
    """
    x0 = np.asarray(x0, dtype=float)
    noise = np.asarray(noise, dtype=float).reshape(x0.size)
    noisy = np.nonzero(noise > 0)[0]
    draw = _noise_draw(seed, 0, 0, members, noisy.size)
    problem = Run(
        system,
        np.repeat(x0[:, None], members, axis=1),
        held(u),
        float(max_time),
        noise=ProcessNoise(noise, draw, 1.0 / step),
    )
    rising = level >= x0[variable]
    regime = "highest" if rising else "lowest"
    watch = Watch(variable, float(level), regime, absorbing=True, by_year=False)
    run = integrate(
        problem,
        watch=watch,
        limits=system_limits(system),
        progress=lambda fraction, message: progress(fraction, "first passages"),
    )
    reached = np.isfinite(run.watch.entered_at)
    times = np.where(reached, run.t_end, np.nan)
    progress(1.0, "done")
    return FirstPassage(times, step)
