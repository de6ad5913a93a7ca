"""The cheapest recovering schedule of a family, and the trade-off between money and time.

Families (``planner.frontier.Family``): overshoot (ramp down to a floor at the largest yearly
change, hold, ramp up to relax_to) and a two-level staircase. Each has two free numbers, the floor
(control unit) and the hold (years). A schedule is admissible when it recovers, keeps every
limit (lowest achievable control, largest yearly change, abatement capacity) and, when asked,
meets the water-quality target from year ``by_year`` on. Its price is the present value from
``planner.costs`` (abatement, damages while the target is not met, discounting).

Method: at each floor the admissible holds form an interval [h_min(floor), the longest that fits
the horizon], because recovering and meeting the target are monotone in the hold (lower loads
give lower phosphorus at every time); h_min is found by bisection (``planner.frontier``), so the
search walks along the recovery frontier. The price at a floor is often smallest a little above
h_min: at h_min itself the state creeps past the basin boundary and meets the target late
(damages), and longer holds pay more abatement. So at each floor a few holds from h_min upward
locate that valley and Brent's bounded minimisation (scipy.optimize.minimize_scalar; Brent 1973,
Algorithms for Minimization without Derivatives, ch. 5, from memory) refines it; a coarse grid of
floors locates the cheapest region and Brent's method refines the floor there. The Pareto front
keeps every evaluated admissible schedule that no other beats on both present value and years to
meet the target.
"""

from __future__ import annotations

import math
import os
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.optimize import minimize_scalar

from planner.equilibria import Diagram
from planner.errors import InputError, Problem
from planner.frontier import (
    FAMILY_KINDS,
    HOLD_TOLERANCE,
    SMALLEST_DEPTH,
    FamilyKind,
    Verdicts,
    family_for,
    least_hold,
    prepared,
)
from planner.outcomes import evaluate
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, Schedule, save_scenario, scenario_from_data

COARSE_FLOORS = 7  # floors on the coarse grid, from the lowest usable to just below the threshold
INNER_STEPS = (0.0, 0.25, 0.5, 1.0, 2.0)  # years above h_min(floor) tried before Brent refines
PARETO_STEPS = (4.0, 8.0)  # longer holds tried at the coarse floors (they meet the target sooner)
FLOOR_TOLERANCE = 1e-3  # Brent's tolerance in the floor, as a fraction of the range width
REFINE_ITERATIONS = 12
BRACKET_DOUBLINGS_FROM = 5  # year-by bracket: first try h_min + 0.32 yr, then double the step
PARETO_ROWS = 10  # rows of the Pareto front printed in the terminal summary (JSON has all)
PENALTY = 1e30  # stands in for the price of an inadmissible schedule inside Brent's method


@dataclass(frozen=True)
class Candidate:
    """One evaluated schedule of a family: floor (control unit), hold (years), its verdict and
    present value (the scenario's currency), and when it meets the target (years, or None)."""

    family: FamilyKind
    floor: float
    hold: float
    depth: float
    schedule: Schedule
    recovered: bool
    feasible: bool
    present_value: float
    total_cost: float
    meets_target_at: float | None

    def admissible(self, by_year: float | None) -> bool:
        """Recovers, keeps every limit and, when ``by_year`` is set, meets the target by then."""
        if not (self.recovered and self.feasible):
            return False
        if by_year is None:
            return True
        return self.meets_target_at is not None and self.meets_target_at <= by_year


@dataclass(frozen=True)
class FamilySearch:
    """What the search found in one family: the cheapest admissible candidate (or None), every
    candidate it evaluated, and the least admissible hold at each coarse floor."""

    kind: FamilyKind
    cheapest: Candidate | None
    candidates: tuple[Candidate, ...]
    coarse_frontier: tuple[tuple[float, float | None], ...]


@dataclass(frozen=True)
class SearchResult:
    """The search over the scenario's families, with the overall cheapest and the Pareto front
    (present value against years to meet the target) over all admissible candidates."""

    scenario_name: str
    currency: str
    unit: str
    recovery_threshold: float
    relax_to: float
    by_year: float | None
    families: tuple[FamilySearch, ...]
    cheapest: Candidate | None
    pareto: tuple[Candidate, ...]

    @property
    def candidates(self) -> tuple[Candidate, ...]:
        return tuple(c for family in self.families for c in family.candidates)


def pareto_front(candidates: Sequence[Candidate]) -> list[Candidate]:
    """The candidates that meet the target and that no other beats on both present value and
    years to meet the target (ties: the earlier evaluated one), by ascending present value."""
    usable = [c for c in candidates if c.meets_target_at is not None]
    usable.sort(key=lambda c: (c.present_value, c.meets_target_at))
    front: list[Candidate] = []
    for candidate in usable:
        if not front or candidate.meets_target_at < front[-1].meets_target_at:
            front.append(candidate)
    return front


def _checked_by_year(scenario: Scenario, by_year: float | None, source: str) -> float | None:
    if by_year is None:
        return None
    horizon = scenario.simulation.horizon
    if scenario.target.threshold is None:
        reason = "needs a water-quality target: set [target] threshold in the scenario"
    elif not (math.isfinite(by_year) and 0 <= by_year <= horizon):
        reason = f"{by_year:g} must be a year between 0 and the horizon {horizon:g}"
    else:
        return float(by_year)
    raise InputError([Problem(source, "by_year", reason)])


def _usable_floors(scenario: Scenario, threshold: float) -> tuple[float, float]:
    """Lowest and highest floor worth searching: not below the lowest achievable control nor
    below what the abatement measures can supply, and just below the recovery threshold."""
    low, high = scenario.control.range
    bottom = scenario.control.least
    costs = scenario.costs
    if costs is not None and costs.measures:
        baseline = scenario.current_control if costs.baseline is None else costs.baseline
        bottom = max(bottom, baseline - sum(m.capacity for m in costs.measures))
    top = threshold - SMALLEST_DEPTH * (high - low)
    return bottom, top


class _FamilySearcher:
    """Evaluations for one family, remembered so that no schedule is evaluated twice."""

    def __init__(
        self,
        scenario: Scenario,
        diagram: Diagram,
        kind: FamilyKind,
        relax_to: float,
        threshold: float,
        by_year: float | None,
    ):
        self.scenario = scenario
        self.diagram = diagram
        self.family = family_for(scenario, kind, relax_to)
        self.verdicts = Verdicts(scenario, diagram, self.family)
        self.threshold = threshold
        self.by_year = by_year
        self.evaluated: dict[tuple[float, float], Candidate] = {}
        self._least: dict[float, float | None] = {}

    def candidate(self, floor: float, hold: float) -> Candidate:
        key = (float(floor), float(hold))
        if key not in self.evaluated:
            schedule = self.family.schedule(floor, hold)
            outcome = evaluate(self.scenario, self.diagram, schedule)
            self.evaluated[key] = Candidate(
                family=self.family.kind,
                floor=float(floor),
                hold=float(hold),
                depth=self.threshold - float(floor),
                schedule=schedule,
                recovered=outcome.recovered,
                feasible=outcome.feasible,
                present_value=outcome.cost.present_value,
                total_cost=outcome.cost.total,
                meets_target_at=outcome.meets_target_at,
            )
        return self.evaluated[key]

    def price(self, floor: float, hold: float) -> float:
        """Present value of an admissible schedule; infinity otherwise."""
        candidate = self.candidate(floor, hold)
        return candidate.present_value if candidate.admissible(self.by_year) else math.inf

    def least_admissible_hold(self, floor: float) -> float | None:
        """Least hold (years) at ``floor`` that recovers and, with by_year, meets the target by
        then; to HOLD_TOLERANCE, by bisection on monotone verdicts."""
        floor = float(floor)
        if floor in self._least:
            return self._least[floor]
        hold = least_hold(self.verdicts, floor)
        if hold is not None and self.by_year is not None:
            hold = self._least_meeting(floor, hold)
        self._least[floor] = hold
        return hold

    def _least_meeting(self, floor: float, low: float) -> float | None:
        def meets(hold: float) -> bool:
            found = self.candidate(floor, hold)
            return found.meets_target_at is not None and found.meets_target_at <= self.by_year

        latest = self.family.max_hold(floor)
        if meets(low):
            return low
        step = HOLD_TOLERANCE * 2**BRACKET_DOUBLINGS_FROM  # the extra hold needed is often small
        high = min(low + step, latest)
        while not meets(high):
            if high >= latest:
                return None
            low, step = high, 2 * step
            high = min(high + step, latest)
        while high - low > HOLD_TOLERANCE:
            middle = 0.5 * (low + high)
            if meets(middle):
                high = middle
            else:
                low = middle
        return high

    def cheapest_at(self, floor: float) -> float:
        """Least present value over the admissible holds at ``floor`` (infinity when none).

        Price against hold falls steeply just above h_min (at h_min itself the state creeps
        past the basin boundary and meets the target late, which costs damages) and then rises
        with the abatement paid for the longer hold; a few holds from h_min upward locate the
        valley and Brent's method refines it.
        """
        floor = float(floor)
        least = self.least_admissible_hold(floor)
        if least is None:
            return math.inf
        latest = self.family.max_hold(floor)
        holds = [least + step for step in INNER_STEPS if least + step <= latest]
        prices = [self.price(floor, hold) for hold in holds]
        i = int(np.argmin(prices))
        low, high = holds[max(i - 1, 0)], holds[min(i + 1, len(holds) - 1)]
        if high - low > HOLD_TOLERANCE:
            minimize_scalar(
                lambda hold: min(self.price(floor, hold), PENALTY),
                bounds=(low, high),
                method="bounded",
                options={"xatol": HOLD_TOLERANCE, "maxiter": REFINE_ITERATIONS},
            )
        return min(
            (
                c.present_value
                for (f, _), c in self.evaluated.items()
                if f == floor and c.admissible(self.by_year)
            ),
            default=math.inf,
        )

    def run(self, progress: Progress) -> FamilySearch:
        scenario = self.scenario
        low, high = scenario.control.range
        bottom, top = _usable_floors(scenario, self.threshold)
        if top < bottom:
            return FamilySearch(self.family.kind, None, (), ())
        floors = np.linspace(bottom, top, COARSE_FLOORS)
        coarse: list[tuple[float, float | None]] = []
        best_prices = []
        for i, floor in enumerate(floors):
            best_prices.append(self.cheapest_at(floor))
            least = self.least_admissible_hold(floor)
            coarse.append((float(floor), least))
            if least is not None:  # longer holds too: they meet the target sooner (Pareto)
                for step in PARETO_STEPS:
                    if least + step <= self.family.max_hold(floor):
                        self.price(floor, least + step)
            progress(0.6 * (i + 1) / len(floors), f"{self.family.kind}: floor {floor:.3g}")
        if np.isfinite(np.min(best_prices)):
            index = int(np.argmin(best_prices))
            left, right = floors[max(index - 1, 0)], floors[min(index + 1, len(floors) - 1)]
            progress(0.65, f"{self.family.kind}: refining the floor")
            minimize_scalar(
                lambda floor: min(self.cheapest_at(floor), PENALTY),
                bounds=(float(left), float(right)),
                method="bounded",
                options={"xatol": FLOOR_TOLERANCE * (high - low), "maxiter": REFINE_ITERATIONS},
            )
        progress(1.0, f"{self.family.kind}: done")
        return FamilySearch(
            kind=self.family.kind,
            cheapest=self._best(),
            candidates=tuple(self.evaluated.values()),
            coarse_frontier=tuple(coarse),
        )

    def _best(self) -> Candidate | None:
        admissible = [c for c in self.evaluated.values() if c.admissible(self.by_year)]
        if not admissible:
            return None
        return min(admissible, key=_ranking)


def _ranking(candidate: Candidate) -> tuple[float, float, float]:
    """Cheapest first; among equal prices the one meeting the target sooner, then shorter hold."""
    meets = math.inf if candidate.meets_target_at is None else candidate.meets_target_at
    return (candidate.present_value, meets, candidate.hold)


def search(
    scenario: Scenario,
    *,
    diagram: Diagram | None = None,
    relax_to: float | None = None,
    by_year: float | None = None,
    families: Sequence[FamilyKind] = FAMILY_KINDS,
    source: str = "<scenario>",
    progress: Progress = silent,
) -> SearchResult:
    """The cheapest admissible schedule of each family and overall, and the Pareto front of
    present value against years to meet the target.

    ``relax_to`` (control unit) defaults as for the frontier; ``by_year`` (years) asks that the
    target be met from that year on. User errors raise InputError naming ``source``.
    """
    diagram, threshold, relax = prepared(
        scenario, diagram, relax_to, families, source, scaled(progress, 0.0, 0.05)
    )
    year = _checked_by_year(scenario, by_year, source)
    found = []
    share = 0.95 / max(len(families), 1)
    for i, kind in enumerate(families):
        searcher = _FamilySearcher(scenario, diagram, kind, relax, threshold, year)
        found.append(searcher.run(scaled(progress, 0.05 + i * share, 0.05 + (i + 1) * share)))
    best = [f.cheapest for f in found if f.cheapest is not None]
    admissible = [c for f in found for c in f.candidates if c.recovered and c.feasible]
    progress(1.0, "done")
    return SearchResult(
        scenario_name=scenario.name,
        currency=scenario.costs.currency if scenario.costs is not None else "",
        unit=scenario.control.unit,
        recovery_threshold=threshold,
        relax_to=relax,
        by_year=year,
        families=tuple(found),
        cheapest=min(best, key=_ranking) if best else None,
        pareto=tuple(pareto_front(admissible)),
    )


# ---------------------------------------------------------------------------------------------
# Writing a found schedule back


def unique_name(scenario: Scenario, name: str) -> str:
    """``name``, or ``name (2)``, ``name (3)``... so that no schedule of the scenario shares it."""
    taken = {s.name for s in scenario.schedules}
    if name not in taken:
        return name
    k = 2
    while f"{name} ({k})" in taken:
        k += 1
    return f"{name} ({k})"


def found_schedule(scenario: Scenario, candidate: Candidate) -> Schedule:
    """The candidate's schedule, named for the scenario ("Cheapest found: ...", unique)."""
    name = unique_name(scenario, f"Cheapest found: {candidate.schedule.name}")
    return candidate.schedule.model_copy(update={"name": name})


def with_schedule(scenario: Scenario, schedule: Schedule, source: str = "<scenario>") -> Scenario:
    """A new scenario: this one with ``schedule`` appended (validated as a whole again)."""
    data = scenario.model_dump(mode="json", exclude_none=True)
    data["schedules"] = [*data.get("schedules", []), schedule.model_dump(mode="json")]
    return scenario_from_data(data, source)


def save_found(
    scenario: Scenario,
    candidate: Candidate,
    path: str | os.PathLike[str],
    *,
    overwrite: bool = False,
) -> tuple[Scenario, Schedule]:
    """Write the scenario with the candidate appended (atomic; refuses to replace an existing
    file unless ``overwrite``). Returns the new scenario and the schedule as saved."""
    schedule = found_schedule(scenario, candidate)
    new = with_schedule(scenario, schedule, str(path))
    save_scenario(new, path, overwrite=overwrite)
    return new, schedule


# ---------------------------------------------------------------------------------------------
# Plain data for JSON, tables and text


def candidate_json(candidate: Candidate | None) -> dict[str, Any] | None:
    """One candidate as plain data, with its schedule as it would be written to a file."""
    if candidate is None:
        return None
    return {
        "family": candidate.family,
        "name": candidate.schedule.name,
        "floor": candidate.floor,
        "depth": candidate.depth,
        "hold": candidate.hold,
        "recovered": candidate.recovered,
        "feasible": candidate.feasible,
        "present_value": candidate.present_value,
        "total_cost": candidate.total_cost,
        "meets_target_at": candidate.meets_target_at,
        "schedule": candidate.schedule.model_dump(mode="json"),
    }


def search_json(result: SearchResult) -> dict[str, Any]:
    """The `planner search --json` object: the cheapest overall and per family, and the Pareto
    front (present value against years to meet the target)."""
    return {
        "scenario": result.scenario_name,
        "currency": result.currency,
        "unit": result.unit,
        "recovery_threshold": result.recovery_threshold,
        "relax_to": result.relax_to,
        "by_year": result.by_year,
        "cheapest": candidate_json(result.cheapest),
        "families": [
            {
                "family": f.kind,
                "cheapest": candidate_json(f.cheapest),
                "evaluated": len(f.candidates),
                "coarse_frontier": [{"floor": a, "least_hold": b} for a, b in f.coarse_frontier],
            }
            for f in result.families
        ],
        "pareto": [
            {
                "family": c.family,
                "name": c.schedule.name,
                "floor": c.floor,
                "hold": c.hold,
                "present_value": c.present_value,
                "meets_target_at": c.meets_target_at,
            }
            for c in result.pareto
        ],
    }


def search_text(result: SearchResult) -> str:
    """A terminal summary: the cheapest schedule of each family and the Pareto front."""
    from planner.report import CAUTION, text_table

    unit = f" {result.unit}" if result.unit else ""
    currency = result.currency or "no currency set"
    lines = [
        f"Cheapest recovering schedules: {result.scenario_name}",
        f"  recovery threshold {result.recovery_threshold:.4g}{unit}; the control relaxes to "
        f"{result.relax_to:.4g}{unit}"
        + ("" if result.by_year is None else f"; target met by year {result.by_year:g}"),
        "",
    ]
    rows = []
    for family in result.families:
        c = family.cheapest
        if c is None:
            rows.append([family.kind, None, None, None, None, "none admissible"])
        else:
            rows.append(
                [family.kind, c.floor, f"{c.hold:.2f}", c.present_value, c.meets_target_at, "yes"]
            )
    header = (
        "family",
        f"floor{unit}",
        "hold (yr)",
        f"present value ({currency})",
        "meets target at (yr)",
        "found",
    )
    lines.append(text_table(header, rows))
    if result.cheapest is not None:
        lines += ["", f"Cheapest overall: {result.cheapest.schedule.name}"]
    else:
        lines += ["", "No admissible schedule found in these families."]
    if result.pareto:
        front = result.pareto
        shown = np.unique(np.linspace(0, len(front) - 1, min(len(front), PARETO_ROWS)).round())
        note = "" if len(shown) == len(front) else f", {len(shown)} of {len(front)} points shown"
        lines += ["", f"Money against time (Pareto front{note}):"]
        rows = [
            [c.family, c.floor, f"{c.hold:.2f}", c.present_value, c.meets_target_at]
            for c in (front[int(i)] for i in shown)
        ]
        lines.append(text_table(header[:5], rows))
    lines += ["", CAUTION]
    return "\n".join(lines)


def search_words(result, candidate=None) -> str:
    """One sentence about the cheapest schedule the search found (``candidate``: another)."""
    from planner.units import significant

    candidate = candidate or result.cheapest
    if candidate is None:
        return "The search found no schedule that recovers within the limits set."
    currency = result.currency
    meets = candidate.meets_target_at
    when = (
        "does not meet the target within the horizon"
        if meets is None
        else f"meets the target from year {significant(meets)} on"
    )
    return (
        f"Cheapest option found by the search: “{candidate.schedule.name}”, "
        f"{candidate.present_value:,.0f} {currency} in present value; it {when}"
    )
