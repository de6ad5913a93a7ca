"""The one result type of the engine: per-member status, final state, samples and the record
of a watched target."""

from __future__ import annotations

import enum
from dataclasses import dataclass, field

import numpy as np


class Status(enum.Enum):
    """How a member's run ended; the value is a readable message."""

    FINISHED = "reached the end of the period"
    SETTLED = "settled at an equilibrium"
    DIVERGED = "diverged: the state left the physical range or became non-finite"
    NOT_SETTLED = "had not settled by the cap"
    FAILED = "the integrator failed"


STATUSES = tuple(Status)
CODE = {status: i for i, status in enumerate(STATUSES)}


@dataclass(frozen=True, eq=False)
class WatchRecord:
    """Per member: whether the target was met at t = 0 (``met_at_start``) and at the end
    (``met_at_end``), the time it was last entered (``entered_at``; 0 when met from the start
    and never lost), whether it was lost after having been met (``relapsed``), and the years of
    each calendar year k (t in (k, k + 1]) spent not meeting it, (years, members)."""

    met_at_start: np.ndarray
    met_at_end: np.ndarray
    entered_at: np.ndarray
    relapsed: np.ndarray
    not_met_by_year: np.ndarray


@dataclass(frozen=True, eq=False)
class Solution:
    """What :func:`planner.integrate.integrate` returns.

    ``codes``: per member an index into :data:`STATUSES`; ``t_end``: when each member stopped
    (the horizon, the time it settled, or the step at which it diverged or failed);
    ``final_state`` (n, members). ``sample_times`` / ``samples`` (samples, n, members) follow
    :class:`Save`; ``times`` / ``states`` (n, len(times)) are the first member's solver steps
    merged with its samples (for plots of single runs).
    """

    codes: np.ndarray
    t_end: np.ndarray
    final_state: np.ndarray
    solver: str
    steps: int
    sample_times: np.ndarray | None = None
    samples: np.ndarray | None = field(default=None, repr=False)
    times: np.ndarray | None = field(default=None, repr=False)
    states: np.ndarray | None = field(default=None, repr=False)
    watch: WatchRecord | None = None
    message: str = ""
    dense: tuple = field(default=(), repr=False)

    @property
    def members(self) -> int:
        return int(self.codes.size)

    @property
    def status(self) -> Status:
        """The status of a single run (the first member)."""
        return STATUSES[int(self.codes[0])]

    def has(self, status: Status) -> np.ndarray:
        return self.codes == CODE[status]

    def state_at(self, t: float | np.ndarray) -> np.ndarray:
        """First member's state at time(s) t from the kept interpolants (Save(dense=True));
        (n,) or (n, len(t))."""
        if not self.dense:
            raise ValueError("this run kept no interpolants: integrate with Save(dense=True)")
        t = np.asarray(t, dtype=float)
        flat = np.atleast_1d(t)
        starts = np.array([start for start, _, _ in self.dense])
        which = np.clip(np.searchsorted(starts, flat, side="right") - 1, 0, len(self.dense) - 1)
        out = np.empty((self.final_state.shape[0], flat.size))
        for index in np.unique(which):
            start, stop, step = self.dense[index]
            chosen = np.nonzero(which == index)[0]
            times = np.clip(flat[chosen], start, stop)
            many = getattr(step.interpolant, "many", None)
            if many is not None:  # all the times of one step in one go
                out[:, chosen] = many(times)
            else:
                for i, time in zip(chosen, times, strict=True):
                    out[:, i] = step.at(time)[:, 0]
        return out[:, 0] if t.ndim == 0 else out


@dataclass(frozen=True, eq=False)
class Trajectory:
    """One member's run for plots and reports: solver steps merged with the regular samples.

    ``times`` (years), ``states`` (n, len(times)), ``control`` the control value at each time;
    ``solution`` the whole engine result (``state_at`` needs Save(dense=True)).
    """

    status: Status
    t_end: float
    times: np.ndarray
    states: np.ndarray
    control: np.ndarray
    solution: Solution = field(repr=False)

    @property
    def final_state(self) -> np.ndarray:
        return self.solution.final_state[:, 0]

    def state_at(self, t: float | np.ndarray) -> np.ndarray:
        return self.solution.state_at(t)


def trajectory(solution: Solution, control) -> Trajectory:
    """The first member's :class:`Trajectory`; ``control`` is the path u(t) (callable)."""
    times, states = [], []
    if solution.times is not None:
        times.append(solution.times)
        states.append(solution.states)
    if solution.sample_times is not None:
        times.append(solution.sample_times)
        states.append(solution.samples[:, :, 0].T)
    t_end = float(solution.t_end[0])
    if not times:
        times, states = [np.array([t_end])], [solution.final_state[:, :1]]
    all_times = np.concatenate(times)
    all_states = np.concatenate(states, axis=1)
    order = np.argsort(all_times, kind="stable")
    all_times, all_states = all_times[order], all_states[:, order]
    keep = np.append(np.diff(all_times) > 1e-12, True) & (all_times <= t_end + 1e-12)
    all_times, all_states = all_times[keep], all_states[:, keep]
    return Trajectory(
        status=solution.status,
        t_end=t_end,
        times=all_times,
        states=all_states,
        control=np.asarray(control(all_times), dtype=float),
        solution=solution,
    )
