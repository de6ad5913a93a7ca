"""The recovery frontier: how far below the recovery threshold, and for how long, the control must
go for the lake to recover once the control relaxes again.

For a family of schedules that take the control down to a ``floor``, hold it there, then relax it
to ``relax_to`` (DESIGN.md section 2: overshoot depth = recovery threshold - floor), the frontier
gives for each depth the least ``hold_years`` (years at the floor) that still recovers, and
conversely the least depth for a given hold. ``time_below_threshold`` (years) is the hold plus
the parts of the ramps spent below the recovery threshold: the quantity ``compare`` reports for
a schedule. The verdict is the planner's own (integrate under the schedule, then hold the final
control until the state settles, and match it to the desired attractor). It is monotone in both
the hold and the depth when lower loads give lower phosphorus at every time (a comparison
principle, e.g. Hirsch & Smith 2005, Monotone dynamical systems, Handbook of Differential
Equations; from memory), so each least value is found by bracketing then bisection on the
verdict.

Ramps: no catchment cuts its load overnight, so every schedule of a family ramps down to the
floor and up to relax_to. The ramps follow the scenario's largest yearly change
(``control.max_change_per_year``) when it sets one, else take DEFAULT_RAMP_YEARS each; a caller
may ask for ``ramp_years`` (0: instant jumps, only when asked) and for the ``start_year`` at
which the descent begins.

Speed: for one floor all holds share the path down to the floor, so that part is integrated
once with dense output; each verdict then only integrates the relaxation from the stored state
at the moment the control leaves the floor. The one engine (``planner.integrate``) does all of
it, and the one verdict (``planner.verdict``) decides.

Near the recovery fold the least hold follows the bottleneck law D ~ pi / sqrt(a b depth), with a
= |df/du| and b = |d2f/dx2| / 2 at the fold (Strogatz 2015, Nonlinear Dynamics and Chaos, section
4.3): shallow cuts need very long holds.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

import numpy as np

from planner.equilibria import Diagram, diagram_for
from planner.errors import InputError, Problem
from planner.integrate import STATUSES, Save, Solution, Status, integrate
from planner.integrate import Problem as Run
from planner.metrics import limits_for, overshoot
from planner.outcomes import evaluate
from planner.progress import Progress, scaled, silent
from planner.scenario import OvershootSchedule, Scenario, Schedule, StaircaseSchedule
from planner.schedules import REL_TOL, ControlPath, control_path
from planner.verdict import Verdict, attractors, decide
from planner.views import ResultViews

if TYPE_CHECKING:  # views for notebooks; pandas and plotly are imported when they are asked for
    pass

HOLD_TOLERANCE = 0.01  # years: the least hold is bracketed this tightly (found value: upper end)
DEPTH_TOLERANCE = 1e-4  # converse: depth bracket width, as a fraction of the control range width
SMALLEST_DEPTH = 1e-3  # default depths start at this fraction of the control range width
DEFAULT_DEPTHS = 20
DEFAULT_RAMP_YEARS = 2.0
"""Years each ramp (down to the floor, up to relax_to) takes when the scenario sets no largest
yearly change and the caller asks for no ``ramp_years``. Catchment measures (buffer strips,
wetlands, a treatment plant upgrade) are phased in over a couple of seasons, never overnight; an
instant jump would credit the family with a cut no catchment can make, and would make the least
hold disagree with a user's own ramped schedule. Common practice, no source."""
DEFAULT_START_YEAR = 0.0  # years: the family's descent begins now unless asked otherwise
MAX_DEPTHS = 400
DESCENTS_KEPT = 64  # integrated descents remembered per family (dense output, one per floor)
NAME_DIGITS = 3

FamilyKind = Literal["overshoot", "staircase"]
FAMILY_KINDS: tuple[FamilyKind, ...] = ("overshoot", "staircase")
RampSource = Literal["rate limit", "default", "asked"]
"""Where a family's ramps come from: the scenario's largest yearly change, DEFAULT_RAMP_YEARS,
or the caller's ``ramp_years``."""


# ---------------------------------------------------------------------------------------------
# Families of schedules


@dataclass(frozen=True)
class Family:
    """Schedules with two free numbers, ``floor`` (control unit) and ``hold`` (years at the floor).

    - overshoot: hold ``current`` until ``start_year``, ramp down to the floor, hold it ``hold``
      years, ramp up to ``relax_to``, hold.
    - staircase: two levels, [floor, relax_to], from ``start_year``; every change takes the same
      ramp time (the one the larger change needs at ``rate``), the floor is held ``hold`` years
      after the ramp down, so the change up is slower than the rate allows when relax_to lies
      closer to the floor.

    Each ramp takes ``ramp`` years when set (``ramp_source`` "default" or "asked"; 0: a jump),
    else the years the change needs at the largest yearly change ``rate`` (control unit per
    year; ``ramp_source`` "rate limit"). Each schedule must be complete by ``horizon`` (years)
    so that its verdict is the one at relax_to.
    """

    kind: FamilyKind
    current: float
    relax_to: float
    rate: float | None
    horizon: float
    ramp: float | None
    ramp_source: RampSource
    start_year: float = DEFAULT_START_YEAR

    def __post_init__(self) -> None:
        if self.ramp is None and self.rate is None:
            raise ValueError("a family needs either a ramp length or a largest yearly change")

    def ramp_years(self, start: float, end: float) -> float:
        """Years a change from ``start`` to ``end`` takes: ``ramp``, or the change at ``rate``."""
        if self.ramp is not None:
            return self.ramp
        return abs(end - start) / self.rate

    def ramps(self, floor: float) -> tuple[float, float]:
        """(years down to the floor, years up from it to relax_to)."""
        if self.kind == "overshoot":
            return self.ramp_years(self.current, floor), self.ramp_years(floor, self.relax_to)
        both = max(self.ramp_years(self.current, floor), self.ramp_years(floor, self.relax_to))
        return both, both

    def min_hold(self, floor: float) -> float:
        """Shortest hold (years) the family allows (a staircase step must last some time)."""
        if self.kind == "staircase" and self.ramps(floor)[0] == 0.0:
            return HOLD_TOLERANCE
        return 0.0

    def max_hold(self, floor: float) -> float:
        """Longest hold (years) that still relaxes by the horizon (negative: none fits)."""
        down, up = self.ramps(floor)
        return self.horizon - self.start_year - down - up

    def lowest_floor(self, hold: float) -> float:
        """The lowest floor whose schedule with this hold still fits within the horizon and,
        with ramps of a set length, keeps the largest yearly change."""
        spare = self.horizon - self.start_year - hold
        if self.ramp is not None:
            if spare < 2 * self.ramp - 1e-9 * self.horizon:
                return math.inf
            if self.rate is None:
                return -math.inf
            return max(self.current, self.relax_to) - self.rate * self.ramp
        if self.kind == "overshoot":
            return (self.current + self.relax_to - self.rate * spare) / 2
        return max(self.current, self.relax_to) - self.rate * spare / 2

    def leave_time(self, floor: float, hold: float) -> float:
        """Year at which the control leaves the floor."""
        return self.start_year + self.ramps(floor)[0] + hold

    def descent(self, floor: float) -> ControlPath:
        """The control path from year 0 down to the floor, then held there past the horizon."""
        return control_path(self.schedule(floor, self.horizon), current=self.current)

    def relaxation(self, floor: float) -> tuple[ControlPath, float]:
        """The control path from the moment it leaves the floor (time 0 here), and its length."""
        up = self.ramps(floor)[1]
        return ControlPath(np.array([0.0, up]), np.array([floor, self.relax_to])), up

    def schedule(self, floor: float, hold: float, name: str | None = None) -> Schedule:
        """The scenario-file schedule for (floor, hold)."""
        floor, hold = float(floor), float(hold)
        down, up = self.ramps(floor)
        if name is None:
            name = f"{self.kind.capitalize()} to {floor:.{NAME_DIGITS}g}, held {hold:.2f} yr"
        if self.kind == "overshoot":
            return OvershootSchedule(
                kind="overshoot",
                name=name,
                start=self.start_year,
                floor=floor,
                down_years=down,
                hold_years=hold,
                relax_to=self.relax_to,
                up_years=up,
            )
        return StaircaseSchedule(
            kind="staircase",
            name=name,
            start=self.start_year,
            levels=[floor, self.relax_to],
            step_years=down + hold,
            ramp_years=down,
        )

    def time_below(self, threshold: float, floor: float, hold: float) -> float:
        """Years the control spends below ``threshold`` (ramps included), as compare measures it
        (``planner.metrics.overshoot`` on the schedule's path, up to the horizon)."""
        path = control_path(self.schedule(floor, hold), current=self.current)
        return overshoot(path, threshold, self.horizon)[1]


def _checked_ramp_options(
    scenario: Scenario, start_year: float, ramp_years: float | None, source: str
) -> list[Problem]:
    """Problems with ``start_year`` and ``ramp_years`` (years) that need no diagram: not finite,
    negative, beyond the horizon, or a jump where the scenario limits the yearly change."""
    horizon = scenario.simulation.horizon
    rate = scenario.control.max_change_per_year
    problems = []
    start = float(start_year)
    if not (math.isfinite(start) and start >= 0):
        problems.append(Problem(source, "start_year", f"{start:g} must be a year at least 0"))
        start = 0.0
    elif start >= horizon:
        problems.append(
            Problem(
                source,
                "start_year",
                f"{start:g} lies at or beyond the horizon {horizon:g} yr "
                "(simulation.horizon): the descent must begin before it",
            )
        )
    ramp = DEFAULT_RAMP_YEARS if ramp_years is None and rate is None else ramp_years
    field = "ramp_years"
    if ramp is None:
        return problems
    ramp = float(ramp)
    default = (
        f" (the default when the scenario sets no control.max_change_per_year; give "
        f"{field} to change it)"
        if ramp_years is None
        else ""
    )
    if not (math.isfinite(ramp) and ramp >= 0):
        problems.append(Problem(source, field, f"{ramp:g} must be a number of years at least 0"))
    elif rate is not None and ramp == 0:
        problems.append(
            Problem(
                source,
                field,
                "0 asks for instant jumps, which break the scenario's largest yearly change "
                f"{rate:g} per year (control.max_change_per_year); give a longer ramp or leave "
                f"{field} out to follow that limit",
            )
        )
    elif start < horizon and start + 2 * ramp > horizon * (1 + REL_TOL):
        problems.append(
            Problem(
                source,
                field,
                f"two ramps of {ramp:g} yr{default} from year {start:g} end after the horizon "
                f"{horizon:g} yr (simulation.horizon): no schedule of the family would be "
                "complete by then",
            )
        )
    return problems


def family_for(
    scenario: Scenario,
    kind: FamilyKind,
    relax_to: float,
    *,
    start_year: float = DEFAULT_START_YEAR,
    ramp_years: float | None = None,
    source: str = "<scenario>",
) -> Family:
    """The family of ``kind`` under the scenario's largest yearly change and horizon.

    ``start_year`` (years from now): when the descent begins. ``ramp_years`` (years): the length
    of each ramp, down and up, 0 for instant jumps; by default the ramps follow the scenario's
    largest yearly change, or take DEFAULT_RAMP_YEARS when it sets none. Bad options raise
    InputError naming ``source`` and the option.
    """
    problems = _checked_ramp_options(scenario, start_year, ramp_years, source)
    if problems:
        raise InputError(problems)
    rate = scenario.control.max_change_per_year
    if ramp_years is not None:
        ramp, origin = float(ramp_years), "asked"
    elif rate is None:
        ramp, origin = DEFAULT_RAMP_YEARS, "default"
    else:
        ramp, origin = None, "rate limit"
    return Family(
        kind=kind,
        current=scenario.current_control,
        relax_to=float(relax_to),
        rate=rate,
        horizon=scenario.simulation.horizon,
        ramp=ramp,
        ramp_source=origin,
        start_year=float(start_year),
    )


def checked_ramp_to(family: Family, deepest_floor: float, source: str) -> None:
    """InputError naming ``ramp_years`` when ramps of the asked length would change the control
    faster than the scenario's largest yearly change on the way to ``deepest_floor``."""
    if family.ramp is None or family.rate is None or family.ramp_source != "asked":
        return
    change = max(abs(family.current - deepest_floor), abs(family.relax_to - deepest_floor))
    if change <= family.rate * family.ramp * (1 + REL_TOL):
        return
    raise InputError(
        [
            Problem(
                source,
                "ramp_years",
                f"{family.ramp:g} yr to change the control by {change:.4g} (to the deepest floor "
                f"{deepest_floor:.4g}) is faster than the largest yearly change {family.rate:g} "
                f"per year (control.max_change_per_year): give at least "
                f"{change / family.rate:.4g} yr, shallower depths, or leave ramp_years out to "
                "follow the limit",
            )
        ]
    )


# ---------------------------------------------------------------------------------------------
# Fast verdicts


class Verdicts:
    """Recovered or not for (floor, hold) in one family, reusing one diagram and, per floor, one
    integration of the descent (dense output) from which every hold branches off.

    Equivalent to ``planner.outcomes.evaluate(...).recovered`` for the family's schedules: the
    state is integrated to the time the control leaves the floor, then under the relaxation,
    then with relax_to held until it settles; recovered means it settles on the desired
    attractor at relax_to.
    """

    def __init__(self, scenario: Scenario, diagram: Diagram, family: Family):
        self.scenario = scenario
        self.diagram = diagram
        self.family = family
        self.system = scenario.system()
        self.limits = limits_for(scenario)
        self.count = 0
        self._descents: dict[float, Solution] = {}
        self._attractors = attractors(diagram, family.relax_to)

    def _recovers_from(self, x: np.ndarray) -> bool:
        """The verdict for a state at the moment the control reaches relax_to (held after)."""
        simulation = self.scenario.simulation
        finished = np.array([STATUSES.index(Status.FINISHED)])
        verdicts = decide(
            self._attractors,
            self.system,
            np.asarray(x, dtype=float)[:, None],
            finished,
            np.array([self.family.horizon]),
            horizon=self.family.horizon,
            cap=simulation.settle_cap,
            limit=simulation.state_limit,
        )
        return verdicts.first is Verdict.RECOVERED

    def _descent(self, floor: float) -> Solution:
        if floor not in self._descents:
            if len(self._descents) >= DESCENTS_KEPT:
                self._descents.clear()
            problem = Run(
                self.system,
                self.scenario.initial_state,
                self.family.descent(floor),
                self.family.horizon,
            )
            self._descents[floor] = integrate(problem, save=Save(dense=True), limits=self.limits)
        return self._descents[floor]

    def __call__(self, floor: float, hold: float) -> bool:
        """Whether the family's schedule (floor, hold) recovers (a hold that does not fit within
        the horizon never counts as recovering)."""
        family = self.family
        if hold > family.max_hold(floor) + 1e-9 * family.horizon:
            return False
        self.count += 1
        descent = self._descent(floor)
        leave = min(family.leave_time(floor, hold), family.horizon)
        if descent.status is not Status.FINISHED and descent.t_end[0] < leave:
            return False
        x = np.asarray(descent.state_at(leave), dtype=float)
        path, years = family.relaxation(floor)
        if years > 0:
            run = integrate(Run(self.system, x, path, years), limits=self.limits)
            if run.status is not Status.FINISHED:
                return False
            x = run.final_state[:, 0]
        return self._recovers_from(x)


def least_hold(verdicts: Verdicts, floor: float, *, upper: float | None = None) -> float | None:
    """Least hold (years) at ``floor`` that recovers, to HOLD_TOLERANCE (the upper end of the
    final bracket, so it recovers); None when no hold up to the horizon recovers.

    ``upper``: a hold believed to recover (found at a shallower floor); checked before use.
    """
    family = verdicts.family
    low, high = family.min_hold(floor), family.max_hold(floor)
    if high < low:
        return None
    if verdicts(floor, low):
        return low
    if upper is not None and low < upper < high and verdicts(floor, upper):
        high = upper
    elif not verdicts(floor, high):
        return None
    while high - low > HOLD_TOLERANCE:
        middle = 0.5 * (low + high)
        if verdicts(floor, middle):
            high = middle
        else:
            low = middle
    return high


def least_depth(
    verdicts: Verdicts, threshold: float, hold: float, deepest: float
) -> tuple[float | None, float]:
    """Least depth below ``threshold`` (control units) that recovers with this hold (years), to
    DEPTH_TOLERANCE of the range width; None when even ``deepest`` does not. Also returns the
    deepest depth tried (it shrinks when deeper schedules would not fit within the horizon)."""
    family = verdicts.family
    deepest = min(deepest, threshold - family.lowest_floor(hold))
    width = verdicts.scenario.control.range[1] - verdicts.scenario.control.range[0]
    if deepest <= 0 or hold < family.min_hold(threshold - deepest):
        return None, max(deepest, 0.0)
    if not verdicts(threshold - deepest, hold):
        return None, deepest
    low, high = 0.0, deepest
    while high - low > DEPTH_TOLERANCE * width:
        middle = 0.5 * (low + high)
        if verdicts(threshold - middle, hold):
            high = middle
        else:
            low = middle
    return high, deepest


# ---------------------------------------------------------------------------------------------
# The frontier


@dataclass(frozen=True)
class FrontierPoint:
    """One depth (control units below the recovery threshold) and the least ``hold_years`` at
    the floor that recovers there; None when no hold that ends by the horizon recovers.
    ``time_below_threshold`` (years) adds the ramps' years below the threshold;
    ``ramp_down_years`` and ``ramp_up_years`` are the family's ramps at this floor.
    ``achievable``: the floor is at or above the lowest achievable control."""

    depth: float
    floor: float
    hold_years: float | None
    time_below_threshold: float | None
    ramp_down_years: float
    ramp_up_years: float
    achievable: bool


@dataclass(frozen=True)
class ConversePoint:
    """For ``hold_years`` at the floor, the least depth (control units) that recovers, or
    None."""

    hold_years: float
    depth: float | None
    floor: float | None


@dataclass(frozen=True)
class OwnSchedule:
    """One of the scenario's own overshoot schedules placed on the frontier's axes, with its
    ``time_below_threshold`` (years) as compare measures it."""

    name: str
    depth: float
    hold_years: float
    time_below_threshold: float
    recovered: bool
    verdict: str
    feasible: bool
    with_actions: bool


@dataclass(frozen=True)
class Frontier(ResultViews):
    """The recovery frontier of one family of a scenario (depths in the control's unit, holds
    in years), its converse, and the scenario's own overshoot schedules for reference."""

    scenario_name: str
    family: Family
    recovery_threshold: float
    lowest_achievable: float
    unit: str
    points: tuple[FrontierPoint, ...]
    converse: tuple[ConversePoint, ...]
    own: tuple[OwnSchedule, ...]
    verdicts: int

    @property
    def relax_to(self) -> float:
        return self.family.relax_to

    @property
    def deepest(self) -> float:
        """The deepest achievable cut below the recovery threshold."""
        return self.recovery_threshold - self.lowest_achievable

    _views = ("frontier_frame", "frontier_figure")

    def _view_title(self) -> str:
        return f"Recovery frontier: {self.scenario_name}"


def recovery_threshold_of(scenario: Scenario, diagram: Diagram, source: str) -> float:
    """The recovery threshold, or an InputError saying why no overshoot can recover: the lake
    has none, or it lies where load cuts alone cannot take the control (DESIGN.md section 9)."""
    threshold = diagram.recovery_threshold
    recovery = diagram.recovery
    if threshold is None and (recovery is None or recovery.location is None):
        raise InputError(
            [
                Problem(
                    source,
                    "model",
                    f"the lake is {diagram.classification}: it has no recovery threshold, so "
                    "there is no overshoot to plan",
                )
            ]
        )
    least = scenario.control.least
    if threshold is not None and threshold > least:
        return float(threshold)
    control = scenario.control
    field = "control.range" if control.lowest_achievable is None else "control.lowest_achievable"
    if recovery.location > control.range[1]:
        reason = (
            f"the recovery threshold {recovery.location:.4g} lies above the control range: the "
            "undesired regime is stable nowhere in it, so there is no overshoot to plan"
        )
        raise InputError([Problem(source, "control.range", reason)])
    why = recovery.reason if threshold is None and recovery.reason else None
    if why is None:
        why = f"it lies at {recovery.location:.4g}, the lowest achievable control is {least:g}"
    reason = (
        f"the recovery threshold is not reachable by load cuts alone ({why}): no load cut alone "
        f"recovers this lake ({diagram.classification}); consider in-lake actions"
    )
    raise InputError([Problem(source, field, reason)])


def default_relax_to(scenario: Scenario, diagram: Diagram) -> float:
    """The relax_to of the first overshoot schedule whose relax_to lies inside the bistable
    window, else the middle of the window (within the control range)."""
    low, high = scenario.control.range
    recovery = diagram.recovery_threshold if diagram.recovery_threshold is not None else low
    collapse = diagram.collapse_threshold if diagram.collapse_threshold is not None else high
    for schedule in scenario.schedules:
        if isinstance(schedule, OvershootSchedule) and recovery <= schedule.relax_to < collapse:
            return float(schedule.relax_to)
    return 0.5 * (max(recovery, low) + min(collapse, high))


def checked_relax_to(
    scenario: Scenario, diagram: Diagram, relax_to: float | None, source: str
) -> float:
    """relax_to, defaulted and checked: within the control range and the bistable window."""
    value = default_relax_to(scenario, diagram) if relax_to is None else float(relax_to)
    low, high = scenario.control.range
    threshold = recovery_threshold_of(scenario, diagram, source)
    if not (math.isfinite(value) and low <= value <= high):
        reason = f"{value:g} lies outside the control range [{low:g}, {high:g}]"
    elif value < threshold:
        reason = (
            f"{value:g} lies below the recovery threshold {threshold:.4g}: relaxing there "
            "recovers with no overshoot at all; choose a value at or above it"
        )
    elif diagram.collapse_threshold is not None and value >= diagram.collapse_threshold:
        reason = (
            f"{value:g} lies at or above the collapse threshold "
            f"{diagram.collapse_threshold:.4g}: the clear state is lost there whatever the "
            "overshoot; choose a value below it"
        )
    else:
        return value
    raise InputError([Problem(source, "relax_to", reason)])


def prepared(
    scenario: Scenario,
    diagram: Diagram | None,
    relax_to: float | None,
    families: Sequence[str],
    source: str,
    progress: Progress = silent,
) -> tuple[Diagram, float, float]:
    """Check the families, compute the diagram if not given, and return it with the recovery
    threshold and the checked relax_to (InputError naming ``source`` otherwise)."""
    for kind in families:
        if kind not in FAMILY_KINDS:
            raise InputError([Problem(source, "family", f"{kind!r} is not one of {FAMILY_KINDS}")])
    if diagram is None:
        diagram = diagram_for(scenario, progress=progress)
    threshold = recovery_threshold_of(scenario, diagram, source)
    return diagram, threshold, checked_relax_to(scenario, diagram, relax_to, source)


def default_depths(scenario: Scenario, threshold: float, count: int = DEFAULT_DEPTHS) -> np.ndarray:
    """``count`` depths spaced evenly in logarithm from SMALLEST_DEPTH of the range width to the
    deepest achievable cut (the least hold changes fastest near the fold)."""
    low, high = scenario.control.range
    deepest = threshold - scenario.control.least
    smallest = min(SMALLEST_DEPTH * (high - low), deepest / 10)
    return np.geomspace(smallest, deepest, count)


def _checked_depths(
    scenario: Scenario, threshold: float, depths: Sequence[float], source: str
) -> np.ndarray:
    values = np.asarray(depths, dtype=float).reshape(-1)
    bottom = scenario.control.range[0]
    problems = []
    if not 1 <= values.size <= MAX_DEPTHS:
        problems.append(Problem(source, "depths", f"give between 1 and {MAX_DEPTHS} depths"))
    for i, depth in enumerate(values):
        if not (math.isfinite(depth) and depth > 0):
            problems.append(Problem(source, f"depths.{i}", f"{depth:g} must be a positive number"))
        elif threshold - depth < bottom:
            problems.append(
                Problem(
                    source,
                    f"depths.{i}",
                    f"{depth:g} reaches below the control range: the deepest possible is "
                    f"{threshold - bottom:.4g} (recovery threshold {threshold:.4g} minus the "
                    f"range's lower end {bottom:g})",
                )
            )
    if problems:
        raise InputError(problems)
    return np.sort(values)


def _checked_holds(hold_years: Sequence[float], source: str) -> np.ndarray:
    values = np.asarray(hold_years, dtype=float).reshape(-1)
    problems = [
        Problem(source, f"hold_years.{i}", f"{d:g} must be a number of years at least 0")
        for i, d in enumerate(values)
        if not (math.isfinite(d) and d >= 0)
    ]
    if values.size > MAX_DEPTHS:
        problems.append(Problem(source, "hold_years", f"give at most {MAX_DEPTHS} holds"))
    if problems:
        raise InputError(problems)
    return values


def frontier_points(
    verdicts: Verdicts,
    threshold: float,
    depths: np.ndarray,
    *,
    progress: Progress = silent,
) -> list[FrontierPoint]:
    """Least holds at the given depths (ascending). Shallow to deep, each found hold bounds the
    next (a deeper cut needs no longer hold)."""
    family, least = verdicts.family, verdicts.scenario.control.least
    points: list[FrontierPoint] = []
    previous: float | None = None
    for i, depth in enumerate(depths):
        floor = threshold - float(depth)
        hold = least_hold(verdicts, floor, upper=previous)
        if hold is not None:
            previous = hold
        down, up = family.ramps(floor)
        points.append(
            FrontierPoint(
                depth=float(depth),
                floor=floor,
                hold_years=hold,
                time_below_threshold=(
                    None if hold is None else family.time_below(threshold, floor, hold)
                ),
                ramp_down_years=down,
                ramp_up_years=up,
                achievable=floor >= least - 1e-12 * max(1.0, abs(least)),
            )
        )
        progress((i + 1) / len(depths), f"depth {depth:.3g}: least hold {_years(hold)}")
    return points


def _two_decimals(value: object) -> object:
    """Years with two decimals for terminal tables (None stays None)."""
    return f"{value:.2f}" if isinstance(value, float) else value


def _years(value: float | None) -> str:
    return "none within the horizon" if value is None else f"{value:.2f} yr"


def own_overshoots(scenario: Scenario, diagram: Diagram, threshold: float) -> list[OwnSchedule]:
    """The scenario's overshoot schedules with their depth, hold, time below the threshold and
    verdict (all from evaluate, as compare reports them)."""
    out = []
    for schedule in scenario.schedules:
        if not isinstance(schedule, OvershootSchedule):
            continue
        outcome = evaluate(scenario, diagram, schedule)
        out.append(
            OwnSchedule(
                name=schedule.name,
                depth=float(threshold - schedule.floor),
                hold_years=float(schedule.hold_years),
                time_below_threshold=float(outcome.time_below_threshold),
                recovered=outcome.recovered,
                verdict=outcome.verdict.value,
                feasible=outcome.feasible,
                with_actions=bool(schedule.actions),
            )
        )
    return out


def recovery_frontier(
    scenario: Scenario,
    *,
    diagram: Diagram | None = None,
    relax_to: float | None = None,
    depths: Sequence[float] | None = None,
    hold_years: Sequence[float] = (),
    family: FamilyKind = "overshoot",
    start_year: float = DEFAULT_START_YEAR,
    ramp_years: float | None = None,
    own_schedules: bool = True,
    source: str = "<scenario>",
    progress: Progress = silent,
) -> Frontier:
    """The least hold (years at the floor) for each depth below the recovery threshold (control
    units), when the control then relaxes to ``relax_to``; and for each of ``hold_years`` the
    least depth. Defaults: relax_to from ``default_relax_to``, depths from ``default_depths``.

    ``start_year`` (years from now, default 0): when the descent begins. ``ramp_years`` (years):
    the length of each ramp, down and up; 0 asks for instant jumps. By default the ramps follow
    the scenario's largest yearly change (``control.max_change_per_year``), or take
    DEFAULT_RAMP_YEARS when it sets none.

    User errors (no recovery threshold; relax_to, depths, holds, start_year or ramp_years out of
    range; asked ramps faster than the largest yearly change) raise InputError naming
    ``source``.
    """
    problems = _checked_ramp_options(scenario, start_year, ramp_years, source)
    if problems:  # before the diagram: these need none
        raise InputError(problems)
    holds = _checked_holds(hold_years, source)
    diagram, threshold, relax = prepared(
        scenario, diagram, relax_to, (family,), source, scaled(progress, 0.0, 0.1)
    )
    chosen = (
        default_depths(scenario, threshold)
        if depths is None
        else _checked_depths(scenario, threshold, depths, source)
    )
    chosen_family = family_for(
        scenario, family, relax, start_year=start_year, ramp_years=ramp_years, source=source
    )
    checked_ramp_to(chosen_family, threshold - float(chosen[-1]), source)
    verdicts = Verdicts(scenario, diagram, chosen_family)
    share = 0.8 if holds.size else 0.9
    points = frontier_points(
        verdicts, threshold, chosen, progress=scaled(progress, 0.1, 0.1 + share * 0.9)
    )
    converse = []
    deepest = threshold - scenario.control.least
    for i, hold in enumerate(holds):
        depth, _ = least_depth(verdicts, threshold, float(hold), deepest)
        converse.append(
            ConversePoint(
                hold_years=float(hold),
                depth=depth,
                floor=None if depth is None else threshold - depth,
            )
        )
        progress(0.82 + 0.08 * (i + 1) / holds.size, f"hold {hold:g} yr: least depth")
    own = own_overshoots(scenario, diagram, threshold) if own_schedules else []
    progress(1.0, "done")
    return Frontier(
        scenario_name=scenario.name,
        family=verdicts.family,
        recovery_threshold=threshold,
        lowest_achievable=scenario.control.least,
        unit=scenario.control.unit,
        points=tuple(points),
        converse=tuple(converse),
        own=tuple(own),
        verdicts=verdicts.count,
    )


# ---------------------------------------------------------------------------------------------
# Plain data for JSON, tables and text


def ramp_words(family: Family, unit: str = "") -> str:
    """Which ramps the family used and where they come from, then when the descent begins, as
    two phrases joined by "; " (terminal summary, web app); ``unit`` is the control's unit."""
    per_year = f" {unit}" if unit else ""
    if family.ramp_source == "rate limit":
        ramps = (
            f"ramps at the largest yearly change, {family.rate:g}{per_year} per year "
            "(control.max_change_per_year)"
        )
    elif family.ramp_source == "default":
        ramps = f"ramps of {family.ramp:g} yr each (the default: no largest yearly change is set)"
    elif family.ramp == 0:
        ramps = "instant jumps (asked: ramp_years 0)"
    else:
        ramps = f"ramps of {family.ramp:g} yr each (asked: ramp_years)"
    return f"{ramps}; the descent begins in year {family.start_year:g}"


def frontier_json(frontier: Frontier) -> dict[str, Any]:
    """The `planner frontier --json` object: recovery_threshold, relax_to, the ramps used
    (``ramp``: source "rate limit" | "default" | "asked", years or null when they follow the
    rate limit), the start_year of the descent, and points (depth, floor, hold_years or null,
    time_below_threshold, the ramps' years at that floor), plus the converse and the
    scenario's own overshoot schedules. Holds and times below the threshold are in years."""
    family = frontier.family
    return {
        "scenario": frontier.scenario_name,
        "family": family.kind,
        "unit": frontier.unit,
        "recovery_threshold": frontier.recovery_threshold,
        "relax_to": family.relax_to,
        "lowest_achievable": frontier.lowest_achievable,
        "largest_yearly_change": family.rate,
        "horizon": family.horizon,
        "start_year": family.start_year,
        "ramp": {
            "source": family.ramp_source,
            "years": family.ramp,
            "largest_yearly_change": family.rate,
        },
        "tolerance_years": HOLD_TOLERANCE,
        "points": [
            {
                "depth": p.depth,
                "floor": p.floor,
                "hold_years": p.hold_years,
                "time_below_threshold": p.time_below_threshold,
                "ramp_down_years": p.ramp_down_years,
                "ramp_up_years": p.ramp_up_years,
                "achievable": p.achievable,
            }
            for p in frontier.points
        ],
        "converse": [
            {"hold_years": c.hold_years, "depth": c.depth, "floor": c.floor}
            for c in frontier.converse
        ],
        "own_schedules": [
            {
                "name": o.name,
                "depth": o.depth,
                "hold_years": o.hold_years,
                "time_below_threshold": o.time_below_threshold,
                "recovered": o.recovered,
                "verdict": o.verdict,
                "feasible": o.feasible,
                "with_actions": o.with_actions,
            }
            for o in frontier.own
        ],
        "verdicts_computed": frontier.verdicts,
    }


def frontier_rows(frontier: Frontier) -> tuple[tuple[str, ...], list[list[object]]]:
    """Table of the frontier: depth, floor, least hold_years, the ramps' years at that floor and
    time_below_threshold (years)."""
    unit = f" ({frontier.unit})" if frontier.unit else ""
    header = (
        f"depth{unit}",
        f"floor{unit}",
        "least hold_years",
        "ramp down (yr)",
        "ramp up (yr)",
        "time_below_threshold (yr)",
        "achievable",
    )
    rows = [
        [
            p.depth,
            p.floor,
            p.hold_years,
            p.ramp_down_years,
            p.ramp_up_years,
            p.time_below_threshold,
            "yes" if p.achievable else "no",
        ]
        for p in frontier.points
    ]
    return header, rows


def frontier_text(frontier: Frontier) -> str:
    """A terminal summary of the frontier, its converse and the scenario's own overshoots."""
    from planner.report import CAUTION, text_table

    family = frontier.family
    header, rows = frontier_rows(frontier)
    unit = f" {frontier.unit}" if frontier.unit else ""
    lines = [
        f"Recovery frontier: {frontier.scenario_name}",
        f"  recovery threshold {frontier.recovery_threshold:.4g}{unit}; the control relaxes to "
        f"{family.relax_to:.4g}{unit} ({family.kind}; horizon {family.horizon:g} yr)",
        f"  {ramp_words(family, frontier.unit)}",
        f"  hold_years: the least hold at the floor that recovers, to {HOLD_TOLERANCE:g} yr "
        "('-': none within the horizon);",
        "  time_below_threshold: that hold plus the ramps' years below the recovery threshold",
        "",
        text_table(
            header,
            [[*row[:2], *(_two_decimals(v) for v in row[2:6]), row[6]] for row in rows],
        ),
    ]
    if frontier.converse:
        lines += ["", "Least depth for a given hold:"]
        rows = [[_two_decimals(c.hold_years), c.depth, c.floor] for c in frontier.converse]
        lines.append(text_table(("hold_years", f"least depth{unit}", f"floor{unit}"), rows))
    if frontier.own:
        lines += ["", "The scenario's own overshoot schedules:"]
        rows = [
            [
                o.name,
                o.depth,
                _two_decimals(o.hold_years),
                _two_decimals(o.time_below_threshold),
                o.verdict + (" (with in-lake actions)" if o.with_actions else ""),
            ]
            for o in frontier.own
        ]
        header = ("schedule", f"depth{unit}", "hold_years", "time_below_threshold (yr)", "verdict")
        lines.append(text_table(header, rows))
    lines += ["", CAUTION]
    return "\n".join(lines)
