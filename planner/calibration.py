"""Fit a scenario's model to a monitoring record: parameters, thresholds and their intervals.

Method (trajectory matching, nonlinear least squares; e.g. Bates & Watts 1988, Nonlinear
Regression Analysis and Its Applications, ch. 2):

- The record is first read as the model reads it (:func:`planner.monitoring.model_record`):
  each column in the model's unit (TP in ug/L through the lake's mean depth, loads in t/yr
  through its area, with pint) and dated samples (or sub-annual decimal years whose file asks
  for it) reduced to yearly means (annual or growing-season), each dated by its year; the fit's
  summary states both once.
- The recorded yearly loads become a piecewise-linear control path (linear interpolation between
  the rows that have a load, held before the first and after the last); the model is integrated
  under it by the one engine (:func:`planner.integrate.integrate`, sampled exactly at the
  record's times) from a fitted initial state at the first time of the record. Each observed
  value is compared with the model state at its time (an annual value is compared with the
  state at its time stamp).
- Fitted quantities: the chosen parameters and the initial state. Parameters with a
  non-negative physical lower bound (rates, half-saturation levels, steepness) are fitted as
  logarithms, which keeps them positive and makes their intervals multiplicative; the initial
  state of a model whose state is an amount is fitted as a logarithm too. Others are fitted as is.
- Residuals: observed minus modelled, optionally of the logarithms (``log=True``, for
  multiplicative measurement error); without logarithms each variable's residuals are divided by
  the root mean square of its observations so that variables in different units weigh alike.
  scipy.optimize.least_squares (trust region reflective, bounds) minimises their sum of squares.
- The Jacobian of the residuals comes from the forward sensitivity equations
  dS/dt = J S + df/dtheta, S(0) = [0 | I], integrated alongside the state in the same run (one
  integration per iteration, and exact to the integration tolerance).
- Covariance s^2 (J^T J)^-1 at the optimum, s^2 = residual sum of squares / (n - p); intervals
  z +- t(0.975, n - p) se on the fitting scale (Student's t), mapped back (so intervals of
  log-fitted parameters are asymmetric and positive).
- Thresholds: the recovery and collapse folds of the fitted model from
  :func:`planner.equilibria.diagram_for`; their covariance intervals by the delta method with the
  fold's sensitivity du/dtheta = -(w . df/dtheta) / (w . df/du), w the left null vector of the
  Jacobian at the fold (implicit function theorem on f(x, u, theta) = 0 along the fold curve).
- Residual bootstrap (Efron & Tibshirani 1993, An Introduction to the Bootstrap, ch. 9):
  centred residuals of each variable, inflated by sqrt(n / (n - p)), are resampled with
  replacement and added to the fitted values; percentile intervals. All replicates are refitted
  together, as the members of one batch: Levenberg-Marquardt where each iteration integrates the
  sensitivity system of every replicate still running in one batched run of the engine and
  solves each replicate's small damped normal equations (same fitting scale, bounds, residuals
  and tolerance as the fit). Each replicate's thresholds follow the fitted model's folds by
  Newton on the fold conditions, all replicates at once, instead of a diagram per replicate
  (a full diagram per replicate only where the fitted diagram is not one bistable window).
  Replicates without a recovery threshold (no hysteresis window on their equilibrium curve) are
  counted and reported, never dropped silently.
- Hand-off: the fitted scenario (``planner fit --out``) carries the fit's uncertainty as the
  priors of the fitted parameters, one ``[uncertainty.joint]`` multivariate normal on the
  fitting scale, centred at the estimates, with the covariance of the bootstrap replicates (so
  an ensemble on it keeps their correlation and its median member is the fitted lake); the base
  scenario's priors on those parameters are dropped, the others kept.
- A fit the record does not pin down (flat directions of J, intervals spanning orders of
  magnitude, an estimate at a bound of the search) opens its summary with that warning; its
  verdict on the lake is reported as unreliable.

Residuals are treated as independent; yearly records with serially correlated errors give
intervals that are too narrow.
"""

from __future__ import annotations

import contextlib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from functools import cache
from typing import TYPE_CHECKING, Any

import numpy as np
import sympy
from scipy.optimize import least_squares
from scipy.special import stdtrit

from planner.equilibria import EXTEND, NEGATIVE_MARGIN, Diagram, Fold, diagram_for
from planner.errors import InputError, Problem
from planner.integrate import Limits, Save, Status, Tolerance, Trajectory, integrate, trajectory
from planner.integrate import Problem as IntegrationProblem
from planner.metrics import limits_for
from planner.models import ModelSpec, System, compile_model
from planner.monitoring import ModelColumn, Record, RecordReading, model_record
from planner.progress import Progress, scaled, silent
from planner.report import CAUTION, NOT_REACHABLE
from planner.scenario import Scenario, scenario_from_data
from planner.schedules import ControlPath
from planner.views import ResultViews

if TYPE_CHECKING:  # views for notebooks; pandas and plotly are imported when they are asked for
    pass

CONFIDENCE = 0.95
DEFAULT_BOOTSTRAP = 200
MIN_RESIDUAL_DOF = 3  # observations beyond the fitted quantities (common practice, no source)
FIT_RTOL = 1e-7  # integration tolerance inside the fit (well below any measurement error)
FIT_ATOL_SHARE = 1e-2  # absolute tolerance: this share of FIT_RTOL times each variable's scale
STIFF_RATIO = 300.0  # fastest rate x record spacing above which refits take the stiff stepper
TRAJECTORY_SAMPLES_PER_YEAR = 10  # samples of the fitted trajectory between solver steps (plots)
PARAMETER_SPAN = 1e3  # a fitted positive parameter stays within base / 1e3 .. base * 1e3
STATE_FLOOR = 1e-6  # smallest starting guess for a log-fitted initial state
MAX_EVALUATIONS = 200
FIT_TOLERANCE = 1e-8  # least_squares ftol, xtol and gtol of the fit
BOOTSTRAP_TOLERANCE = 1e-5  # ... of each bootstrap refit (its spread dwarfs this)
DAMPING_START = 1e-3  # Levenberg-Marquardt damping of the first trial step of each refit
DAMPING_FACTOR = 10.0  # damping divided by this after an accepted step, multiplied after a rejected
DAMPING_MAX = 1e12  # a refit whose step is rejected even this damped has stalled
TRIAL_STEP = 1.0  # largest change of a fitted quantity per trial step (a factor e for logarithms)
FOLD_ITERATIONS = 30  # Newton iterations tracking a fold of the fitted model to a replicate
FOLD_RESIDUAL = 1e-10  # largest |f| (relative to 1 + |x|) at a tracked fold
FOLD_STEP = 1e-12  # relative Newton step below which a tracked fold has converged
FOLD_STAGES = 8  # stages from the fitted parameters to a replicate's when the direct Newton fails
EQUILIBRIUM_SEEDS = 48  # Newton starts along the fitted curves when counting stable equilibria
EQUILIBRIUM_ITERATIONS = 40  # Newton iterations of that count (damped, from afar)
FAILED_RESIDUAL = 1e6  # residual returned where the model cannot be simulated (step rejected)
SINGULAR = 1e-10  # smallest / largest singular value of J below which J^T J is singular
FLAT_DIRECTION = 1e-4  # ... below which a direction counts as flat (cond(J^T J) > 1e8)
WIDE_INTERVAL_RATIO = 100.0  # hi / lo of a positive parameter's interval: two orders of magnitude
STRONG_CORRELATION = 0.99
MIN_BOOTSTRAP_SUCCESS = 0.8  # below this share of successful refits the bootstrap is flagged
DEFAULT_CONTROL_COLUMN = "load"
YEAR_UNITS = frozenset({"", "a", "y", "yr", "yrs", "year", "years"})
HELD_BY_DEFAULT: dict[str, tuple[str, ...]] = {
    # The steepness of recycling is rarely pinned down by a few decades of yearly data (it shows
    # only where the lake crosses the steep part of the recycling curve): held unless asked for.
    "recycling": ("q",),
    "recycling-sediment": ("q",),
    # Only the product of release rate and anoxic factor shows in the data: the factor is held.
    "internal-load": ("q", "AF"),
}


# ---------------------------------------------------------------------------------------------
# The record matched to a scenario


@dataclass(frozen=True, eq=False)
class Observations:
    """A record matched to a scenario's model: the load path and the observed values.

    ``record`` is the record as the model reads it: its load and observed columns in the
    model's units, reduced to yearly means where the file asks for them
    (:func:`planner.monitoring.model_record`); ``reading`` says how (conversions, means, gaps).
    Times are years since ``start`` (the record's first time). ``variable_index`` gives the model
    variable of each observation, ``time_index`` its place in ``times``; ``rows`` its file row
    (the first row of its year for a yearly mean).
    """

    record: Record
    control_column: str
    columns: tuple[tuple[str, str], ...]  # (model variable, record column)
    start: float
    path: ControlPath
    times: np.ndarray
    values: np.ndarray
    variable_index: np.ndarray
    time_index: np.ndarray
    rows: np.ndarray
    reading: RecordReading = field(default_factory=RecordReading)

    @property
    def count(self) -> int:
        return int(self.values.size)

    @property
    def horizon(self) -> float:
        return float(self.record.times[-1] - self.start)

    def column_of(self, variable: str) -> str:
        return dict(self.columns)[variable]


MAX_FIT_ROWS = 5000
"""Most record rows a fit takes (about 400 years of monthly means): the bootstrap integrates to
every row's time in every refit, so a daily record of decades would take minutes; refused
before any work with the advice to aggregate."""


def observations_for(
    record: Record,
    scenario: Scenario,
    *,
    control_column: str | None = None,
    states: Mapping[str, str] | None = None,
    season: str | None = None,
) -> Observations:
    """Match ``record`` to ``scenario``: which column is the load and which columns observe
    which model variables, read in the model's units.

    Defaults: the load column is named like the control parameter (``L``) if the record has one,
    else ``load``; each model variable is observed by the column of the same name; when no
    column is named after a variable and exactly one data column is left, it observes the target
    variable. The load column may have gaps (interpolated linearly, see the module docstring).

    Units: the load column is converted to the scenario's control unit and each observed column
    to the scenario's unit of its variable (``[state_units]``), through pint and, across
    dimensions (TP in ug/L for an areal store, loads in t/yr for an areal load), the scenario's
    ``[lake]`` block; times: dated records, and records in decimal years with several rows a
    year whose file has a season line, become yearly means (the load over each calendar year,
    the observations over ``season``, default the file's line, else "annual"). See
    :mod:`planner.monitoring`; ``Observations.reading`` says what was done.
    """
    source = record.source
    variables = scenario.spec.variables
    if not record.dated and record.time_unit.strip().lower() not in YEAR_UNITS:
        raise InputError(
            [
                Problem(
                    source,
                    f"column {record.time_name}",
                    f"times must be in years (decimal years) or ISO dates, not "
                    f"{record.time_unit!r}",
                )
            ]
        )
    if control_column is None:
        parameter = scenario.control.parameter
        control_column = parameter if record.has(parameter) else DEFAULT_CONTROL_COLUMN
    record.find(control_column, option="--control-column")
    mapping = _state_columns(record, scenario, control_column, states)
    wanted = [
        ModelColumn(
            control_column,
            scenario.control.unit,
            f"the load {scenario.control.parameter}",
            option="--control-column",
            whole_year=True,
        ),
        *(
            ModelColumn(column, scenario.state_units.get(variable, ""), variable, option="--state")
            for variable, column in mapping
        ),
    ]
    record, reading, designators = model_record(record, wanted, lake=scenario.lake, season=season)
    control_column = designators[0]
    mapping = [
        (variable, name) for (variable, _), name in zip(mapping, designators[1:], strict=True)
    ]
    if len(record.times) > MAX_FIT_ROWS:
        reason = (
            f"{len(record.times)} rows; a fit takes at most {MAX_FIT_ROWS} (each row is an "
            "output of every refit): aggregate the record to yearly means first, e.g. with the "
            "line '# season: annual' in the file"
        )
        raise InputError([Problem(source, "(rows)", reason)])
    loads = record.column(control_column)
    known = np.isfinite(loads)
    if np.count_nonzero(known) < 2:
        raise InputError(
            [
                Problem(
                    source,
                    f"column {control_column}",
                    "needs a load in at least two rows to drive the model",
                )
            ]
        )
    start = float(record.times[0])
    load_times = record.times[known] - start
    load_values = loads[known]
    if load_times[0] > 0:  # held back to the start of the record
        load_times = np.concatenate([[0.0], load_times])
        load_values = np.concatenate([[load_values[0]], load_values])
    path = ControlPath(load_times, load_values)

    times = record.times - start
    values, variable_index, time_index, rows = [], [], [], []
    for variable, column in mapping:
        data = record.column(column)
        present = np.nonzero(np.isfinite(data))[0]
        values.append(data[present])
        variable_index.append(np.full(present.size, variables.index(variable)))
        time_index.append(present)
        rows.append(record.rows[present])
    return Observations(
        record=record,
        control_column=control_column,
        columns=tuple(mapping),
        start=start,
        path=path,
        times=times,
        values=np.concatenate(values),
        variable_index=np.concatenate(variable_index).astype(int),
        time_index=np.concatenate(time_index).astype(int),
        rows=np.concatenate(rows).astype(int),
        reading=reading,
    )


def _state_columns(
    record: Record, scenario: Scenario, control_column: str, states: Mapping[str, str] | None
) -> list[tuple[str, str]]:
    variables = scenario.spec.variables
    source = record.source
    if states:
        problems = [
            Problem(
                "--state",
                variable,
                f"not a model variable (variables: {', '.join(variables)})",
            )
            for variable in states
            if variable not in variables
        ]
        problems += [
            Problem(
                source,
                f"column {column}",
                f"not found (columns: {', '.join(record.names)}); check --state {variable}=COLUMN",
            )
            for variable, column in states.items()
            if not record.has(column)
        ]
        if problems:
            raise InputError(problems)
        mapping = [(v, states[v]) for v in variables if v in states]
    else:
        load = record.find(control_column) if record.has(control_column) else -1
        mapping = [(v, v) for v in variables if record.has(v) and record.find(v) != load]
        others = [n for i, n in enumerate(record.names) if i != load]
        if not mapping and len(others) == 1:
            mapping = [(scenario.target.variable, others[0])]
    if not mapping:
        raise InputError(
            [
                Problem(
                    source,
                    "(columns)",
                    f"no column observes a model variable ({', '.join(variables)}); "
                    f"map one with --state {scenario.target.variable}=COLUMN",
                )
            ]
        )
    load = record.find(control_column) if record.has(control_column) else -1
    for _, column in mapping:
        if record.find(column) == load:  # the same column, however its header is spelled
            raise InputError(
                [Problem(source, f"column {column}", "is the load column; it cannot be observed")]
            )
    return mapping


# ---------------------------------------------------------------------------------------------
# Sensitivity equations


def _sensitivity_name(variable: str, quantity: str) -> str:
    return f"d_{variable}__d_{quantity}"


@cache
def sensitivity_spec(spec: ModelSpec, fitted: tuple[str, ...]) -> ModelSpec:
    """The model with its forward sensitivities: state x and S = dx/d(fitted parameters, x0).

    Variables: the model's, then S row by row (S[i, j] = d x_i / d quantity_j, the quantities
    being ``fitted`` then the initial state). dS/dt = J S + [df/dtheta | 0]. Built once per
    model and choice of parameters (cached); compiled by the model library like any model.
    """
    state = [sympy.Symbol(v) for v in spec.variables]
    n, k = len(state), len(fitted)
    quantities = [*fitted, *(f"{v}_initial" for v in spec.variables)]
    sens = [[sympy.Symbol(_sensitivity_name(v, q)) for q in quantities] for v in spec.variables]
    jacobian = [[sympy.diff(f, x) for x in state] for f in spec.equations]
    equations = list(spec.equations)
    for i in range(n):
        for j in range(k + n):
            rate = sum((jacobian[i][m] * sens[m][j] for m in range(n)), sympy.Integer(0))
            if j < k:
                rate += sympy.diff(spec.equations[i], sympy.Symbol(fitted[j]))
            equations.append(rate)
    return ModelSpec(
        kind=f"{spec.kind} with sensitivities",
        variables=(*spec.variables, *(str(s) for row in sens for s in row)),
        parameters=spec.parameters,
        equations=tuple(equations),
        nonnegative_state=False,  # sensitivities take either sign
        source=spec.source,
    )


@dataclass(frozen=True)
class _Layout:
    """How the fitted vector z maps to parameters and initial state, with bounds.

    z is (p,) for one fit or (p, members) for a batch of refits (one column per member).
    """

    names: tuple[str, ...]  # fitted parameters
    variables: tuple[str, ...]
    log_parameter: np.ndarray  # (k,) bool
    log_state: bool
    lower: np.ndarray
    upper: np.ndarray

    @property
    def k(self) -> int:
        return len(self.names)

    @property
    def labels(self) -> tuple[str, ...]:
        return (*self.names, *(f"initial {v}" for v in self.variables))

    def natural(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Parameters (k, ...) and initial state (n, ...) from z (p, ...)."""
        k = self.k
        logs = self.log_parameter.reshape((k,) + (1,) * (z.ndim - 1))
        with np.errstate(over="ignore"):  # exp of a parameter fitted as is, then discarded
            theta = np.where(logs, np.exp(z[:k]), z[:k])
        x0 = np.exp(z[k:]) if self.log_state else z[k:].copy()
        return theta, x0

    def chain(self, z: np.ndarray) -> np.ndarray:
        """d(natural)/dz for each component (the log-scale factor, or 1); shaped like z."""
        theta, x0 = self.natural(z)
        logs = self.log_parameter.reshape((self.k,) + (1,) * (z.ndim - 1))
        factor_theta = np.where(logs, theta, 1.0)
        factor_x0 = x0 if self.log_state else np.ones_like(x0)
        return np.concatenate([factor_theta, factor_x0])

    def log_scale(self) -> np.ndarray:
        return np.concatenate([self.log_parameter, np.full(len(self.variables), self.log_state)])


class _Simulator:
    """Predictions of the observed values and their derivatives in z: one run of the engine
    (:func:`planner.integrate.integrate`) of the model with its sensitivities, sampled exactly at
    the record's times, for one z or for a batch of them (one member per column).

    Fitted parameters are passed to the engine as arrays over members even for a single fit: the
    engine then compiles the sensitivity system once for every z (a scalar parameter would be
    folded into freshly generated code at each new value).
    """

    def __init__(self, scenario: Scenario, observations: Observations, layout: _Layout):
        self.scenario = scenario
        self.observations = observations
        self.layout = layout
        spec = scenario.spec
        self.n = len(spec.variables)
        self.model = compile_model(sensitivity_spec(spec, layout.names), scenario.control.parameter)
        self.sample_times = tuple(float(t) for t in observations.times)
        self.tolerance = Tolerance(rtol=FIT_RTOL, atol=FIT_RTOL * FIT_ATOL_SHARE)
        # Sensitivities take either sign: only the magnitude limit of the scenario applies.
        self.limits = Limits(scenario.simulation.state_limit)
        self.solver = _solver_for(scenario, observations)
        self._last: tuple[bytes, Any] | None = None

    def parameters(self, theta: np.ndarray) -> dict[str, Any]:
        """Every model parameter: the scenario's, with the fitted ones from theta ((k,) numbers
        or (k, members) arrays)."""
        values: dict[str, Any] = dict(self.scenario.model.parameters)
        for name, value in zip(self.layout.names, theta, strict=True):
            values[name] = value if np.ndim(value) else float(value)
        return values

    def run(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray] | None:
        """(predicted values (m,), d predicted / dz (m, p)), or None if the model fails."""
        key = np.asarray(z, dtype=float).tobytes()
        if self._last is not None and self._last[0] == key:
            return self._last[1]
        predicted, derivative, ok = self.run_batch(np.asarray(z, dtype=float)[:, None])
        result = (predicted[:, 0], derivative[:, :, 0]) if ok[0] else None
        self._last = (key, result)
        return result

    def run_batch(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """For z (p, members): predicted values (m, members), their derivatives in z
        (m, p, members) and which members ran to the end of the record with finite values."""
        layout, obs, n = self.layout, self.observations, self.n
        members = z.shape[1]
        theta, x0 = layout.natural(z)
        p = layout.k + n
        start = np.zeros((n + n * p, members))
        start[:n] = x0
        for i in range(n):
            start[n + i * p + layout.k + i] = 1.0
        system = self.model.bind(self.parameters(theta))
        solution = integrate(
            IntegrationProblem(system, start, obs.path, obs.horizon),
            save=Save(at=self.sample_times),
            limits=self.limits,
            tolerance=self.tolerance,
            solver=self.solver,
        )
        at = solution.samples  # (times, n + n p, members)
        predicted = at[obs.time_index, obs.variable_index]
        sens = at[:, n:].reshape(at.shape[0], n, p, members)
        derivative = sens[obs.time_index, obs.variable_index] * layout.chain(z)[None]
        with np.errstate(invalid="ignore"):
            ok = solution.has(Status.FINISHED) & np.all(np.isfinite(at), axis=(0, 1))
        return predicted, derivative, ok


def _solver_for(scenario: Scenario, observations: Observations) -> str:
    """The engine's batched stepper for the record: Dormand-Prince, or Rosenbrock when the model
    is stiff on the record's time scale (its fastest rate, at the observed states under the
    recorded loads, times the shortest spacing of the record's times exceeds STIFF_RATIO)."""
    system = scenario.system()
    times = observations.times[observations.time_index]
    states = np.repeat(_start_state(scenario, observations)[:, None], times.size, axis=1)
    states[observations.variable_index, np.arange(times.size)] = observations.values
    jacobians = np.moveaxis(system.jac(states, observations.path(times)), -1, 0)
    finite = np.isfinite(jacobians).all(axis=(1, 2))
    if not finite.any():
        return "dopri5"
    fastest = float(np.max(np.abs(np.linalg.eigvals(jacobians[finite]))))
    spacing = np.diff(np.unique(observations.times))
    shortest = float(np.min(spacing)) if spacing.size else observations.horizon
    return "rosenbrock23" if fastest * shortest > STIFF_RATIO else "dopri5"


# ---------------------------------------------------------------------------------------------
# Results


@dataclass(frozen=True)
class Estimate:
    """A fitted quantity: value, covariance interval (Student t on the fitting scale, mapped
    back; None where the data do not determine it) and bootstrap percentile interval."""

    name: str
    value: float
    interval: tuple[float, float] | None
    bootstrap_interval: tuple[float, float] | None
    standard_error: float | None  # on the fitting scale (of the logarithm when log_scale)
    log_scale: bool

    @property
    def best(self) -> tuple[tuple[float, float] | None, str]:
        """The interval to show first and how it was made: bootstrap if run, else covariance."""
        if self.bootstrap_interval is not None:
            return self.bootstrap_interval, "bootstrap percentile"
        return self.interval, "covariance (t)"


@dataclass(frozen=True)
class ThresholdEstimate:
    """The recovery or collapse threshold of the fitted model (control units) with intervals.

    ``interval`` by the delta method, ``bootstrap_interval`` from the replicates that have this
    threshold within reach of the load; ``bootstrap_without`` counts the replicates that have
    none (no window of that side), ``bootstrap_unreachable`` those whose threshold lies outside
    what the load can do (below the lowest achievable load, outside the control range), as
    :func:`planner.equilibria.compute_diagram` judges the fitted lake's own. Neither interval
    ever reaches past the lowest achievable load or the range: such values are not loads.
    """

    kind: str
    value: float | None
    interval: tuple[float, float] | None
    bootstrap_interval: tuple[float, float] | None
    bootstrap_values: np.ndarray = field(repr=False)
    bootstrap_without: int = 0
    bootstrap_unreachable: int = 0  # replicates whose threshold the load cannot reach
    unreachable: str | None = None  # why the fitted lake's threshold is not reachable

    @property
    def best(self) -> tuple[tuple[float, float] | None, str]:
        if self.bootstrap_interval is not None:
            return self.bootstrap_interval, "bootstrap percentile"
        return self.interval, "delta method (t)"


@dataclass(frozen=True)
class BootstrapSummary:
    """What the residual bootstrap did: replicates asked for, refitted, failed, and how many of
    the refitted models were reversible, hysteretic or irreversible."""

    replicates: int
    succeeded: int
    failed: int
    classifications: dict[str, int]
    samples: np.ndarray = field(repr=False)  # (succeeded, p) natural-scale fitted quantities


@dataclass(frozen=True, eq=False)
class Fit(ResultViews):
    """A model fitted to a record. Times in ``trajectory`` are years since ``observations.start``.

    ``residuals`` are on the fitting scale (log, or divided by each variable's scale ``weights``);
    ``sigma`` is their standard deviation s; ``covariance`` is s^2 (J^T J)^-1 on the fitting scale
    (None when J^T J is singular); ``singular_values`` those of J. ``fitted_scenario`` carries the
    fit's uncertainty as its ``[uncertainty.joint]`` prior (see :func:`_carry_uncertainty`).
    ``identifiable`` is False when the record does not pin the fitted quantities down
    (``unidentified`` says why, also among ``warnings``): the lake's verdict is then unreliable.
    """

    scenario: Scenario
    fitted_scenario: Scenario
    observations: Observations
    fitted: tuple[str, ...]
    log: bool
    parameters: tuple[Estimate, ...]
    initial_state: tuple[Estimate, ...]
    end_state: np.ndarray
    end_control: float
    thresholds: dict[str, ThresholdEstimate]
    diagram: Diagram
    predictions: np.ndarray
    residuals: np.ndarray
    weights: np.ndarray
    sigma: float
    dof: int
    covariance: np.ndarray | None
    singular_values: np.ndarray
    trajectory: Trajectory
    bootstrap: BootstrapSummary | None
    warnings: tuple[str, ...]
    identifiable: bool
    converged: bool
    message: str
    unidentified: tuple[str, ...] = ()  # the warnings that make the fit unidentifiable
    priors_note: str = ""  # where the fitted scenario's priors came from (also in its description)

    @property
    def classification(self) -> str:
        return self.diagram.classification

    def parameter(self, name: str) -> Estimate:
        for estimate in self.parameters:
            if estimate.name == name:
                return estimate
        raise KeyError(name)

    _views = ("fit_frame", "fit_figure")

    def _view_title(self) -> str:
        return f"Fit: {self.scenario.name}"


# ---------------------------------------------------------------------------------------------
# Fitting


def default_fitted(scenario: Scenario) -> tuple[str, ...]:
    """Parameters fitted when none are named: every non-control parameter except those in
    HELD_BY_DEFAULT for the model kind (the recycling steepness q)."""
    held = HELD_BY_DEFAULT.get(scenario.spec.kind, ())
    control = scenario.control.parameter
    return tuple(p for p in scenario.spec.parameter_names if p != control and p not in held)


def _check_fitted(scenario: Scenario, fit: Sequence[str] | None) -> tuple[str, ...]:
    if fit is None:
        names = default_fitted(scenario)
    else:
        names = tuple(dict.fromkeys(name.strip() for name in fit))
    parameters = scenario.spec.parameter_names
    problems = []
    for name in names:
        if name == scenario.control.parameter:
            problems.append(
                Problem("--fit", name, "is the control: the record's load column gives it")
            )
        elif name not in parameters:
            problems.append(
                Problem("--fit", name, f"not a model parameter ({', '.join(parameters)})")
            )
    if not names:
        problems.append(Problem("--fit", "(list)", "name at least one parameter to fit"))
    if problems:
        raise InputError(problems)
    return names


def _layout(scenario: Scenario, names: tuple[str, ...], start_state: np.ndarray):
    spec = scenario.spec
    values = scenario.model.parameters
    logs, lower, upper, z0 = [], [], [], []
    for name in names:
        info = spec.parameter_info(name)
        value = float(values[name])
        positive = info.lower is not None and info.lower >= 0 and value > 0
        logs.append(positive)
        if positive:
            floor = np.log(info.lower) if info.lower > 0 else -np.inf
            lower.append(max(floor, np.log(value / PARAMETER_SPAN)))
            upper.append(np.log(value * PARAMETER_SPAN))
            z0.append(np.log(value))
        else:
            lower.append(-np.inf if info.lower is None else info.lower)
            upper.append(np.inf)
            z0.append(value)
    log_state = spec.nonnegative_state
    if log_state:
        guess = np.maximum(start_state, STATE_FLOOR * max(float(np.max(start_state)), 1.0))
        z_state = np.log(guess)
        lower += list(z_state - np.log(PARAMETER_SPAN))
        upper += list(z_state + np.log(PARAMETER_SPAN))
    else:
        z_state = np.asarray(start_state, dtype=float)
        lower += [-np.inf] * z_state.size
        upper += [np.inf] * z_state.size
    layout = _Layout(
        names=names,
        variables=spec.variables,
        log_parameter=np.array(logs, dtype=bool),
        log_state=log_state,
        lower=np.array(lower, dtype=float),
        upper=np.array(upper, dtype=float),
    )
    z = np.clip(np.concatenate([z0, z_state]), layout.lower, layout.upper)
    return layout, z


def _start_state(scenario: Scenario, observations: Observations) -> np.ndarray:
    """Initial-state guess: each observed variable's first observation (the scenario's current
    state for unobserved variables)."""
    guess = scenario.initial_state.copy()
    for i in range(guess.size):
        mine = observations.variable_index == i
        if np.any(mine):
            first = np.argmin(np.where(mine, observations.time_index, np.iinfo(int).max))
            guess[i] = observations.values[first]
    return guess


def _on_fitting_scale(
    predicted: np.ndarray, derivative: np.ndarray, weights: np.ndarray, log: bool
) -> tuple[np.ndarray, np.ndarray, Any]:
    """Predicted values (m, ...) and their derivatives in z (m, p, ...) on the fitting scale:
    logarithms, or divided by each observation's weight; with whether each member (column) is
    usable (logarithms need positive values). One fit or a batch of members alike."""
    if log:
        ok = np.all(predicted > 0, axis=0)
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.log(predicted), derivative / predicted[:, None], ok
    shape = (-1,) + (1,) * (predicted.ndim - 1)
    ok = np.ones(predicted.shape[1:], dtype=bool)
    return predicted / weights.reshape(shape), derivative / weights.reshape(shape)[:, None], ok


class _Objective:
    """Residuals and their Jacobian for one set of observed values (on the fitting scale)."""

    def __init__(self, simulator: _Simulator, observed: np.ndarray, weights: np.ndarray, log: bool):
        self.simulator = simulator
        self.log = log
        self.weights = weights
        self.target = np.log(observed) if log else observed / weights

    def _transform(self, predicted: np.ndarray, derivative: np.ndarray):
        values, derivative, ok = _on_fitting_scale(predicted, derivative, self.weights, self.log)
        return (values, derivative) if ok else None

    def residuals(self, z: np.ndarray) -> np.ndarray:
        result = self.simulator.run(z)
        out = None if result is None else self._transform(*result)
        if out is None:
            return np.full(self.target.size, FAILED_RESIDUAL)
        return out[0] - self.target

    def jacobian(self, z: np.ndarray) -> np.ndarray:
        result = self.simulator.run(z)
        out = None if result is None else self._transform(*result)
        if out is None:  # only reached if the start itself fails; least_squares then stops
            return np.zeros((self.target.size, z.size))
        return out[1]

    def solve(self, z0: np.ndarray, layout: _Layout, tolerance: float = FIT_TOLERANCE):
        return least_squares(
            self.residuals,
            z0,
            jac=self.jacobian,
            bounds=(layout.lower, layout.upper),
            method="trf",
            x_scale="jac",
            ftol=tolerance,
            xtol=tolerance,
            gtol=tolerance,
            max_nfev=MAX_EVALUATIONS,
        )


def fit_record(
    scenario: Scenario,
    observations: Observations,
    *,
    fit: Sequence[str] | None = None,
    log: bool = False,
    bootstrap: int | None = DEFAULT_BOOTSTRAP,
    seed: int = 0,
    progress: Progress | None = None,
) -> Fit:
    """Fit the parameters ``fit`` (default :func:`default_fitted`) and the initial state of
    ``scenario``'s model to ``observations``; see the module docstring for the method.

    ``bootstrap`` replicates (0: none; None: DEFAULT_BOOTSTRAP) refit resampled data and
    recompute the diagram, for percentile intervals of parameters and thresholds; ``seed`` fixes
    their random draws.
    """
    report = progress or silent
    names = _check_fitted(scenario, fit)
    bootstrap = DEFAULT_BOOTSTRAP if bootstrap is None else int(bootstrap)
    if bootstrap < 0:
        raise InputError([Problem("--bootstrap", "replicates", "must be 0 or more")])
    source = observations.record.source
    if log and np.any(observations.values <= 0):
        where = int(np.nonzero(observations.values <= 0)[0][0])
        variable = scenario.spec.variables[observations.variable_index[where]]
        raise InputError(
            [
                Problem(
                    source,
                    f"row {observations.rows[where]}, column {observations.column_of(variable)}",
                    "zero cannot be log-transformed; fit without --log or remove the value",
                )
            ]
        )
    n_fitted = len(names) + len(scenario.spec.variables)
    needed = n_fitted + MIN_RESIDUAL_DOF
    if observations.count < needed:
        columns = ", ".join(column for _, column in observations.columns)
        raise InputError(
            [
                Problem(
                    source,
                    f"column {columns}",
                    f"too few points for the fit: {observations.count} observed values for "
                    f"{n_fitted} fitted quantities ({', '.join(names)} and the initial state); "
                    f"at least {needed} are needed (or fit fewer parameters with --fit)",
                )
            ]
        )

    report(0.0, "fitting the model to the record")
    layout, z0 = _layout(scenario, names, _start_state(scenario, observations))
    simulator = _Simulator(scenario, observations, layout)
    weights = _weights(observations, log)
    objective = _Objective(simulator, observations.values, weights, log)
    if simulator.run(z0) is None or objective._transform(*simulator.run(z0)) is None:
        raise InputError(
            [
                Problem(
                    source,
                    "(fit)",
                    "the base scenario's parameters cannot be simulated over the record; "
                    "start from parameters closer to the lake's",
                )
            ]
        )
    solution = objective.solve(z0, layout)
    z = solution.x
    residuals = objective.residuals(z)
    jacobian = objective.jacobian(z)
    m, p = residuals.size, z.size
    dof = m - p
    sigma = float(np.sqrt(np.sum(residuals**2) / dof))
    singular = np.linalg.svd(jacobian, compute_uv=False)
    covariance = _covariance(jacobian, sigma)
    t_value = float(stdtrit(dof, 0.5 + CONFIDENCE / 2))  # Student's t quantile
    report(0.15, "equilibria of the fitted model")

    theta, x0 = layout.natural(z)
    parameters = simulator.parameters(theta)
    run = _fitted_trajectory(scenario, observations, {n: parameters[n] for n in names}, x0)
    end_state = run.final_state
    end_control = float(observations.path(observations.horizon))
    warnings: list[str] = []
    fitted_scenario = _fitted_scenario(
        scenario, observations, names, parameters, end_state, end_control, warnings
    )
    diagram = diagram_for(fitted_scenario)
    gradients = _threshold_gradients(diagram, simulator, z, layout)
    predictions = simulator.run(z)[0]

    boot = None
    boot_thresholds: dict[str, np.ndarray] = {}
    boot_without = {"recovery": 0, "collapse": 0}
    if bootstrap > 0:
        boot, boot_thresholds, boot_without = _bootstrap(
            objective,
            simulator,
            layout,
            z,
            residuals,
            diagram,
            fitted_scenario,
            bootstrap,
            seed,
            scaled(report, 0.2, 1.0),
        )

    estimates = _estimates(layout, z, covariance, t_value, boot)
    thresholds = {}
    low, high = fitted_scenario.control.range
    reach = {"recovery": (fitted_scenario.control.least, high), "collapse": (low, high)}
    for kind in ("recovery", "collapse"):
        value = getattr(diagram, f"{kind}_threshold")
        detail = getattr(diagram, kind)
        gradient = gradients.get(kind)
        interval = None
        if value is not None and gradient is not None and covariance is not None:
            spread = t_value * float(np.sqrt(max(gradient @ covariance @ gradient, 0.0)))
            interval = (max(value - spread, reach[kind][0]), min(value + spread, reach[kind][1]))
        samples = boot_thresholds.get(kind, np.empty(0))
        within = (samples >= reach[kind][0]) & (samples <= reach[kind][1])
        thresholds[kind] = ThresholdEstimate(
            kind=kind,
            value=value,
            interval=interval,
            bootstrap_interval=_percentiles(samples[within]),
            bootstrap_values=samples,
            bootstrap_without=boot_without[kind],
            bootstrap_unreachable=int(np.sum(~within)),
            unreachable=None if detail is None or detail.reachable else detail.reason,
        )

    unidentified = _identifiability_warnings(layout, jacobian, estimates)
    for estimate, low, high, value in zip(estimates, layout.lower, layout.upper, z, strict=True):
        if np.isfinite(low) and value - low < 1e-6 or np.isfinite(high) and high - value < 1e-6:
            unidentified.append(
                f"{estimate.name} ended at a bound of the search ({estimate.value:.4g})"
            )
    identifiable = not unidentified
    warnings = unidentified + _correlation_notes(layout, covariance) + warnings
    if not solution.success or solution.status <= 0:
        warnings.append(f"the least-squares search stopped early: {solution.message}")
    if boot is not None and boot.succeeded < MIN_BOOTSTRAP_SUCCESS * boot.replicates:
        warnings.append(
            f"only {boot.succeeded} of {boot.replicates} bootstrap refits succeeded; "
            "their intervals are unreliable"
        )
    for kind, threshold in thresholds.items():
        if boot is not None and threshold.bootstrap_without:
            warnings.append(
                f"{threshold.bootstrap_without} of {boot.succeeded} bootstrap replicates have no "
                f"{kind} threshold"
            )
    fitted_scenario, priors_note = _carry_uncertainty(
        fitted_scenario, observations, layout, z, boot, warnings
    )
    report(1.0, "done")
    k = layout.k
    return Fit(
        scenario=scenario,
        fitted_scenario=fitted_scenario,
        observations=observations,
        fitted=names,
        log=log,
        parameters=tuple(estimates[:k]),
        initial_state=tuple(estimates[k:]),
        end_state=end_state,
        end_control=end_control,
        thresholds=thresholds,
        diagram=diagram,
        predictions=predictions,
        residuals=residuals,
        weights=weights,
        sigma=sigma,
        dof=dof,
        covariance=covariance,
        singular_values=singular,
        trajectory=run,
        bootstrap=boot,
        warnings=tuple(warnings),
        identifiable=identifiable,
        converged=bool(solution.success),
        message=str(solution.message),
        unidentified=tuple(unidentified),
        priors_note=priors_note,
    )


def _weights(observations: Observations, log: bool) -> np.ndarray:
    """Scale of each observation's residual: 1 for logs, else the RMS of its variable's data."""
    if log:
        return np.ones_like(observations.values)
    weights = np.empty_like(observations.values)
    for i in np.unique(observations.variable_index):
        mine = observations.variable_index == i
        rms = float(np.sqrt(np.mean(observations.values[mine] ** 2)))
        weights[mine] = rms if rms > 0 else 1.0
    return weights


def _covariance(jacobian: np.ndarray, sigma: float) -> np.ndarray | None:
    """s^2 (J^T J)^-1 via the SVD of J; None when J^T J is numerically singular."""
    _, singular, vt = np.linalg.svd(jacobian, full_matrices=False)
    if singular.size == 0 or singular[-1] <= SINGULAR * singular[0]:
        return None
    return sigma**2 * (vt.T / singular**2) @ vt


def _natural_interval(low: float, high: float, log_scale: bool) -> tuple[float, float]:
    return (float(np.exp(low)), float(np.exp(high))) if log_scale else (float(low), float(high))


def _percentiles(samples: np.ndarray) -> tuple[float, float] | None:
    samples = samples[np.isfinite(samples)]
    if samples.size < 2:
        return None
    tail = 50 * (1 - CONFIDENCE)
    low, high = np.percentile(samples, [tail, 100 - tail])
    return float(low), float(high)


def _estimates(
    layout: _Layout,
    z: np.ndarray,
    covariance: np.ndarray | None,
    t_value: float,
    boot: BootstrapSummary | None,
) -> list[Estimate]:
    theta, x0 = layout.natural(z)
    natural = np.concatenate([theta, x0])
    log_scale = layout.log_scale()
    out = []
    for i, label in enumerate(layout.labels):
        error = None if covariance is None else float(np.sqrt(max(covariance[i, i], 0.0)))
        interval = (
            None
            if error is None
            else _natural_interval(z[i] - t_value * error, z[i] + t_value * error, log_scale[i])
        )
        samples = None if boot is None else boot.samples[:, i]
        out.append(
            Estimate(
                name=label,
                value=float(natural[i]),
                interval=interval,
                bootstrap_interval=None if samples is None else _percentiles(samples),
                standard_error=error,
                log_scale=bool(log_scale[i]),
            )
        )
    return out


def _identifiability_warnings(
    layout: _Layout, jacobian: np.ndarray, estimates: list[Estimate]
) -> list[str]:
    """Flat directions of J and intervals spanning orders of magnitude, in plain words."""
    warnings = []
    _, singular, vt = np.linalg.svd(jacobian, full_matrices=False)
    labels = [
        f"log {n}" if lg else n for n, lg in zip(layout.labels, layout.log_scale(), strict=True)
    ]
    if singular.size and singular[-1] <= FLAT_DIRECTION * singular[0]:
        direction = vt[-1]
        order = np.argsort(-np.abs(direction))
        terms = [f"{direction[i]:+.2f} {labels[i]}" for i in order if abs(direction[i]) >= 0.2]
        condition = np.inf if singular[-1] == 0 else (singular[0] / singular[-1]) ** 2
        warnings.append(
            f"not identifiable: the record barely constrains the combination {' '.join(terms)} "
            f"(condition number of J^T J {condition:.2g}); hold one of them (--fit) or add data"
        )
    for estimate in estimates:
        if estimate.interval is None:
            continue
        low, high = estimate.interval
        if estimate.log_scale and low > 0 and high / low > WIDE_INTERVAL_RATIO:
            warnings.append(
                f"{estimate.name}: the 95% interval {low:.3g} to {high:.3g} spans more than "
                f"{np.log10(WIDE_INTERVAL_RATIO):.0f} orders of magnitude"
            )
        elif (
            not estimate.log_scale
            and estimate.value != 0
            and (high - low) / abs(estimate.value) > WIDE_INTERVAL_RATIO
        ):
            warnings.append(
                f"{estimate.name}: the 95% interval is very wide ({low:.3g} to {high:.3g})"
            )
    return warnings


def _correlation_notes(layout: _Layout, covariance: np.ndarray | None) -> list[str]:
    """Pairs of fitted parameters whose estimates are almost perfectly correlated: the record
    pins down a combination of them better than each (common in trajectory fits; a note, not
    a failure)."""
    warnings: list[str] = []
    if covariance is not None:
        errors = np.sqrt(np.maximum(np.diag(covariance), 1e-300))
        correlation = covariance / np.outer(errors, errors)
        for i in range(layout.k):
            for j in range(i + 1, layout.k):
                if abs(correlation[i, j]) > STRONG_CORRELATION:
                    warnings.append(
                        f"{layout.names[i]} and {layout.names[j]} are strongly correlated "
                        f"({correlation[i, j]:+.3f}): the record constrains a combination of them"
                    )
    return warnings


def _threshold_gradients(
    diagram: Diagram, simulator: _Simulator, z: np.ndarray, layout: _Layout
) -> dict[str, np.ndarray]:
    """d(threshold)/dz for the recovery and collapse folds of the main window.

    At a fold f = 0 and J has a left null vector w; differentiating f(x, u, theta) = 0 along the
    fold and multiplying by w gives du/dtheta = -(w . df/dtheta) / (w . df/du). The parameter
    derivatives df/dtheta are the sensitivity right-hand side with S = 0.
    """
    out = {}
    system = diagram.system
    n, k = simulator.n, layout.k
    theta, _ = layout.natural(z)
    augmented = simulator.model.bind(simulator.parameters(theta))
    chain = layout.chain(z)
    for kind in ("recovery", "collapse"):
        value = getattr(diagram, f"{kind}_threshold")
        if value is None:
            continue
        folds = [f for f in diagram.folds if f.control == value]
        if not folds:
            continue
        x, u = folds[0].state, folds[0].control
        u_left, _, _ = np.linalg.svd(system.jac(x, u))
        w = u_left[:, -1]
        f_u = system.dfdu(x, u)
        rates = augmented.rhs(np.concatenate([x, np.zeros(n * (k + n))]), u)
        f_theta = rates[n:].reshape(n, k + n)[:, :k]
        denominator = float(w @ f_u)
        if denominator == 0:
            continue
        gradient = np.zeros(k + n)
        gradient[:k] = -(w @ f_theta) / denominator
        out[kind] = gradient * chain
    return out


def _with_parameters(scenario: Scenario, parameters: Mapping[str, float]) -> Scenario:
    """The scenario with some model parameters replaced (no re-validation: values from a fit)."""
    model = scenario.model.model_copy(
        update={"parameters": {**scenario.model.parameters, **parameters}}
    )
    return scenario.model_copy(update={"model": model})


def _fitted_trajectory(
    scenario: Scenario, observations: Observations, fitted: Mapping[str, float], x0: np.ndarray
) -> Trajectory:
    """The fitted model's state over the record, from the fitted initial state: solver steps
    plus TRAJECTORY_SAMPLES_PER_YEAR samples a year (plots); its end is the fitted scenario's
    present."""
    solution = integrate(
        IntegrationProblem(scenario.system(**fitted), x0, observations.path, observations.horizon),
        save=Save(every=1.0 / TRAJECTORY_SAMPLES_PER_YEAR, steps=True),
        limits=limits_for(scenario),
        tolerance=Tolerance(rtol=FIT_RTOL, atol=FIT_RTOL * FIT_ATOL_SHARE),
    )
    return trajectory(solution, observations.path)


def _resampled(
    residuals: np.ndarray,
    fitted_values: np.ndarray,
    variable_index: np.ndarray,
    p: int,
    replicates: int,
    seed: int,
) -> np.ndarray:
    """Residual bootstrap data on the fitting scale, (m, replicates): the fitted values plus each
    variable's centred residuals, inflated by sqrt(m / (m - p)), drawn with replacement."""
    m = residuals.size
    inflate = np.sqrt(m / (m - p))
    groups = [np.nonzero(variable_index == i)[0] for i in np.unique(variable_index)]
    centred = residuals.copy()
    for group in groups:
        centred[group] -= centred[group].mean()
    rng = np.random.default_rng(seed)
    noise = np.empty((m, replicates))
    for b in range(replicates):
        for group in groups:
            noise[group, b] = rng.choice(centred[group], size=group.size, replace=True) * inflate
    return fitted_values[:, None] + noise


@dataclass(frozen=True)
class _Refits:
    """Batched refits: z (p, members) and which members converged."""

    z: np.ndarray
    converged: np.ndarray
    evaluations: int  # batched integrations used


def _refit_batch(
    simulator: _Simulator,
    targets: np.ndarray,
    weights: np.ndarray,
    log: bool,
    starts: np.ndarray,
    estimate: np.ndarray,
    tolerance: float,
    report: Progress,
) -> _Refits:
    """Least squares for many data sets at once (one member per column of ``targets``, on the
    fitting scale): Levenberg-Marquardt with Marquardt's scaling (Marquardt 1963, J. SIAM
    11:431-441; Nocedal & Wright 2006, Numerical Optimization, section 10.3).

    Each iteration integrates the model and its sensitivities for every member still running in
    one batched run of the engine, solves each member's damped normal equations
    (J^T J + lambda diag(J^T J)) dz = -J^T r, keeps the bounds by clipping, and accepts the step
    of a member whose sum of squares falls (damping / DAMPING_FACTOR) or rejects it (damping x
    DAMPING_FACTOR). A member has converged, as in scipy's least_squares, when an accepted step
    lowers the sum of squares by less than ``tolerance`` of it or moves z by less than
    ``tolerance`` (tolerance + |z|); it fails when its damping passes DAMPING_MAX or it is
    still running after MAX_EVALUATIONS integrations. A start that cannot be simulated is
    replaced by ``estimate``.
    """
    layout = simulator.layout
    lower, upper = layout.lower[:, None], layout.upper[:, None]
    members = starts.shape[1]
    reach = TRIAL_STEP * np.where(layout.log_scale(), 1.0, np.maximum(np.abs(estimate), 1.0))

    def evaluate(z: np.ndarray, index: np.ndarray):
        """Residuals, Jacobian and usability of the members ``index`` at z (p, len(index))."""
        predicted, derivative, ran = simulator.run_batch(z)
        values, jacobian, usable = _on_fitting_scale(predicted, derivative, weights, log)
        residuals = values - targets[:, index]
        with np.errstate(invalid="ignore"):
            ok = ran & usable & np.isfinite(residuals).all(axis=0)
            ok &= np.isfinite(jacobian).all(axis=(0, 1))
        return residuals, jacobian, ok

    z = starts.copy()
    residuals, jacobian, ok = evaluate(z, np.arange(members))
    evaluations = 1
    if not ok.all():
        index = np.nonzero(~ok)[0]
        z[:, index] = estimate[:, None]
        again = evaluate(z[:, index], index)
        residuals[:, index], jacobian[:, :, index], ok[index] = again
        evaluations += 1
    cost = 0.5 * np.sum(residuals**2, axis=0)
    damping = np.full(members, DAMPING_START)
    running = ok.copy()
    converged = np.zeros(members, dtype=bool)
    while running.any() and evaluations < MAX_EVALUATIONS:
        report(
            float(np.mean(~running)), f"bootstrap refits: {int(converged.sum())} of {members} done"
        )
        index = np.nonzero(running)[0]
        step = _damped_steps(jacobian[:, :, index], residuals[:, index], damping[index], reach)
        here = z[:, index]
        trial = np.clip(here + step, lower, upper)
        moved = np.linalg.norm(trial - here, axis=0)
        new_residuals, new_jacobian, ok = evaluate(trial, index)
        evaluations += 1
        new_cost = 0.5 * np.sum(new_residuals**2, axis=0)
        with np.errstate(invalid="ignore"):
            better = ok & (new_cost < cost[index])
        small_step = moved <= tolerance * (tolerance + np.linalg.norm(here, axis=0))
        small_gain = cost[index] - new_cost <= tolerance * cost[index]
        accepted = index[better]
        z[:, accepted] = trial[:, better]
        residuals[:, accepted] = new_residuals[:, better]
        jacobian[:, :, accepted] = new_jacobian[:, :, better]
        cost[accepted] = new_cost[better]
        damping[accepted] /= DAMPING_FACTOR
        damping[index[~better]] *= DAMPING_FACTOR
        # A rejected step too small to matter: the member sits at its minimum to within what the
        # integration resolves.
        done = (better & (small_step | small_gain)) | (~better & ok & small_step)
        converged[index[done]] = True
        running[index[done]] = False
        running[damping > DAMPING_MAX] = False
    report(1.0, f"bootstrap refits: {int(converged.sum())} of {members} done")
    return _Refits(z=z, converged=converged, evaluations=evaluations)


def _damped_steps(
    jacobian: np.ndarray, residuals: np.ndarray, damping: np.ndarray, reach: np.ndarray
) -> np.ndarray:
    """Levenberg-Marquardt steps (p, members) from J (m, p, members), r (m, members) and each
    member's damping, each shortened so that no component moves more than ``reach`` (p,)."""
    normal = np.einsum("aib,ajb->bij", jacobian, jacobian)
    gradient = np.einsum("aib,ab->bi", jacobian, residuals)
    diagonal = np.diagonal(normal, axis1=1, axis2=2)
    floor = 1e-12 * np.max(diagonal, axis=1, keepdims=True) + 1e-300
    scaling = np.maximum(diagonal, floor) * damping[:, None]
    matrix = normal + scaling[:, :, None] * np.eye(normal.shape[1])
    try:
        step = -np.linalg.solve(matrix, gradient[..., None])[..., 0]
    except np.linalg.LinAlgError:  # an exactly singular member: least-norm steps for all
        step = -np.einsum("bij,bj->bi", np.linalg.pinv(matrix), gradient)
    longest = np.max(np.abs(step) / reach, axis=1, keepdims=True)
    step = step / np.maximum(longest, 1.0)
    return np.where(np.isfinite(step), step, 0.0).T


# ---------------------------------------------------------------------------------------------
# Thresholds of the bootstrap replicates


@dataclass(frozen=True)
class ReplicateThresholds:
    """Recovery and collapse thresholds of other parameter sets (one per member; NaN where a
    member has no such threshold) and each member's classification."""

    recovery: np.ndarray
    collapse: np.ndarray
    classifications: tuple[str, ...]


def replicate_thresholds(
    diagram: Diagram, parameters: Mapping[str, np.ndarray]
) -> ReplicateThresholds | None:
    """The thresholds and classification of ``diagram``'s model with ``parameters`` changed
    (arrays, one entry per member), all members at once, without tracing a diagram per member.

    Thresholds: each fold of the diagram's bistable window is followed by Newton's method on
    f(x, u) = 0, J(x, u) v = 0, c . v = 1 (c the fold's null vector; in one variable simply
    f = 0, df/dx = 0), started from the diagram's fold. A member has no such threshold when
    Newton does not converge, when the fold it reaches is degenerate or turned the other way
    (past a cusp the two folds merge and vanish), when it lies outside the span a diagram
    searches (the control range widened by EXTEND of its width on each side) or at negative
    amounts, or when the recovery fold no longer lies below the collapse fold.

    Classification as :func:`planner.equilibria.compute_diagram` makes it: irreversible when
    two stable equilibria coexist at the lowest achievable control (found by Newton at that
    control from points along the diagram's curves), else hysteretic when the window overlaps
    the control range, else reversible.

    Returns None when the diagram has not exactly one window with both folds, or when the same
    steps applied to the diagram's own parameters do not reproduce its thresholds and
    classification: then only a full diagram per member can tell.
    """
    folds = _window_folds(diagram)
    if folds is None:
        return None
    # The diagram's own parameters ride along as member 0, a check that the shortcut holds.
    values = {
        name: np.concatenate([[float(diagram.system.parameter(name))], np.ravel(value)])
        for name, value in parameters.items()
    }
    system = diagram.system.with_parameters(**values)
    members = max((v.size for v in values.values()), default=1)
    low, high = diagram.control_range
    width = high - low
    span = (low - EXTEND * width, high + EXTEND * width)
    tracked = {kind: _track_fold(diagram, values, fold, span) for kind, fold in folds.items()}
    if not all(_stable_next_to_folds(system, x, u) for u, x in tracked.values()):
        return None
    recovery, collapse = tracked["recovery"][0], tracked["collapse"][0]
    crossed = recovery >= collapse  # False where either is NaN
    recovery = np.where(crossed, np.nan, recovery)
    collapse = np.where(crossed, np.nan, collapse)
    irreversible = _stable_counts(diagram, system, members, diagram.least) >= 2
    window = ~(np.isnan(recovery) & np.isnan(collapse))
    bottom = np.maximum(np.where(np.isnan(recovery), -np.inf, recovery), low)
    top = np.minimum(np.where(np.isnan(collapse), np.inf, collapse), high)
    hysteretic = window & (top - bottom > 0)
    classifications = [
        "irreversible" if stuck else "hysteretic" if bistable else "reversible"
        for stuck, bistable in zip(irreversible, hysteretic, strict=True)
    ]
    own = (diagram.window.recovery, diagram.window.collapse)
    if classifications[0] != diagram.classification or not np.allclose(
        (recovery[0], collapse[0]), own, rtol=1e-6, atol=1e-9 * width
    ):
        return None
    return ReplicateThresholds(
        recovery=recovery[1:], collapse=collapse[1:], classifications=tuple(classifications[1:])
    )


def _window_folds(diagram: Diagram) -> dict[str, Fold] | None:
    """The recovery and collapse folds of the diagram's only window, or None."""
    window = diagram.window
    if window is None or window.recovery is None or window.collapse is None:
        return None
    if len(diagram.windows) != 1:
        return None
    folds = {}
    for kind in ("recovery", "collapse"):
        value = getattr(window, kind)
        matching = [f for f in diagram.folds if f.control == value and f.kind == kind]
        if not matching:
            return None
        folds[kind] = matching[0]
    return folds


def _solve_each(matrix: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve matrix[j] y[j] = rhs[j] for every member j, (members, k, k) and (members, k);
    NaN for members whose matrix is not finite or singular."""
    usable = np.isfinite(matrix).all(axis=(1, 2)) & np.isfinite(rhs).all(axis=1)
    if matrix.shape[1] == 1:  # one variable: a division
        usable &= matrix[:, 0, 0] != 0
        with np.errstate(all="ignore"):
            return np.where(usable[:, None], rhs / matrix[:, 0], np.nan)
    safe = np.where(usable[:, None, None], matrix, np.eye(matrix.shape[1]))
    safe_rhs = np.where(usable[:, None], rhs, 0.0)
    try:
        out = np.linalg.solve(safe, safe_rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:  # an exactly singular member: one at a time
        out = np.full(rhs.shape, np.nan)
        for j in np.nonzero(usable)[0]:
            with contextlib.suppress(np.linalg.LinAlgError):
                out[j] = np.linalg.solve(safe[j], safe_rhs[j])
    return np.where(usable[:, None], out, np.nan)


def _fold_orientation(system: System, x: np.ndarray, u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """sign of (w . f_xx[v, v]) (w . f_u), w the left null vector of J: on which side of the
    fold its two equilibria lie (0: degenerate). x, v (n, members), u (members,)."""
    if system.n == 1:
        w = np.ones((1, x.shape[1]))
    else:
        left, _, _ = np.linalg.svd(np.moveaxis(system.jac(x, u), -1, 0))
        w = left[:, :, -1].T
    curvature = np.einsum("ib,ijkb,jb,kb->b", w, system.hessians(x, u), v, v)
    return np.sign(curvature * np.einsum("ib,ib->b", w, system.dfdu(x, u)))


def _track_fold(
    diagram: Diagram,
    parameters: Mapping[str, np.ndarray],
    fold: Fold,
    span: tuple[float, float],
) -> np.ndarray:
    """Control value (members,) of ``fold`` followed to ``parameters`` (arrays over members)
    by Newton on the augmented system; NaN where it is lost (see
    :func:`replicate_thresholds`). Members for which Newton from the fold itself fails, or
    lands on another fold, try again along the straight path from the diagram's parameters to
    theirs in FOLD_STAGES stages (natural-parameter continuation), each from the last."""
    members = max(v.size for v in parameters.values())
    _, _, vt = np.linalg.svd(diagram.system.jac(fold.state, fold.control))
    c = vt[-1] / np.linalg.norm(vt[-1])
    start = (
        np.repeat(fold.state[:, None], members, axis=1).astype(float),
        np.full(members, float(fold.control)),
        np.repeat(c[:, None], members, axis=1),
    )
    orientation = _fold_orientation(diagram.system, *(part[..., :1] for part in start))[0]
    system = diagram.system.with_parameters(**parameters)
    x, u, v, converged = _fold_newton(system, *start, c)
    ok = _fold_found(diagram, system, (x, u, v), converged, start, span, orientation)
    retry = np.nonzero(~ok)[0]
    if retry.size:
        base = {name: float(diagram.system.parameter(name)) for name in parameters}
        path = [part[..., retry] for part in start]
        reached = np.ones(retry.size, dtype=bool)
        for stage in range(1, FOLD_STAGES + 1):
            share = stage / FOLD_STAGES
            between = {
                name: base[name] + share * (value[retry] - base[name])
                for name, value in parameters.items()
            }
            *path, done = _fold_newton(diagram.system.with_parameters(**between), *path, c)
            reached &= done
        x[:, retry], u[retry], v[:, retry] = path
        converged[retry] = reached
        ok = _fold_found(diagram, system, (x, u, v), converged, start, span, orientation)
    return np.where(ok, u, np.nan), x


def _stable_next_to_folds(system: System, x: np.ndarray, u: np.ndarray) -> bool:
    """Whether, at every member's fold (x (n, members), u (members,); NaN: no fold), all
    eigenvalues but the fold's own zero one have negative real parts: then the stable run
    reaches the fold and the fold is the threshold. Otherwise the regime may end earlier, at a
    Hopf point (two or more variables), which only a full diagram locates."""
    if system.n < 2:
        return True
    found = np.isfinite(u)
    if not found.any():
        return True
    with np.errstate(
        all="ignore"
    ):  # every member (the parameters are per member), then those found
        jac = np.moveaxis(system.jac(x, u), -1, 0)[found]
    if not np.all(np.isfinite(jac)):
        return False
    eigenvalues = np.linalg.eigvals(jac)
    own = np.argmin(np.abs(eigenvalues), axis=1)  # the fold's zero eigenvalue
    others = np.delete(eigenvalues.real, own + eigenvalues.shape[1] * np.arange(len(own)))
    return bool(np.all(others < 0))


def _fold_found(
    diagram: Diagram,
    system: System,
    found: tuple[np.ndarray, np.ndarray, np.ndarray],
    converged: np.ndarray,
    start: tuple[np.ndarray, np.ndarray, np.ndarray],
    span: tuple[float, float],
    orientation: float,
) -> np.ndarray:
    """Which members' Newton results (x, u, v) are the tracked fold: converged, finite, |f|
    small, inside the searched span, not at negative amounts, turned the same way."""
    x, u, v = found
    with np.errstate(invalid="ignore", over="ignore"):
        f = system.rhs(x, u)
        ok = converged & np.all(np.isfinite(x), axis=0) & np.isfinite(u)
        ok &= np.max(np.abs(f), axis=0) <= FOLD_RESIDUAL * (1.0 + np.max(np.abs(x), axis=0))
        ok &= (span[0] <= u) & (u <= span[1])
        if system.model.spec.nonnegative_state:
            ok &= np.all(x >= -NEGATIVE_MARGIN * diagram.scale[:-1, None], axis=0)
        # Orientation where usable (the others are lost anyway: evaluated at the start).
        usable = [np.where(ok, part, begin) for part, begin in zip(found, start, strict=True)]
        return ok & (_fold_orientation(system, *usable) == orientation)


def _fold_newton(
    system: System, x: np.ndarray, u: np.ndarray, v: np.ndarray, c: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Newton on f(x, u) = 0, J v = 0, c . v = 1 for every member at once, from x, v (n,
    members) and u (members,). Returns the new x, u, v and which members converged (relative
    step below FOLD_STEP within FOLD_ITERATIONS)."""
    n, members = x.shape
    x, u, v = x.copy(), u.copy(), v.copy()
    live = np.all(np.isfinite(x), axis=0) & np.isfinite(u) & np.all(np.isfinite(v), axis=0)
    converged = np.zeros(members, dtype=bool)
    size = 2 * n + 1
    for _ in range(FOLD_ITERATIONS):
        if not live.any():
            break
        f, jac, dfdu = system.linearised(x, u)
        residual = np.concatenate([f, np.einsum("ijb,jb->ib", jac, v), [c @ v - 1.0]])
        matrix = np.zeros((members, size, size))
        matrix[:, :n, :n] = np.moveaxis(jac, -1, 0)
        matrix[:, :n, n] = dfdu.T
        matrix[:, n : 2 * n, :n] = np.einsum("ijkb,jb->bik", system.hessians(x, u), v)
        matrix[:, n : 2 * n, n] = np.einsum("ijb,jb->bi", system.jac_u(x, u), v)
        matrix[:, n : 2 * n, n + 1 :] = np.moveaxis(jac, -1, 0)
        matrix[:, 2 * n, n + 1 :] = c
        step = _solve_each(matrix, -residual.T).T
        live &= np.all(np.isfinite(step), axis=0)
        step = np.where(live, step, 0.0)
        x, u, v = x + step[:n], u + step[n], v + step[n + 1 :]
        magnitude = 1.0 + np.maximum(np.max(np.abs(x), axis=0), np.abs(u))
        small = live & (np.max(np.abs(step), axis=0) <= FOLD_STEP * magnitude)
        converged |= small
        live &= ~small
    return x, u, v, converged


def _stable_counts(diagram: Diagram, system: System, members: int, u: float) -> np.ndarray:
    """Number of distinct stable equilibria of each member at control ``u``: Newton at ``u``
    from EQUILIBRIUM_SEEDS points along the diagram's curves (the members' curves lie close to
    them), all members and starts at once; stability from the Jacobian's eigenvalues."""
    points = [branch.states for branch in diagram.branches if len(branch.states)]
    if not points:
        return np.zeros(members, dtype=int)
    states = np.concatenate(points)
    pick = np.unique(np.linspace(0, len(states) - 1, EQUILIBRIUM_SEEDS).round().astype(int))
    seeds = np.concatenate([states[pick], [f.state for f in diagram.folds]]).T  # (n, S)
    scale = diagram.scale[:-1, None, None]
    nonnegative = system.model.spec.nonnegative_state
    x = np.repeat(seeds[:, :, None], members, axis=2)  # (n, S, members)
    n, starts = seeds.shape
    for _ in range(EQUILIBRIUM_ITERATIONS):
        f, jac, _ = system.linearised(x, u)
        matrix = np.moveaxis(jac, (0, 1), (-2, -1)).reshape(-1, n, n)
        step = -_solve_each(matrix, np.moveaxis(f, 0, -1).reshape(-1, n)).T.reshape(x.shape)
        # Damped as in the diagram's own seeding: at most a few times the magnitude per step,
        # and amounts that would turn negative shrink instead.
        limit = 2.0 * np.maximum(np.abs(x), 1e-3 * scale)
        new = x + np.clip(step, -limit, limit)
        if nonnegative:
            new = np.where(new < 0, x / 4, new)
        with np.errstate(invalid="ignore"):
            settled = not np.any(np.abs(new - x) > FOLD_STEP * (np.abs(x) + scale))
        x = new
        if settled:  # every start has converged or left the finite numbers
            break
    with np.errstate(invalid="ignore", over="ignore"):
        f, jac, _ = system.linearised(x, u)
        found = np.all(np.isfinite(x), axis=0) & np.all(np.abs(f) <= 1e-9 * (1 + np.abs(x)), axis=0)
        if nonnegative:
            found &= np.all(x >= -NEGATIVE_MARGIN * scale, axis=0)
        matrix = np.moveaxis(jac, (0, 1), (-2, -1))
        matrix = np.where(found[..., None, None], matrix, -np.eye(n))
        stable = found & (np.max(np.linalg.eigvals(matrix).real, axis=-1) < 0)
        # A root counts once: drop it when an earlier start found the same one (distance in
        # the diagram's scaled coordinates).
        distance = np.max(np.abs(x[:, :, None] - x[:, None, :]) / scale[..., None], axis=0)
    earlier = np.tril(np.ones((starts, starts), dtype=bool), k=-1)[:, :, None]
    repeated = np.any(earlier & (distance < 1e-6) & found[None, :, :], axis=1)
    return np.sum(stable & ~repeated, axis=0)


# ---------------------------------------------------------------------------------------------
# The residual bootstrap


def _bootstrap(
    objective: _Objective,
    simulator: _Simulator,
    layout: _Layout,
    z: np.ndarray,
    residuals: np.ndarray,
    diagram: Diagram,
    fitted_scenario: Scenario,
    replicates: int,
    seed: int,
    report: Progress,
):
    """Refit ``replicates`` resampled data sets together (see :func:`_refit_batch`) and find
    each refitted model's thresholds (:func:`replicate_thresholds`, or a full diagram per
    replicate when the fitted diagram's shape calls for it)."""
    observations = simulator.observations
    p = z.size
    fitted_values = residuals + objective.target  # model on the fitting scale
    synthetic = _resampled(
        residuals, fitted_values, observations.variable_index, p, replicates, seed
    )
    # Start from the linearised solution (one Gauss-Newton step from the estimate): the refit
    # then needs two or three integrations instead of four or five.
    step = np.linalg.pinv(objective.jacobian(z))  # z shift per unit change of the data
    lower, upper = layout.lower[:, None], layout.upper[:, None]
    starts = np.clip(z[:, None] + step @ (synthetic - fitted_values[:, None]), lower, upper)
    starts = np.where((starts > lower) & (starts < upper), starts, z[:, None])
    refits = _refit_batch(
        simulator,
        synthetic,
        objective.weights,
        objective.log,
        starts,
        z,
        BOOTSTRAP_TOLERANCE,
        scaled(report, 0.0, 0.9),
    )
    good = refits.converged
    theta, x0 = layout.natural(refits.z[:, good])
    report(0.9, "thresholds of the bootstrap replicates")
    values = dict(zip(layout.names, theta, strict=True))
    tracked = replicate_thresholds(diagram, values)
    if tracked is None:
        tracked = _replicate_diagrams(fitted_scenario, values, scaled(report, 0.9, 1.0))
    classes = {"reversible": 0, "hysteretic": 0, "irreversible": 0}
    for classification in tracked.classifications:
        classes[classification] += 1
    found, without = {}, {}
    for kind in ("recovery", "collapse"):
        value = getattr(tracked, kind)
        found[kind] = value[np.isfinite(value)]
        without[kind] = int(np.count_nonzero(~np.isfinite(value)))
    report(1.0, "bootstrap done")
    summary = BootstrapSummary(
        replicates=replicates,
        succeeded=int(good.sum()),
        failed=int((~good).sum()),
        classifications=classes,
        samples=np.concatenate([theta, x0]).T.reshape(int(good.sum()), p),
    )
    return summary, found, without


def _replicate_diagrams(
    scenario: Scenario, parameters: Mapping[str, np.ndarray], report: Progress
) -> ReplicateThresholds:
    """Thresholds and classification of each member from its own full diagram."""
    members = max((np.size(v) for v in parameters.values()), default=0)
    found = {"recovery": np.full(members, np.nan), "collapse": np.full(members, np.nan)}
    classifications = []
    for b in range(members):
        report(b / max(members, 1), f"diagram of bootstrap replicate {b + 1} of {members}")
        values = {name: float(value[b]) for name, value in parameters.items()}
        diagram = diagram_for(_with_parameters(scenario, values))
        classifications.append(diagram.classification)
        for kind, values_of_kind in found.items():
            threshold = getattr(diagram, f"{kind}_threshold")
            if threshold is not None:
                values_of_kind[b] = threshold
    return ReplicateThresholds(
        recovery=found["recovery"],
        collapse=found["collapse"],
        classifications=tuple(classifications),
    )


def _fitted_scenario(
    scenario: Scenario,
    observations: Observations,
    names: tuple[str, ...],
    parameters: Mapping[str, float],
    end_state: np.ndarray,
    end_control: float,
    warnings: list[str],
) -> Scenario:
    """The base scenario with the fitted parameters, and as its present the end of the record:
    the modelled state and the recorded load at the last time. Schedules and costs are kept."""
    data = scenario.model_dump(mode="json", exclude_none=True)
    values = {**data["model"]["parameters"], **{n: float(parameters[n]) for n in names}}
    low, high = scenario.control.range
    if low <= end_control <= high:
        values[scenario.control.parameter] = end_control
    else:
        warnings.append(
            f"the last recorded load {end_control:g} lies outside the control range "
            f"[{low:g}, {high:g}]; the fitted scenario keeps the current load of the base"
        )
    data["model"]["parameters"] = values
    data["state"] = {
        v: max(float(x), 0.0) if scenario.spec.nonnegative_state else float(x)
        for v, x in zip(scenario.spec.variables, end_state, strict=True)
    }
    record = observations.record
    first, last = record.times[0], record.times[-1]
    note = (
        f"Parameters {', '.join(names)} fitted to {record.source} ({first:g} to {last:g}); "
        f"state and load are the model's at the end of the record ({last:g})."
    )
    data["description"] = f"{scenario.description}\n\n{note}".strip()
    suffix = " (fitted)"
    data["name"] = scenario.name[: 120 - len(suffix)] + suffix
    return scenario_from_data(data, source="fitted scenario")


@dataclass(frozen=True, eq=False)
class _JointPart:
    """Some parameters of a joint prior: names, scales, centre (values) and covariance."""

    parameters: tuple[str, ...]
    scales: tuple[str, ...]
    centre: tuple[float, ...]
    covariance: np.ndarray


def _joint_block(parts: Sequence[_JointPart], origin: str) -> dict[str, Any] | None:
    """``[uncertainty.joint]`` data of independent parts (a block-diagonal covariance)."""
    if not parts:
        return None
    size = sum(len(part.parameters) for part in parts)
    covariance = np.zeros((size, size))
    at = 0
    for part in parts:
        k = len(part.parameters)
        covariance[at : at + k, at : at + k] = part.covariance
        at += k
    return {
        "parameters": [n for part in parts for n in part.parameters],
        "scales": [s for part in parts for s in part.scales],
        "centre": [float(c) for part in parts for c in part.centre],
        "covariance": covariance.tolist(),
        "origin": origin,
    }


def _carry_uncertainty(
    fitted: Scenario,
    observations: Observations,
    layout: _Layout,
    z: np.ndarray,
    boot: BootstrapSummary | None,
    warnings: list[str],
) -> tuple[Scenario, str]:
    """The fitted scenario (whose ``[uncertainty]`` is still the base scenario's) with the fit's
    uncertainty as the priors of the fitted parameters, and a note saying where they came from.

    They get one ``[uncertainty.joint]`` prior: a multivariate normal on the fitting scale (the
    logarithm of a positive parameter) centred at the estimates, so that the ensemble's median
    member is the fitted lake, with the covariance of the successful bootstrap refits
    (numpy.cov, n - 1 in the denominator), which keeps their correlation. The base scenario's
    priors on fitted parameters go (they describe the first guess, not the fit); its priors on
    the others stay, and the part of a base joint prior on unfitted parameters (its marginal)
    stays as an independent block. Without a bootstrap (or with fewer than two successful
    refits) the fitted parameters get no prior. Where the priors came from is said in the
    description and in the joint prior's ``origin``.
    """
    names = layout.names
    data = fitted.model_dump(mode="json", exclude_none=True)
    block = data.pop("uncertainty", None)
    priors = [] if block is None else block.pop("priors", [])
    dropped = [p["parameter"] for p in priors if p["parameter"] in names]
    base_parts = []
    old = None if block is None else block.pop("joint", None)
    if old is not None:
        dropped += [n for n in old["parameters"] if n in names]
        own = [i for i, n in enumerate(old["parameters"]) if n not in names]
        if own:
            matrix = np.array(old["covariance"], dtype=float)[np.ix_(own, own)]
            base_parts.append(
                _JointPart(
                    tuple(old["parameters"][i] for i in own),
                    tuple(old["scales"][i] for i in own),
                    tuple(old["centre"][i] for i in own),
                    matrix,
                )
            )
    record = observations.record
    fit_to = f"the fit to {record.source} ({record.times[0]:g} to {record.times[-1]:g})"
    listed = ", ".join(names)
    dropped_text = ", ".join(dict.fromkeys(dropped))
    replaced = (
        f" They replace the base scenario's priors on {dropped_text} (which described the first "
        "guess, not the fit)."
        if dropped
        else ""
    )
    removed = (
        f" The base scenario's priors on {dropped_text} were dropped (they described the first "
        "guess, not the fit)."
        if dropped
        else ""
    )
    fit_part = None
    if boot is not None and boot.succeeded >= 2:
        theta, _ = layout.natural(z)
        samples = boot.samples[:, : layout.k]
        on_scale = np.where(layout.log_parameter, np.log(samples), samples)
        covariance = np.atleast_2d(np.cov(on_scale, rowvar=False))
        scales = tuple("log" if log else "linear" for log in layout.log_parameter)
        fit_part = _JointPart(names, scales, tuple(theta), 0.5 * (covariance + covariance.T))
        logs = [n for n, scale in zip(names, scales, strict=True) if scale == "log"]
        scale_text = "the natural logs of " + ", ".join(logs) if logs else "the values"
        if logs and len(logs) < len(names):
            scale_text += " (the others as they are)"
        note = (
            f"Priors of {listed} ([uncertainty.joint]): a multivariate normal of {scale_text}, "
            f"centred at the fitted values, with the covariance of {boot.succeeded} bootstrap "
            f"refits (of {boot.replicates}) of {fit_to}, which keeps their correlation."
            f"{replaced} Members share the fitted model's state at the end of the record."
        )
    elif boot is not None:
        note = (
            f"Only {boot.succeeded} of {boot.replicates} bootstrap refits of {fit_to} succeeded, "
            f"too few for a covariance: {listed} carry no uncertainty from the fit here.{removed}"
        )
    else:
        note = (
            f"No bootstrap was run for {fit_to}, so {listed} carry no uncertainty from the fit "
            f"here; run planner fit with --bootstrap N to carry it.{removed}"
        )
    description = data.get("description", "")

    def scenario_with(parts: list[_JointPart], note: str, origin: str) -> tuple[Scenario, str]:
        out = {**data, "description": f"{description}\n\n{note}".strip()}
        kept = [p for p in priors if p["parameter"] not in names]
        joint = _joint_block(parts, origin)
        if block is not None or joint is not None:
            out["uncertainty"] = {**(block or {}), "priors": kept}
            if joint is not None:
                out["uncertainty"]["joint"] = joint
        return scenario_from_data(out, source="fitted scenario"), note

    base_origin = "" if old is None else old.get("origin", "")
    if fit_part is None:
        return scenario_with(base_parts, note, base_origin)
    try:
        return scenario_with([fit_part, *base_parts], note, f"{note} {base_origin}".strip())
    except InputError as error:
        reasons = "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
        warnings.append(
            f"the fit's uncertainty could not be written as priors ({reasons}); "
            f"the fitted scenario has no prior on {listed}"
        )
        note = f"{listed} carry no prior from the fit: {reasons}.{removed}"
        return scenario_with(base_parts, note, base_origin)


# ---------------------------------------------------------------------------------------------
# Plain data for JSON and text


def _pair(interval: tuple[float, float] | None) -> list[float] | None:
    return None if interval is None else [float(interval[0]), float(interval[1])]


def _estimate_json(estimate: Estimate) -> dict[str, Any]:
    best, method = estimate.best
    return {
        "value": estimate.value,
        "interval": _pair(best),
        "method": method,
        "covariance_interval": _pair(estimate.interval),
        "bootstrap_interval": _pair(estimate.bootstrap_interval),
        "log_scale": estimate.log_scale,
    }


def fit_json(fit: Fit) -> dict[str, Any]:
    """The `planner fit --json` object: parameters and thresholds with 95% intervals, and more."""
    scenario, observations = fit.scenario, fit.observations
    record = observations.record
    variables = scenario.spec.variables
    thresholds = {}
    for kind, threshold in fit.thresholds.items():
        best, method = threshold.best
        thresholds[kind] = {
            "value": threshold.value,
            "interval": _pair(best),
            "method": method,
            "delta_interval": _pair(threshold.interval),
            "bootstrap_interval": _pair(threshold.bootstrap_interval),
            "bootstrap_without": threshold.bootstrap_without,
            "bootstrap_unreachable": threshold.bootstrap_unreachable,
            "reachable": threshold.unreachable is None,
            "reason": threshold.unreachable,
        }
    held = [p for p in scenario.spec.parameter_names if p not in fit.fitted]
    parameters = fit.fitted_scenario.model.parameters
    boot = fit.bootstrap
    return {
        "record": record.source,
        "scenario": scenario.name,
        "confidence": CONFIDENCE,
        "control": {
            "parameter": scenario.control.parameter,
            "column": observations.control_column,
            "unit": scenario.control.unit,
        },
        "observed": {
            variable: {"column": column, "values": int(np.sum(observations.variable_index == i))}
            for variable, column in observations.columns
            for i in [variables.index(variable)]
        },
        "times": {"first": float(record.times[0]), "last": float(record.times[-1])},
        "reading": observations.reading.as_json(),
        "log": fit.log,
        "fitted": list(fit.fitted),
        "parameters": {e.name: _estimate_json(e) for e in fit.parameters},
        "held": {name: float(parameters[name]) for name in held},
        "initial_state": {
            v: _estimate_json(e) for v, e in zip(variables, fit.initial_state, strict=True)
        },
        "end_state": {v: float(x) for v, x in zip(variables, fit.end_state, strict=True)},
        "end_control": fit.end_control,
        "thresholds": thresholds,
        "classification": fit.classification,
        "classification_reliable": fit.identifiable,
        "headline": fit_headline(fit),
        "residual": {"sigma": fit.sigma, "dof": fit.dof, "observations": fit.residuals.size},
        "bootstrap": None
        if boot is None
        else {
            "replicates": boot.replicates,
            "succeeded": boot.succeeded,
            "failed": boot.failed,
            "classifications": boot.classifications,
        },
        "identifiable": fit.identifiable,
        "converged": fit.converged,
        "warnings": list(fit.warnings),
    }


def _interval_text(interval: tuple[float, float] | None) -> str:
    return "not determined" if interval is None else f"{interval[0]:.4g} to {interval[1]:.4g}"


UNRELIABLE = "unreliable: the record does not pin the fitted parameters down"


def fit_headline(fit: Fit) -> str:
    """The first thing to read about a fit: the lake's verdict, or, when the record does not
    pin the fitted parameters down, a warning that the verdict is unreliable."""
    if fit.identifiable:
        return f"The fitted lake is {fit.classification}."
    return (
        "WARNING: this monitoring record does not pin down the fitted parameters, so it cannot "
        "tell whether the lake is reversible, hysteretic or irreversible. The verdict "
        f"({fit.classification}) and the thresholds of this fit are not findings: fit fewer "
        "parameters or add monitoring data before deciding on them."
    )


def fit_text(fit: Fit, *, caution: bool = True) -> str:
    """A terminal summary of a fit: estimates with intervals, thresholds, warnings; a fit that
    is not identifiable opens with the warning (:func:`fit_headline`), not with a verdict."""
    scenario = fit.scenario
    record = fit.observations.record
    unit = scenario.control.unit
    unreliable = "" if fit.identifiable else f" ({UNRELIABLE})"
    lines = []
    if not fit.identifiable:
        lines += [fit_headline(fit), *(f"  why: {reason}" for reason in fit.unidentified), ""]
    lines += [
        f"{scenario.name}: fitted to {record.source} "
        f"({record.times[0]:g} to {record.times[-1]:g}, {fit.residuals.size} observed values"
        f"{', logarithms' if fit.log else ''})",
        *(f"  read: {line}" for line in fit.observations.reading.statements()),
        "",
        f"{'quantity':<14} {'estimate':>11}  95% interval",
    ]
    for estimate in (*fit.parameters, *fit.initial_state):
        best, method = estimate.best
        lines.append(
            f"{estimate.name:<14} {estimate.value:>11.4g}  {_interval_text(best)} ({method})"
        )
    lines.append("")
    least = scenario.control.least
    for kind, threshold in fit.thresholds.items():
        best, method = threshold.best
        if threshold.unreachable is not None:
            value = f"{NOT_REACHABLE['undesired' if kind == 'recovery' else 'desired']}"
            lines.append(f"{kind} threshold: {value} ({threshold.unreachable}){unreliable}")
        else:
            value = "none" if threshold.value is None else f"{threshold.value:.4g} {unit}"
            lines.append(
                f"{kind} threshold: {value}; 95% interval {_interval_text(best)} ({method})"
            )
        if threshold.bootstrap_unreachable and fit.bootstrap is not None:
            where = "below the lowest achievable load" if kind == "recovery" else "out of range"
            lines.append(
                f"  in {threshold.bootstrap_unreachable} of {fit.bootstrap.succeeded} replicates "
                f"it lies {where}: not reachable by load cuts alone (left out of the interval)"
            )
    lines.append(f"classification of the fitted lake: {fit.classification}{unreliable}")
    if fit.bootstrap is not None:
        boot = fit.bootstrap
        counts = ", ".join(f"{k} {v}" for k, v in boot.classifications.items() if v)
        lines.append(
            f"bootstrap: {boot.succeeded} of {boot.replicates} replicates refitted ({counts})"
        )
        stuck = boot.classifications.get("irreversible", 0)
        if stuck:
            lines.append(
                f"  in {stuck} of {boot.succeeded} replicates the turbid state persists even at "
                f"the lowest achievable load ({least:g} {unit}): load cuts alone may not suffice"
            )
    lines.append(f"residual standard deviation: {fit.sigma:.4g} ({fit.dof} degrees of freedom)")
    others = [w for w in fit.warnings if w not in fit.unidentified]  # those shown at the top
    if others:
        lines.append("")
        lines += [f"warning: {w}" for w in others]
    if caution:
        lines += ["", CAUTION]
    return "\n".join(lines)
