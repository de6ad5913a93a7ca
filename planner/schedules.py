"""Schedules as plain data: the control path u(t) and the discrete in-lake actions.

A schedule from the scenario file becomes a :class:`ControlPath` (piecewise linear in time,
jumps allowed) and an :class:`ActionTimeline` (state rescalings and parameter multipliers).
Times are in years from now (t = 0); control values are in the control's own unit, for example
t P / yr. Limits (lowest achievable value, largest yearly change) are checked, never enforced:
an infeasible schedule is reported with the first time it breaks a limit, and nothing is clipped.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from planner.scenario._base import MAX_YEARS
from planner.scenario.schedule_blocks import (
    InLakeMeasure,
    OvershootSchedule,
    ParameterPulse,
    PathSchedule,
    ScaleState,
    StaircaseSchedule,
)

REL_TOL = 1e-9
"""Relative slack before a limit counts as broken (absorbs rounding in the schedule's numbers)."""

LIMIT_LOWEST = "lowest achievable"
LIMIT_RATE = "largest yearly change"
LIMIT_CAPACITY = "abatement capacity"


def _with_unit(value: float, unit: str) -> str:
    return f"{value:g} {unit}" if unit else f"{value:g}"


# --------------------------------------------------------------------------------------------
# control path


@dataclass(frozen=True, eq=False)
class ControlPath:
    """Piecewise-linear control: breakpoints (times non-decreasing, starting at 0); a jump is two
    consecutive breakpoints with the same time. Held at the last value after the last breakpoint.

    Times in years, values in the control's unit. The path is right-continuous: at a jump time it
    takes the value after the jump. Before t = 0 it takes the first value.
    """

    times: np.ndarray
    values: np.ndarray
    _rise: np.ndarray = field(init=False, repr=False)  # value change to the next breakpoint
    _run: np.ndarray = field(init=False, repr=False)  # time to the next breakpoint (1 if none)

    def __post_init__(self) -> None:
        times = np.array(self.times, dtype=float).reshape(-1)
        values = np.array(self.values, dtype=float).reshape(-1)
        if times.size == 0 or times.size != values.size:
            raise ValueError("a control path needs equally many (at least one) times and values")
        if not (np.all(np.isfinite(times)) and np.all(np.isfinite(values))):
            raise ValueError("control path times and values must be finite")
        if times[0] != 0.0:
            raise ValueError(f"a control path starts at time 0, not {times[0]:g}")
        if np.any(np.diff(times) < 0):
            raise ValueError("control path times must be non-decreasing")
        # Interpolation uses the fraction of the piece elapsed, never a precomputed slope, so a
        # piece of tiny length cannot overflow into inf * 0.
        moving = np.append(np.diff(times) > 0, False)
        rise = np.where(moving, np.append(np.diff(values), 0.0), 0.0)
        run = np.where(moving, np.append(np.diff(times), 1.0), 1.0)
        for name, array in (("times", times), ("values", values), ("_rise", rise), ("_run", run)):
            array.setflags(write=False)
            object.__setattr__(self, name, array)

    def _on_piece(self, j: np.ndarray, t: np.ndarray) -> np.ndarray:
        """Value at t of the linear piece starting at breakpoint j (t clamped to that piece)."""
        share = np.clip((t - self.times[j]) / self._run[j], 0.0, 1.0)
        return self.values[j] + self._rise[j] * share

    def __call__(self, t: float | np.ndarray) -> float | np.ndarray:
        """Control value at time(s) t (years), right-continuous at jumps; vectorised."""
        ts = np.asarray(t, dtype=float)
        j = np.clip(np.searchsorted(self.times, ts, side="right") - 1, 0, self.times.size - 1)
        u = self._on_piece(j, ts)
        return float(u) if u.ndim == 0 else u

    def left_limit(self, t: float | np.ndarray) -> float | np.ndarray:
        """Limit of u(s) as s rises to t (years): the value just before a jump; vectorised.

        For t <= 0 this is the first value (the control before the schedule begins).
        """
        ts = np.asarray(t, dtype=float)
        j = np.clip(np.searchsorted(self.times, ts, side="left") - 1, 0, self.times.size - 1)
        u = self._on_piece(j, ts)
        return float(u) if u.ndim == 0 else u

    def slope(self, t: float | np.ndarray) -> float | np.ndarray:
        """Slope (control unit per year) of the linear piece starting at or containing t.

        After the last breakpoint, and before t = 0, the control is held: slope 0. Vectorised.
        """
        ts = np.asarray(t, dtype=float)
        j = np.clip(np.searchsorted(self.times, ts, side="right") - 1, 0, self.times.size - 1)
        with np.errstate(over="ignore"):
            s = np.where(ts < 0, 0.0, self._rise[j] / self._run[j])
        return float(s) if s.ndim == 0 else s

    def kinks(self, horizon: float) -> np.ndarray:
        """Sorted unique breakpoint times (years) in [0, horizon]."""
        inside = self.times[(self.times >= 0) & (self.times <= horizon)]
        return np.unique(inside)

    def pieces(self, horizon: float) -> list[tuple[float, float, float, float]]:
        """The path on [0, horizon] as (a, b, u(a+), u(b-)) in time order.

        Linear pieces have a < b (cut at the horizon, the held tail included); a jump at time a
        <= horizon is the piece (a, a, before, after).
        """
        out: list[tuple[float, float, float, float]] = []
        times, values = self.times, self.values
        for j in range(times.size - 1):
            a, b = float(times[j]), float(times[j + 1])
            if a > horizon or (a == horizon and b > a):
                break
            if b == a:
                if values[j] != values[j + 1]:
                    out.append((a, a, float(values[j]), float(values[j + 1])))
                continue
            end = min(b, horizon)
            v_end = float(values[j + 1]) if end == b else float(self._on_piece(j, end))
            out.append((a, end, float(values[j]), v_end))
        last = float(times[-1])
        if last < horizon:
            out.append((last, float(horizon), float(values[-1]), float(values[-1])))
        return out

    def minimum(self, horizon: float) -> float:
        """Lowest control value over [0, horizon] (from breakpoints and the value at the horizon).

        A value just before a jump at t > 0 counts (the control comes arbitrarily close to it).
        """
        # A jump contributes only its value after: the value before it is the end of the
        # previous piece, or, for a jump at t = 0, the value before the schedule begins.
        ends = [vb for _, _, _, vb in self.pieces(horizon)]
        starts = [va for a, b, va, _ in self.pieces(horizon) if b > a]
        return float(min([*ends, *starts, float(self(horizon))]))

    def time_below(self, level: float, horizon: float) -> float:
        """Total years in [0, horizon] with u(t) < level; exact for a piecewise-linear path."""
        total = 0.0
        for a, b, va, vb in self.pieces(horizon):
            length = b - a
            if length <= 0:
                continue
            if va < level and vb < level:
                total += length
            elif va >= level and vb >= level:
                continue
            else:
                s = (level - va) / (vb - va)  # fraction of the piece where u = level
                s = min(max(s, 0.0), 1.0)
                total += length * (s if vb > va else 1.0 - s)
        return total


def _tidy(points: list[tuple[float, float]]) -> ControlPath:
    """Build the path, keeping of several breakpoints at one time only the first and the last.

    A value passed through in zero time (say an overshoot with no ramps and no hold) is never
    taken by the control, so it is dropped; a run whose first and last values agree is one point.
    """
    kept: list[tuple[float, float]] = []
    i = 0
    while i < len(points):
        k = i
        while k + 1 < len(points) and points[k + 1][0] == points[i][0]:
            k += 1
        kept.append(points[i])
        if points[k][1] != points[i][1]:
            kept.append(points[k])
        i = k + 1
    times, values = zip(*kept, strict=True)
    return ControlPath(np.array(times), np.array(values))


def control_path(
    schedule: PathSchedule | StaircaseSchedule | OvershootSchedule, *, current: float
) -> ControlPath:
    """The control path u(t) a schedule asks for, starting from the ``current`` value at t = 0.

    - path: linear from ``current`` at t = 0 to the first point (a jump at t = 0 when that point
      is at time 0 with another value), then linear between points, held after the last.
    - staircase: ``current`` held until ``start``; the change to level k (from the previous level,
      or from ``current`` for k = 0) begins at start + k * step_years and takes ``ramp_years``
      (0: a jump); the level is then held until the next change; the last level is held.
    - overshoot: ``current`` held until ``start``; linear to ``floor`` over ``down_years`` (0: a
      jump); ``floor`` held for ``hold_years``; linear to ``relax_to`` over ``up_years`` (0: a
      jump); held after.

    Times in years, values in the control's unit.
    """
    current = float(current)
    points: list[tuple[float, float]] = [(0.0, current)]
    if isinstance(schedule, PathSchedule):
        points += [(float(t), float(v)) for t, v in schedule.points]
    elif isinstance(schedule, StaircaseSchedule):
        start, step, ramp = schedule.start, schedule.step_years, schedule.ramp_years
        points.append((start, current))
        previous = current
        for k, level in enumerate(schedule.levels):
            begin = start + k * step
            # A ramp as long as the step ends where the next change begins; rounding in
            # begin + ramp must not put it after that (the times would run backwards).
            end = min(begin + ramp, start + (k + 1) * step)
            points += [(begin, previous), (end, float(level))]
            previous = float(level)
    elif isinstance(schedule, OvershootSchedule):
        t = schedule.start
        points.append((t, current))
        t += schedule.down_years
        points.append((t, schedule.floor))
        t += schedule.hold_years
        points.append((t, schedule.floor))
        t += schedule.up_years
        points.append((t, schedule.relax_to))
    else:
        raise TypeError(f"not a schedule: {type(schedule).__name__}")
    return _tidy(points)


# --------------------------------------------------------------------------------------------
# limits


@dataclass(frozen=True)
class Infeasibility:
    """The first broken limit of a schedule.

    ``time`` in years; ``limit`` is "lowest achievable", "largest yearly change" or
    "abatement capacity"; ``message`` is a full sentence with numbers and units.
    """

    time: float
    limit: str
    message: str


def check_limits(
    path: ControlPath,
    *,
    horizon: float,
    lowest: float,
    max_change_per_year: float | None,
    unit: str = "",
) -> Infeasibility | None:
    """The first time in [0, horizon] (years) the path breaks a limit, or None.

    The control is below the lowest achievable value when it is lower by more than ``REL_TOL``
    relative to ``lowest``; a linear piece is too fast when its |slope| exceeds
    ``max_change_per_year`` (control unit per year) by more than ``REL_TOL`` relative; a jump is
    an infinite rate. When both limits break at the same time the lowest-value one is reported.
    """
    threshold = lowest - REL_TOL * abs(lowest)
    rate_cap = None if max_change_per_year is None else max_change_per_year * (1 + REL_TOL)
    per_year = f"{unit} per year" if unit else "per year"
    for a, b, va, vb in path.pieces(horizon):
        found: list[Infeasibility] = []
        low = f"the lowest achievable {_with_unit(lowest, unit)}"
        if b > a and va < threshold:
            found.append(
                Infeasibility(
                    a,
                    LIMIT_LOWEST,
                    f"at year {a:g} the control is {_with_unit(va, unit)}, below {low}",
                )
            )
        elif vb < threshold and b == a:
            found.append(
                Infeasibility(
                    a,
                    LIMIT_LOWEST,
                    f"at year {a:g} the control jumps to {_with_unit(vb, unit)}, below {low}",
                )
            )
        elif vb < threshold:
            share = min(max((lowest - va) / (vb - va), 0.0), 1.0)  # where u = lowest
            when = a + share * (b - a)
            found.append(
                Infeasibility(
                    when,
                    LIMIT_LOWEST,
                    f"at year {when:g} the control falls below {low}; "
                    f"it reaches {_with_unit(vb, unit)} at year {b:g}",
                )
            )
        if rate_cap is not None and va != vb:
            if b == a:
                found.append(
                    Infeasibility(
                        a,
                        LIMIT_RATE,
                        f"at year {a:g} the control jumps from {_with_unit(va, unit)} to "
                        f"{_with_unit(vb, unit)} at once, an infinite rate against the largest "
                        f"yearly change {max_change_per_year:g} {per_year}",
                    )
                )
            elif abs(vb - va) / (b - a) > rate_cap:
                rate = abs(vb - va) / (b - a)
                found.append(
                    Infeasibility(
                        a,
                        LIMIT_RATE,
                        f"from year {a:g} the control changes by {rate:g} {per_year}, more than "
                        f"the largest yearly change {max_change_per_year:g} {per_year}",
                    )
                )
        if found:
            return min(found, key=lambda f: (f.time, f.limit != LIMIT_LOWEST))
    return None


# --------------------------------------------------------------------------------------------
# actions


def _pulse_multiplier(pulse: ParameterPulse, t: float | np.ndarray) -> float | np.ndarray:
    """The pulse's multiplier at time(s) t (years); vectorised over t."""
    end = pulse.start + pulse.duration
    if isinstance(t, float | int) or np.ndim(t) == 0:  # one time: plain floats (every step)
        t = float(t)
        if t < pulse.start:
            return 1.0
        if t < end:
            return float(pulse.factor)
        if pulse.decay_years > 0:
            return 1.0 + (pulse.factor - 1.0) * math.exp(-(t - end) / pulse.decay_years)
        return 1.0
    t = np.asarray(t, dtype=float)
    after = np.ones_like(t)
    if pulse.decay_years > 0:
        with np.errstate(over="ignore"):
            after = 1.0 + (pulse.factor - 1.0) * np.exp(
                -np.maximum(t - end, 0.0) / pulse.decay_years
            )
    return np.where(t < pulse.start, 1.0, np.where(t < end, float(pulse.factor), after))


@dataclass(frozen=True, eq=False)
class MemberMeasure:
    """An in-lake measure whose effect and longevity differ between ensemble members.

    From each dose time in ``starts`` (years) the parameter is multiplied by ``factor`` for
    ``longevity`` years, then not at all; overlapping doses do not compound. ``factor`` and
    ``longevity`` are arrays over members (or floats). The engine reads it as a pulse that ends
    at once (``decay_years`` 0): its parameter is then fixed on each stretch between cuts, and
    :meth:`ActionTimeline.kinks` cuts at every member's end of effect.
    """

    parameter: str
    name: str
    starts: tuple[float, ...]
    factor: float | np.ndarray
    longevity: float | np.ndarray

    decay_years = 0.0

    @property
    def start(self) -> float:
        """Year of the first dose."""
        return self.starts[0]

    def active(self, t: float | np.ndarray) -> np.ndarray:
        """Whether some dose works at time t (years): per member, (members,) for a scalar t, or
        t's shape when t has one time per member."""
        t = np.asarray(t, dtype=float)
        longevity = np.asarray(self.longevity, dtype=float)
        on = np.zeros(np.broadcast_shapes(t.shape, longevity.shape), dtype=bool)
        for start in self.starts:
            on |= (t >= start) & (t < start + longevity)
        return on

    def multiplier(self, t: float | np.ndarray, index: np.ndarray | None = None) -> np.ndarray:
        """The multiplier at time t (years), per member; of the members ``index`` only (t then
        one time or one per member of them) when given."""
        picked = self if index is None else self.subset(index)
        return np.where(picked.active(t), picked.factor, 1.0)

    def subset(self, index: np.ndarray) -> MemberMeasure:
        """The measure of some members only."""

        def pick(value):
            return value if np.ndim(value) == 0 else np.asarray(value)[index]

        return MemberMeasure(
            self.parameter, self.name, self.starts, pick(self.factor), pick(self.longevity)
        )

    def ends(self) -> np.ndarray:
        """Every time (years) a dose starts or stops working, over all members."""
        longevity = np.atleast_1d(np.asarray(self.longevity, dtype=float))
        starts = np.asarray(self.starts, dtype=float)
        return np.concatenate([starts, (starts[:, None] + longevity[None, :]).ravel()])


@dataclass(frozen=True)
class MeasurePlan:
    """An in-lake measure action as one run plans it, and what an ensemble draws for it.

    ``action``: the schedule's action (catalogue entry, lake type, doses, fixed values);
    ``index``: its place among the schedule's actions; ``occurrence``: how many earlier actions
    of the schedule use the same catalogue entry (members draw alike for the k-th use of an
    entry in every schedule: common random numbers). ``effect`` and ``longevity`` are the
    central values (medians, or the fixed values) one run uses; ``pulses`` the positions in
    :attr:`ActionTimeline.pulses` of the pulses that carry them.
    """

    action: InLakeMeasure
    index: int
    occurrence: int
    effect: float
    longevity: float
    pulses: tuple[int, ...]

    @property
    def certain(self) -> bool:
        """Whether effect and longevity are both fixed (every member takes them)."""
        return self.action.effect is not None and self.action.longevity_years is not None


def _active_intervals(starts: tuple[float, ...], longevity: float) -> list[tuple[float, float]]:
    """The union of [start, start + longevity) over the doses, as ordered disjoint intervals."""
    merged: list[list[float]] = []
    for start in sorted(starts):
        end = start + longevity
        if merged and start <= merged[-1][1]:
            merged[-1][1] = max(merged[-1][1], end)
        else:
            merged.append([start, end])
    return [(a, b) for a, b in merged]


def measure_central_values(action: InLakeMeasure) -> tuple[float, float]:
    """(effect factor, longevity in years) one deterministic run uses: the fixed values when the
    action gives them, else the medians of the catalogue's distributions for its lake type (the
    longevity in whole months, as every catalogue longevity)."""
    from planner.measures import CATALOGUE, whole_months
    from planner.scenario.uncertainty import prior_median

    figures = CATALOGUE[action.measure].figures(action.lake_type)
    effect = action.effect if action.effect is not None else prior_median(figures.effect)
    if action.longevity_years is not None:
        longevity = action.longevity_years
    else:
        longevity = whole_months(prior_median(figures.longevity))
    return float(effect), float(longevity)


@dataclass(frozen=True)
class ActionTimeline:
    """Events and parameter multipliers of a schedule's actions.

    ``state_events``: (time in years, state variable, factor) sorted by time.
    ``pulses``: the parameter pulses, in the order given, then those of the in-lake measures:
    at their central values a measure is one pulse (ending at once) per stretch during which a
    dose works; in an ensemble (:meth:`for_members`) a :class:`MemberMeasure`.
    ``one_off_costs``: (time in years, cost in the scenario's currency) for every action, sorted by
    time; a pulse's cost falls at its start, a measure's capital cost at each dose.
    ``running_costs``: (start, end, cost per year) of the measures, over the years they are
    planned to work (at their central longevity).
    ``measures``: the in-lake measures, for ensembles to draw.
    """

    state_events: tuple[tuple[float, str, float], ...]
    pulses: tuple[ParameterPulse | MemberMeasure, ...]
    one_off_costs: tuple[tuple[float, float], ...]
    running_costs: tuple[tuple[float, float, float], ...] = ()
    measures: tuple[MeasurePlan, ...] = ()

    def multipliers(
        self, t: float | np.ndarray, index: np.ndarray | None = None
    ) -> dict[str, float | np.ndarray]:
        """Per pulsed parameter, the product of all its pulses' multipliers at time t (years).

        A pulse multiplies by 1 before its start, by ``factor`` on [start, start + duration), and
        after that by 1 + (factor - 1) exp(-(t - end) / decay_years) if decay_years > 0, else 1.
        A :class:`MemberMeasure` gives one multiplier per member (of the members ``index`` only,
        when given).
        """
        out: dict[str, float | np.ndarray] = {}
        for pulse in self.pulses:
            if isinstance(pulse, MemberMeasure):
                value = pulse.multiplier(t, index)
            else:
                value = _pulse_multiplier(pulse, t)
            out[pulse.parameter] = out.get(pulse.parameter, 1.0) * value
        return out

    def kinks(self, horizon: float) -> np.ndarray:
        """Sorted unique times (years) in [0, horizon] where an action starts, ends or happens
        (for a :class:`MemberMeasure`, every member's)."""
        times = [event[0] for event in self.state_events]
        extra = []
        for pulse in self.pulses:
            if isinstance(pulse, MemberMeasure):
                extra.append(pulse.ends())
            else:
                times += [pulse.start, pulse.start + pulse.duration]
        array = np.concatenate([np.array(times, dtype=float), *extra])
        return np.unique(array[(array >= 0) & (array <= horizon)])

    @property
    def uncertain_measures(self) -> tuple[MeasurePlan, ...]:
        """The in-lake measures whose effect or longevity an ensemble draws per member."""
        return tuple(plan for plan in self.measures if not plan.certain)

    def for_members(
        self, draws: dict[int, tuple[np.ndarray | float, np.ndarray | float]]
    ) -> ActionTimeline:
        """This timeline with the in-lake measures of ``draws`` (action index -> (effect
        factors, longevities), arrays over members) acting per member: their central pulses
        replaced by :class:`MemberMeasure` objects. Costs stay as planned."""
        if not draws:
            return self
        replaced = {i for plan in self.measures if plan.index in draws for i in plan.pulses}
        pulses = [pulse for i, pulse in enumerate(self.pulses) if i not in replaced]
        for plan in self.measures:
            if plan.index not in draws:
                continue
            effect, longevity = draws[plan.index]
            pulses.append(
                MemberMeasure(
                    parameter=plan.action.parameter,
                    name=plan.action.name,
                    starts=plan.action.dose_times,
                    factor=effect,
                    longevity=longevity,
                )
            )
        return ActionTimeline(
            state_events=self.state_events,
            pulses=tuple(pulses),
            one_off_costs=self.one_off_costs,
            running_costs=self.running_costs,
            measures=self.measures,
        )


def action_timeline(
    schedule: PathSchedule | StaircaseSchedule | OvershootSchedule,
) -> ActionTimeline:
    """Collect a schedule's actions: state rescalings, parameter pulses, in-lake measures (at
    their central values; see :func:`measure_central_values`) and their costs."""
    events: list[tuple[float, str, float]] = []
    pulses: list[ParameterPulse] = []
    costs: list[tuple[float, float]] = []
    running: list[tuple[float, float, float]] = []
    measures: list[tuple[int, InLakeMeasure]] = []
    for index, action in enumerate(schedule.actions):
        if isinstance(action, ScaleState):
            events.append((float(action.time), action.variable, float(action.factor)))
            costs.append((float(action.time), float(action.cost)))
        elif isinstance(action, ParameterPulse):
            pulses.append(action)
            costs.append((float(action.start), float(action.cost)))
        elif isinstance(action, InLakeMeasure):
            measures.append((index, action))
        else:
            raise TypeError(f"not an action: {type(action).__name__}")
    plans: list[MeasurePlan] = []
    used: dict[str, int] = {}
    for index, action in measures:
        effect, longevity = measure_central_values(action)
        first = len(pulses)
        for a, b in _active_intervals(action.dose_times, longevity):
            b = min(b, a + MAX_YEARS)  # past any horizon: the rest never counts
            pulses.append(
                ParameterPulse(
                    kind="parameter-pulse",
                    name=action.name,
                    parameter=action.parameter,
                    factor=effect,
                    start=a,
                    duration=b - a,
                )
            )
            if action.running_cost > 0:
                running.append((a, b, float(action.running_cost)))
        costs += [(float(t), float(action.capital_cost)) for t in action.dose_times]
        occurrence = used.get(action.measure, 0)
        used[action.measure] = occurrence + 1
        plans.append(
            MeasurePlan(
                action=action,
                index=index,
                occurrence=occurrence,
                effect=effect,
                longevity=longevity,
                pulses=tuple(range(first, len(pulses))),
            )
        )
    return ActionTimeline(
        state_events=tuple(sorted(events, key=lambda e: e[0])),
        pulses=tuple(pulses),
        one_off_costs=tuple(sorted(costs, key=lambda c: c[0])),
        running_costs=tuple(running),
        measures=tuple(plans),
    )
