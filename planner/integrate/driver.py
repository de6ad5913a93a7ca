"""The one driver: every integration in the planner runs through :func:`integrate`.

It cuts [0, horizon] at every kink of the control path, every action and (with load factors or
process noise) every calendar year, so no step straddles a discontinuity; applies state
rescalings between pieces; lets the chosen stepper take the steps of each piece; and after every
step checks divergence (non-finite, beyond the state limit, below zero for amounts), detects
crossings of a watched target (within a step by root finding on the step's interpolant, or at a
rescaling), keeps the samples asked for and, when settling, stops members whose state has
stopped moving. A single run is a batch of one.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from planner.integrate.options import SCALE_FLOOR, Limits, Save, Settling, Tolerance, Watch
from planner.integrate.problem import Pieces, Problem, held, system_limits
from planner.integrate.solution import CODE, Solution, Status, WatchRecord
from planner.integrate.solvers import SOLVERS, Step, StepError, Stepper
from planner.integrate.solvers.euler_maruyama import EulerMaruyama
from planner.models import System

ROOT_ITERATIONS = 40  # Illinois iterations locating a crossing inside a step
CROSSING_TOLERANCE = 1e-11  # years per year of the time: how tightly a crossing is bracketed
COMPACT_SHARE = 0.5  # settling: step only the members still moving once they are this few
SETTLE_TOLERANCE = Tolerance(rtol=1e-9, atol=1e-12)
SETTLE_CAP = 20000.0  # years
NOTHING_SAVED = Save()
DEFAULT_TOLERANCE = Tolerance()
SETTLED = Settling()


def choose_solver(problem: Problem, *, settling: bool = False) -> str:
    """The registry's default: LSODA for single runs, Euler-Maruyama under process noise,
    Rosenbrock for batches that settle (stiff over centuries), Dormand-Prince 8(5,3) otherwise
    (order 8: at the tolerances an ensemble needs it takes a fraction of the 5(4) pair's steps)."""
    if problem.noise is not None and not settling:
        return "euler-maruyama"
    scalar = all(np.ndim(v) == 0 for v in problem.system.parameter_values)
    if problem.members == 1 and scalar:
        return "lsoda"
    return "rosenbrock23" if settling else "dop853"


def _stepper(name: str, problem: Problem) -> Stepper:
    if name not in SOLVERS:
        raise ValueError(f"unknown solver {name!r}; known: {', '.join(SOLVERS)}")
    if name == "euler-maruyama":
        if problem.noise is None:
            raise ValueError("euler-maruyama needs process noise in the problem")
        return EulerMaruyama(problem.noise, problem.system.model.spec.nonnegative_state)
    stepper = SOLVERS[name]()
    if not stepper.batched and problem.members != 1:
        raise ValueError(f"{name} integrates single runs only")
    return stepper


class _Tracker:
    """The watched target: per member whether it is met, and every crossing (time, member,
    direction); the yearly time not meeting it is assembled from the crossings at the end."""

    def __init__(self, watch: Watch, x0: np.ndarray):
        self.watch = watch
        self.sign = watch.sign
        self.inside = self._inside(x0)
        self.met_at_start = self.inside.copy()
        self.events: list[np.ndarray] = []  # rows (time, member, +1 lost / -1 entered)
        self.absorbed: list[tuple[np.ndarray, np.ndarray]] = []  # (members, times) to stop

    def _inside(self, x: np.ndarray) -> np.ndarray:
        return self.sign * (x[self.watch.variable] - self.watch.level) <= 0.0

    def _switch(self, members: np.ndarray, times: np.ndarray, now_inside: np.ndarray) -> None:
        self.inside[members] = now_inside
        self.events.append(
            np.stack([times, members.astype(float), np.where(now_inside, -1.0, 1.0)], axis=1)
        )
        if self.watch.absorbing:
            self.absorbed.append((members[now_inside], times[now_inside]))

    def jump(self, t: float, live: np.ndarray, x: np.ndarray) -> None:
        """A rescaling at time t moved the live members' states to x (n, len(live))."""
        now = self._inside(x)
        changed = now != self.inside[live]
        if changed.any():
            self._switch(live[changed], np.full(int(changed.sum()), t), now[changed])

    def scan_single(self, step: Step, member: int, times, states) -> None:
        """A single run's stretch, given at its outputs: every change of side between two
        outputs is located exactly by short runs from the earlier output (the step's
        interpolant)."""
        inside = self.sign * (states[self.watch.variable] - self.watch.level) <= 0.0
        flags = np.concatenate([[bool(self.inside[member])], inside[1:]])
        for i in np.nonzero(flags[1:] != flags[:-1])[0] + 1:
            between = Step(
                times[i - 1],
                times[i],
                states[:, i - 1 : i],
                states[:, i : i + 1],
                None,
                None,
                0.0,
                step.interpolant,
            )
            time = self._locate(between, np.zeros(1, dtype=int))
            self._switch(np.array([member]), time, np.array([bool(inside[i])]))

    def step_single(self, step: Step, member: int) -> None:
        """One accepted step of a single run, on plain floats."""
        now = self.sign * (float(step.x1[self.watch.variable, 0]) - self.watch.level) <= 0.0
        if now != bool(self.inside[member]):
            time = self._locate(step, np.zeros(1, dtype=int))
            self._switch(np.array([member]), time, np.array([now]))

    def step(self, step: Step, members: np.ndarray, columns: np.ndarray | None) -> None:
        """One accepted step of ``members`` (the step's columns ``columns``; None: all)."""
        if step.x1.shape[1] == 1:  # a batch of one
            self.step_single(step, int(members[0]))
            return
        x1 = step.x1 if columns is None else step.x1[:, columns]
        now = self._inside(x1)
        changed = now != self.inside[members]
        if changed.any():
            where = np.nonzero(changed)[0]
            times = self._locate(step, where if columns is None else columns[where])
            self._switch(members[where], times, now[where])

    def _locate(self, step: Step, columns: np.ndarray) -> np.ndarray:
        """Crossing times of the members in ``columns`` by the Illinois method on the
        interpolant's gap; each member stops iterating once its bracket is tight, so its time
        does not depend on the other members."""
        k, level, sign = self.watch.variable, self.watch.level, self.sign
        m = step.x0.shape[1]
        if m == 1:
            return np.array([self._locate_single(step, k, level, float(sign))])
        a = np.array(np.broadcast_to(step.t0, (m,))[columns], dtype=float)
        b = np.array(np.broadcast_to(step.t1, (m,))[columns], dtype=float)
        ga = sign * (step.x0[k, columns] - level)
        gb = sign * (step.x1[k, columns] - level)
        tight = CROSSING_TOLERANCE * np.maximum(1.0, np.abs(b))
        done = (np.abs(b - a) <= tight) | (gb == 0)
        for _ in range(ROOT_ITERATIONS):
            if done.all():
                break
            with np.errstate(all="ignore"):
                c = b - gb * (b - a) / (gb - ga)
            low, high = np.minimum(a, b), np.maximum(a, b)
            c = np.where(np.isfinite(c) & (c >= low) & (c <= high), c, 0.5 * (a + b))
            state = step.at(c[0]) if m == 1 else step.at(c, columns)
            value = state[k, columns] if m == 1 else state[k]
            gc = sign * (value - level)
            opposite = np.sign(gc) != np.sign(gb)
            new_a = np.where(opposite, b, a)
            new_ga = np.where(opposite, gb, 0.5 * ga)
            a, ga = np.where(done, a, new_a), np.where(done, ga, new_ga)
            b, gb = np.where(done, b, c), np.where(done, gb, gc)
            done |= (np.abs(b - a) <= tight) | (gc == 0)
        return b

    @staticmethod
    def _locate_single(step: Step, k: int, level: float, sign: float) -> float:
        """:meth:`_locate` for a single run, in plain floats (the same Illinois iteration)."""
        a, b = float(np.ravel(step.t0)[0]), float(np.ravel(step.t1)[0])
        ga = sign * (float(step.x0[k, 0]) - level)
        gb = sign * (float(step.x1[k, 0]) - level)
        tight = CROSSING_TOLERANCE * max(1.0, abs(b))
        if abs(b - a) <= tight or gb == 0:
            return b
        for _ in range(ROOT_ITERATIONS):
            c = b - gb * (b - a) / (gb - ga) if gb != ga else math.nan
            if not (math.isfinite(c) and min(a, b) <= c <= max(a, b)):
                c = 0.5 * (a + b)
            gc = sign * (float(step.at(c)[k, 0]) - level)
            if math.copysign(1.0, gc) != math.copysign(1.0, gb) and gc != 0 and gb != 0:
                a, ga = b, gb
            else:
                ga = 0.5 * ga
            b, gb = c, gc
            if abs(b - a) <= tight or gc == 0:
                break
        return b

    def record(self, x_end: np.ndarray, t_end: np.ndarray, horizon: float) -> WatchRecord:
        """Per member: entry time, relapse and yearly time not meeting, from the crossings."""
        m = x_end.shape[1]
        met_end = self._inside(x_end)
        events = np.concatenate([np.zeros((0, 3)), *self.events])
        times, members, directions = events[:, 0], events[:, 1].astype(int), events[:, 2]
        order = np.lexsort((times, members))
        times, members, directions = times[order], members[order], directions[order]
        entries = directions < 0
        entered = np.where(self.met_at_start, 0.0, np.nan)
        entered[members[entries]] = times[entries]  # sorted by time: the last entry wins
        relapsed = np.zeros(m, dtype=bool)
        ever = self.met_at_start.copy()
        # A loss after the member had met the target (at the start or by an earlier entry).
        first_entry = np.full(m, np.inf)
        np.minimum.at(first_entry, members[entries], times[entries])
        first_entry = np.where(ever, -np.inf, first_entry)
        losses = ~entries
        relapsed[members[losses & (times >= first_entry[members])]] = True
        # Outside intervals: from a loss (or t = 0) to the next entry (or the end).
        starts_t = np.concatenate([times[losses], np.zeros(int((~self.met_at_start).sum()))])
        starts_m = np.concatenate([members[losses], np.nonzero(~self.met_at_start)[0]])
        ends_t = np.concatenate([times[entries], t_end[~met_end]])
        ends_m = np.concatenate([members[entries], np.nonzero(~met_end)[0]])
        start_order = np.lexsort((starts_t, starts_m))
        end_order = np.lexsort((ends_t, ends_m))
        years = max(1, math.ceil(horizon)) if self.watch.by_year else 0
        missing = np.zeros((years, m))
        if years and start_order.size == end_order.size:
            _add_intervals(missing, starts_m[start_order], starts_t[start_order], ends_t[end_order])
        return WatchRecord(
            met_at_start=self.met_at_start,
            met_at_end=met_end,
            entered_at=np.where(met_end, entered, np.nan),
            relapsed=relapsed,
            not_met_by_year=missing,
        )


def _add_intervals(missing: np.ndarray, members: np.ndarray, p: np.ndarray, q: np.ndarray):
    """Add the intervals (p, q] (years, one per entry of ``members``) to ``missing`` by
    calendar year k (t in (k, k + 1])."""
    keep = q > p
    members, p, q = members[keep], p[keep], q[keep]
    if members.size == 0:
        return
    years = missing.shape[0]
    first = np.clip(np.floor(p).astype(int), 0, years - 1)
    last = np.clip(np.ceil(q).astype(int) - 1, 0, years - 1)
    for offset in range(int(np.max(last - first)) + 1):
        k = first + offset
        valid = k <= last
        overlap = np.minimum(q, k + 1.0) - np.maximum(p, k)
        np.add.at(missing, (k[valid], members[valid]), np.maximum(overlap[valid], 0.0))


def integrate(
    problem: Problem,
    *,
    save: Save = NOTHING_SAVED,
    watch: Watch | None = None,
    limits: Limits | None = None,
    tolerance: Tolerance = DEFAULT_TOLERANCE,
    settling: Settling | None = None,
    solver: str | None = None,
    progress: Callable[[float, str], None] | None = None,
) -> Solution:
    """Integrate ``problem`` over [0, horizon]; with ``settling``, stop each member once its
    state has stopped moving (status SETTLED; NOT_SETTLED at the horizon).

    Floating-point warnings are silenced for the whole run, once: a state leaving the physical
    range is judged by the driver (diverged), not reported as a warning, and numpy's error-state
    switch costs microseconds when set around every right-hand side.
    """
    with np.errstate(all="ignore"):
        return _integrate(problem, save, watch, limits, tolerance, settling, solver, progress)


def _integrate(problem, save, watch, limits, tolerance, settling, solver, progress) -> Solution:
    if limits is None:
        limits = system_limits(problem.system)
    name = solver or choose_solver(problem, settling=settling is not None)
    stepper = _stepper(name, problem)
    m = problem.members
    x = problem.start()
    n = x.shape[0]
    horizon = float(problem.horizon)
    codes = np.full(m, CODE[Status.NOT_SETTLED if settling else Status.FINISHED], dtype=np.int8)
    t_end = np.full(m, horizon)
    alive = np.ones(m, dtype=bool)
    scale_tol = np.maximum(np.abs(x), 1.0)
    scale_tol = np.max(scale_tol, axis=1, keepdims=True) if stepper.batched else scale_tol
    settle_scale = np.maximum(np.abs(x), SCALE_FLOOR)
    tracker = None if watch is None else _Tracker(watch, x)
    sample_times = _sample_times(save, horizon)
    samples = None if sample_times is None else np.full((sample_times.size, n, m), np.nan)
    next_sample = 0
    if samples is not None and sample_times[0] == 0.0:
        next_sample = 1  # filled after the rescalings at t = 0
    step_times: list[float] = [0.0] if save.steps else []
    step_states: list[np.ndarray] = []
    dense: list = []
    factors = problem.load_factors
    calendar = factors is not None or problem.noise is not None
    pieces = Pieces(problem)
    # Batched steppers move each member with its own step size, so their samples are taken at
    # cut points (where every member stands at the same time); single runs interpolate.
    grid = tuple(sample_times) if stepper.batched and sample_times is not None else save.at
    cuts = problem.cuts(calendar, grid)
    h: float | None = None  # the single-run stepper's step size
    h_member = np.full(m, np.nan)  # the batched steppers' step sizes
    t_member = np.zeros(m)  # where each member stands within the current piece
    steps = 0
    message = ""
    lower = limits.lower
    absorbing = watch is not None and watch.absorbing

    for number, (a, b) in enumerate(zip(cuts[:-1], cuts[1:], strict=True)):
        live = np.nonzero(alive)[0]
        if live.size == 0:
            break
        events = problem.state_events_at(a)
        for index, factor in events:
            x[index, live] *= factor
        if events and tracker is not None:
            tracker.jump(a, live, x[:, live])
        if a == 0.0:
            if samples is not None and sample_times[0] == 0.0:
                samples[0] = x
            if save.steps:
                step_states.append(x[:, 0].copy())
        factor = 1.0
        if factors is not None:
            factor = factors[min(int(math.floor(0.5 * (a + b))), factors.shape[0] - 1)]
        whole = pieces.piece(a, b, factor)
        t_member[live] = a
        while live.size and np.min(t_member[live]) < b:
            # ``batch``: the members this stepper run advances; ``mask`` (shared with the
            # stepper, updated in place): which of them still count. Members that stop are
            # carried along until half of the batch has stopped, then the batch is rebuilt.
            batch = live
            mask = np.ones(batch.size, dtype=bool)
            piece = whole if batch.size == m else whole.subset(batch)
            adaptive_batch = stepper.batched and stepper.adaptive
            generator = stepper.steps(
                piece,
                t_member[batch] if adaptive_batch else a,
                b,
                x[:, batch],
                h_member[batch] if adaptive_batch else h,
                tolerance=tolerance,
                scale=scale_tol if stepper.batched else scale_tol[:, batch],
                alive=mask,
                max_steps=limits.max_steps,
                members=batch,
                piece_number=number,
                dense=save.dense,
                outputs=sample_times,
                settling=settling is not None,
            )
            rebuild = False
            all_counted = True
            single = None if stepper.batched else int(batch[0])
            whole_batch = batch.size == m  # a slice then selects it (no fancy indexing)
            try:
                for step in generator:
                    steps += 1
                    if not stepper.batched:
                        # One run: the stepper returns the whole stretch with its outputs; the
                        # checks below run over those outputs at once.
                        if step.h_next > 0:
                            h = step.h_next
                        times, states = step.times, step.states
                        stop, end = _first_stop(
                            piece, times, states, limits, settling, settle_scale[:, single]
                        )
                        stopped_at = None if stop is None else float(times[stop])
                        if end is Status.DIVERGED and stop >= 1:
                            stopped_at = _when_diverged(
                                step, float(times[stop - 1]), stopped_at, limits
                            )
                        if stop is not None:
                            # a non-finite output is no state: the run ends at the one before
                            keep = stop + 1 if np.all(np.isfinite(states[:, stop])) else stop
                            times, states = times[:keep], states[:, :keep]
                        if tracker is not None:
                            tracker.scan_single(step, single, times, states)
                        if samples is not None:
                            next_sample = _samples_single(
                                times, states, sample_times, samples, next_sample
                            )
                        if save.steps:
                            step_times.extend(times[1:].tolist())
                            step_states.extend(states[:, 1:].T)
                        if save.dense:
                            dense.append((float(times[0]), float(times[-1]), step))
                        x[:, single] = states[:, -1]
                        t_member[single] = times[-1]
                        if end is not None:
                            codes[single] = CODE[end]
                            t_end[single] = stopped_at
                            alive[single] = False
                            break
                        if absorbing and not alive[single]:
                            break  # absorbed by the watch
                        continue
                    columns = None if all_counted else np.nonzero(mask)[0]
                    members = batch if columns is None else batch[columns]
                    chosen = slice(None) if whole_batch and columns is None else members
                    x1 = step.x1 if columns is None else step.x1[:, columns]
                    t1 = np.broadcast_to(step.t1, (step.x1.shape[1],))
                    t1 = t1 if columns is None else t1[columns]
                    t_member[chosen] = t1
                    if adaptive_batch:
                        h_member[slice(None) if whole_batch else batch] = (
                            _carried(step) if stepper.shared_step else step.h_next
                        )
                    elif step.h_next > 0:
                        h = step.h_next
                    if tracker is not None:
                        tracker.step(step, members, columns)
                        if tracker.absorbed:
                            for gone, when in tracker.absorbed:
                                t_end[gone] = when
                                alive[gone] = False
                            tracker.absorbed.clear()
                    if save.steps:
                        step_times.append(float(np.atleast_1d(step.t1)[0]))
                        step_states.append(step.x1[:, 0].copy())
                    if save.dense:
                        first = (float(np.atleast_1d(step.t0)[0]), float(np.atleast_1d(step.t1)[0]))
                        dense.append((*first, step))
                    x[:, chosen] = x1
                    fine = np.max(np.abs(x1)) <= limits.state_limit and (
                        lower is None or np.min(x1) >= lower
                    )
                    if fine:
                        stopped = np.zeros(members.size, dtype=bool)
                    else:
                        bad = ~(np.abs(x1) <= limits.state_limit)
                        if lower is not None:
                            bad |= x1 < lower
                        stopped = bad.any(axis=0)
                    if not fine:
                        codes[members[stopped]] = CODE[Status.DIVERGED]
                        t_end[members[stopped]] = t1[stopped]
                    if settling is not None:
                        f1 = step.f1 if step.f1 is not None else piece.rhs(step.t1, step.x1)
                        f1 = f1 if columns is None else f1[:, columns]
                        rate = np.max(
                            np.abs(f1) / np.maximum(settle_scale[:, members], np.abs(x1)),
                            axis=0,
                        )
                        done = (rate < settling.rate) & ~stopped
                        if done.any():
                            codes[members[done]] = CODE[Status.SETTLED]
                            t_end[members[done]] = t1[done]
                            stopped |= done
                            fine = False
                    absorbed = ~alive[chosen] if absorbing else None
                    if absorbed is not None and absorbed.any():
                        stopped = stopped | absorbed
                        fine = False
                    if not fine:
                        alive[members[stopped]] = False
                        mask[np.nonzero(mask)[0][stopped]] = False
                        all_counted = bool(mask.all())
                        if not mask.any():
                            break
                        if mask.sum() <= COMPACT_SHARE * mask.size and stepper.adaptive:
                            rebuild = True
                            break
            except StepError as failure:
                message = str(failure)
                failed = batch[mask]
                # A step size that collapses while the state runs away is a blow-up in finite
                # time (x' = x^2 and the like): divergence, not a failure of the method.
                with np.errstate(all="ignore"):
                    runaway = ~(np.max(np.abs(x[:, failed]), axis=0) < np.sqrt(limits.state_limit))
                    # a right-hand side that is no finite number where the method stopped
                    # (an overflowing parameter, a pole) sends the state off at once
                    own = whole if failed.size == m else whole.subset(failed)
                    slope = own.rhs(t_member[failed], x[:, failed])
                    runaway |= ~np.all(np.isfinite(slope), axis=0)
                codes[failed] = np.where(runaway, CODE[Status.DIVERGED], CODE[Status.FAILED])
                t_end[failed] = t_member[failed]
                alive[failed] = False
            generator.close()
            live = np.nonzero(alive)[0]
            if not rebuild:
                break
        if samples is not None and stepper.batched:
            while next_sample < sample_times.size and sample_times[next_sample] <= b + 1e-12:
                samples[next_sample][:, live] = x[:, live]
                next_sample += 1
        if progress is not None:
            progress(b / horizon, "integrating")

    if samples is not None and next_sample < sample_times.size:
        samples[next_sample:] = x[None]
    return Solution(
        codes=codes,
        t_end=t_end,
        final_state=x,
        solver=name,
        steps=steps,
        sample_times=sample_times,
        samples=samples,
        times=np.array(step_times) if save.steps else None,
        states=np.array(step_states).T if save.steps else None,
        watch=None if tracker is None else tracker.record(x, t_end, horizon),
        message=message,
        dense=tuple(dense),
    )


def _carried(step: Step):
    """The step size a shared-step stepper starts the next stretch with: the one it last took (the
    right-hand side may jump at the cut, so the larger proposal after it is often rejected).
    Within a stretch the stepper carries its own proposal; the last step of a stretch is cut
    short to end at the cut, so its proposal is kept when larger."""
    taken = np.asarray(step.t1, dtype=float) - np.asarray(step.t0, dtype=float)
    return np.minimum(step.h_next, np.maximum(taken, 0.5 * np.asarray(step.h_next)))


DIVERGENCE_BISECTIONS = 40


def _when_diverged(step: Step, good: float, bad: float, limits: Limits) -> float:
    """The time a single run left the limits (or stopped being finite) between the last output
    inside them and the first outside, by bisection on short runs from the output before (the
    outputs are a tenth of a year apart; a blow-up is dated to the solver's accuracy)."""
    reach = getattr(step.interpolant, "reach", None)
    if reach is None:
        return bad
    for _ in range(DIVERGENCE_BISECTIONS):
        middle = 0.5 * (good + bad)
        if not good < middle < bad:
            break
        x = reach(middle)
        fine = (
            x is not None
            and bool(np.all(np.abs(x) <= limits.state_limit))
            and (limits.lower is None or bool(np.all(x >= limits.lower)))
        )
        good, bad = (middle, bad) if fine else (good, middle)
    return bad


def _first_stop(piece, times, states, limits: Limits, settling, scale):
    """A single run's first output (index >= 1) where it diverged or settled, and which; or
    (None, None). ``states`` (n, len(times))."""
    later = states[:, 1:]
    bad = ~np.all(np.abs(later) <= limits.state_limit, axis=0)
    if limits.lower is not None:
        bad |= np.any(later < limits.lower, axis=0)
    first_bad = int(np.argmax(bad)) + 1 if bad.any() else None
    first_calm = None
    if settling is not None and later.shape[1]:
        slopes = piece.rhs(times[1:], later)
        rate = np.max(np.abs(slopes) / np.maximum(scale[:, None], np.abs(later)), axis=0)
        calm = rate < settling.rate
        first_calm = int(np.argmax(calm)) + 1 if calm.any() else None
    if first_bad is not None and (first_calm is None or first_bad <= first_calm):
        return first_bad, Status.DIVERGED
    if first_calm is not None:
        return first_calm, Status.SETTLED
    return None, None


def _samples_single(times, states, sample_times, samples, next_sample: int) -> int:
    """Copy a single run's outputs at the sample times (the outputs include them) up to the end
    of ``times``; returns the next sample to fill."""
    stop = int(np.searchsorted(sample_times, times[-1] + 1e-12, side="right"))
    if stop > next_sample:
        wanted = sample_times[next_sample:stop]
        index = np.clip(np.searchsorted(times, wanted - 1e-12), 0, len(times) - 1)
        samples[next_sample:stop, :, 0] = states[:, index].T
    return stop


def _sample_times(save: Save, horizon: float) -> np.ndarray | None:
    if save.every is None and not save.at:
        return None
    times = np.array(save.at, dtype=float)
    if save.every is not None:
        grid = np.arange(0.0, horizon + 1e-9 * horizon, save.every)
        times = np.concatenate([times, grid, [horizon]])
    return np.unique(times[times <= horizon])


def settle(
    system: System,
    x0: np.ndarray,
    u: float,
    *,
    cap: float = SETTLE_CAP,
    limits: Limits | None = None,
    tolerance: Tolerance = SETTLE_TOLERANCE,
    settling: Settling = SETTLED,
    solver: str | None = None,
) -> Solution:
    """Hold the control at ``u`` and integrate from ``x0`` ((n,) or (n, members)) until each
    member's state stops moving, or ``cap`` years."""
    problem = Problem(system, np.asarray(x0, dtype=float), held(u), float(cap))
    return integrate(problem, limits=limits, tolerance=tolerance, settling=settling, solver=solver)
