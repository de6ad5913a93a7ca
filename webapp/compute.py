"""Calls into the planner, with small caches so edits recompute only what changed.

Nothing here computes a number: the diagram comes from ``planner.equilibria.diagram_for``, each
schedule's outcome from ``planner.outcomes.compare``. What is cached:

- diagrams (with where the lake stands), keyed by the JSON of the blocks they depend on
  (model, control, state, target) - editing a schedule never recomputes the diagram;
- each schedule's outcome, keyed by that schedule and every block except the schedules, so an
  edit re-simulates only the schedule that changed.

The caches are an in-process LRU (results only; the user's scenario lives in the browser's
``dcc.Store``). Outcomes computed by the background worker, and with several server processes
every outcome, are also written to a disk cache (one per process, set by ``create_app``), so the
other processes read them instead of simulating again.
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
import time
from collections import OrderedDict
from collections.abc import Callable, Hashable
from pathlib import Path
from typing import Any

from planner.equilibria import Diagram, Standing, diagram_for, locate
from planner.errors import InputError, Problem
from planner.outcomes import Comparison, ScheduleOutcome, compare
from planner.progress import Progress, scaled, silent
from planner.scenario import Scenario, scenario_from_data

DIAGRAM_CACHE_SIZE = 16
OUTCOME_CACHE_SIZE = 512
SCENARIO_CACHE_SIZE = 64
DISK_SIZE_LIMIT = 256 * 2**20  # bytes of pickled outcomes kept on disk
DIAGRAM_BLOCKS = ("model", "control", "state", "target")


class LRU:
    """A small thread-safe least-recently-used mapping."""

    def __init__(self, size: int):
        self.size = size
        self._items: OrderedDict[Hashable, Any] = OrderedDict()
        self._lock = threading.Lock()

    def get(self, key: Hashable) -> Any | None:
        with self._lock:
            if key not in self._items:
                return None
            self._items.move_to_end(key)
            return self._items[key]

    def put(self, key: Hashable, value: Any) -> None:
        with self._lock:
            self._items[key] = value
            self._items.move_to_end(key)
            while len(self._items) > self.size:
                self._items.popitem(last=False)

    def clear(self) -> None:
        with self._lock:
            self._items.clear()

    def _after_fork(self) -> None:
        self._lock = threading.Lock()


_diagrams = LRU(DIAGRAM_CACHE_SIZE)
_outcomes = LRU(OUTCOME_CACHE_SIZE)
_scenarios = LRU(SCENARIO_CACHE_SIZE)
_diagram_lock = threading.Lock()  # one diagram computed at a time: concurrent requests wait
# One comparison at a time per process: the integrations hold the interpreter lock anyway, and
# twenty requests time-slicing it finish later, on average, than twenty served in turn.
_compute_slot = threading.Lock()


class DiskCache:
    """A diskcache.Cache in a folder, opened lazily by each process that uses it (a handle
    inherited through a fork is never used: the child opens its own)."""

    def __init__(self, size_limit: int):
        self.size_limit = size_limit
        self.folder: Path | None = None
        self._cache: Any = None
        self._pid: int | None = None

    def use(self, folder: str | os.PathLike[str] | None) -> None:
        """Keep entries in ``folder`` (None: nowhere; callers then keep them in memory)."""
        self.folder = None if folder is None else Path(folder)
        self._cache, self._pid = None, None

    def get(self):
        """The open cache, or None without a folder."""
        if self.folder is None:
            return None
        if self._cache is None or self._pid != os.getpid():
            import diskcache

            self._cache = diskcache.Cache(str(self.folder), size_limit=self.size_limit)
            self._pid = os.getpid()
        return self._cache


_disk = DiskCache(DISK_SIZE_LIMIT)
_share_all = False
_counts = {"diagrams": 0, "outcomes": 0}


def _after_fork_in_child() -> None:
    """A lock held by another thread at fork time would stay held forever in the child."""
    global _diagram_lock, _compute_slot
    for cache in (_diagrams, _outcomes, _scenarios):
        cache._after_fork()
    _diagram_lock = threading.Lock()
    _compute_slot = threading.Lock()


os.register_at_fork(after_in_child=_after_fork_in_child)


def use_disk(folder: str | os.PathLike[str] | None, *, share_all: bool = False) -> None:
    """Keep outcomes computed by background workers in ``folder`` (None: memory only).

    With ``share_all`` every outcome is written there, for server processes that serve the
    same users (a write costs a few milliseconds, so a single process does not pay it).
    """
    global _share_all
    _disk.use(folder)
    _share_all = share_all


def _disk_cache():
    """The outcomes' disk cache opened by this process."""
    return _disk.get()


def clear(*, keep_diagrams: bool = False) -> None:
    """Forget cached results (tests and benchmarks); ``keep_diagrams`` forgets outcomes only."""
    for cache in (_outcomes, _scenarios) if keep_diagrams else (_diagrams, _outcomes, _scenarios):
        cache.clear()
    disk = _disk_cache()
    if disk is not None:
        disk.clear()


def counts() -> dict[str, int]:
    """How many diagrams and outcomes this process has computed (not served from a cache)."""
    return dict(_counts)


def _json(data: Any) -> str:
    return json.dumps(data, sort_keys=True, separators=(",", ":"), allow_nan=False)


def scenario_key(data: dict) -> str:
    """A short stable key of a whole scenario's data."""
    return hashlib.sha256(_json(data).encode()).hexdigest()[:32]


def dump(scenario: Scenario) -> dict:
    """The plain data of a scenario, as kept in the browser's store."""
    return scenario.model_dump(mode="json", exclude_none=True)


def scenario_of(data: dict, source: str = "<editor>") -> Scenario:
    """Validate store data into a Scenario (raises InputError naming ``source``), remembering
    recent valid ones (only failures carry the source, so it is not part of the key)."""
    key = _json(data)
    found = _scenarios.get(key)
    if found is None:
        found = scenario_from_data(data, source)
        _scenarios.put(key, found)
    return found


def _diagram_key(data: dict) -> str:
    return _json({block: data.get(block) for block in DIAGRAM_BLOCKS})


def diagram_of(scenario: Scenario, progress: Progress | None = None) -> tuple[Diagram, Standing]:
    """The scenario's diagram and where the lake stands on it (cached)."""
    key = _diagram_key(dump(scenario))
    found = _diagrams.get(key)
    if found is not None:
        return found
    with _diagram_lock:
        found = _diagrams.get(key)
        if found is None:
            diagram = diagram_for(scenario, progress=progress)
            standing = locate(diagram, scenario.initial_state, scenario.current_control)
            found = (diagram, standing)
            _diagrams.put(key, found)
            _counts["diagrams"] += 1
    return found


def _outcome_keys(scenario: Scenario) -> list[str]:
    data = dump(scenario)
    schedules = data.pop("schedules", [])
    context = _json(data)
    return [
        hashlib.sha256((context + _json(schedule)).encode()).hexdigest() for schedule in schedules
    ]


def _cached_outcome(key: str) -> ScheduleOutcome | None:
    found = _outcomes.get(key)
    if found is None:
        disk = _disk_cache()
        if disk is not None:
            found = disk.get(key)
            if found is not None:
                _outcomes.put(key, found)
    return found


def missing(scenario: Scenario) -> list[int]:
    """Indices of the schedules whose outcome is not cached yet."""
    return [i for i, key in enumerate(_outcome_keys(scenario)) if _cached_outcome(key) is None]


def cached_comparison(scenario: Scenario) -> Comparison | None:
    """The comparison from cached results only; None when any schedule still needs computing."""
    keys = _outcome_keys(scenario)
    outcomes = [_cached_outcome(key) for key in keys]
    if any(outcome is None for outcome in outcomes):
        return None
    diagram, _ = diagram_of(scenario)
    return Comparison(scenario, diagram, outcomes)


def comparison_of(
    scenario: Scenario, *, progress: Progress = silent, persist: bool | None = None
) -> Comparison:
    """The comparison of every schedule, computing (through the planner) only what is missing.

    ``persist`` writes new outcomes to the disk cache for other processes to read (default:
    only when ``use_disk`` was told to share everything).
    """
    diagram, _ = diagram_of(scenario, progress=scaled(progress, 0.0, 0.2))
    keys = _outcome_keys(scenario)
    outcomes: list[ScheduleOutcome | None] = [_cached_outcome(key) for key in keys]
    todo = [i for i, outcome in enumerate(outcomes) if outcome is None]
    if todo:
        with _compute_slot:
            fresh = compare(
                scenario,
                diagram=diagram,
                schedules=[scenario.schedules[i] for i in todo],
                progress=scaled(progress, 0.2, 1.0),
            ).outcomes
        disk = _disk_cache() if (_share_all if persist is None else persist) else None
        for i, outcome in zip(todo, fresh, strict=True):
            outcomes[i] = outcome
            _outcomes.put(keys[i], outcome)
            if disk is not None:
                disk.set(keys[i], outcome)
        _counts["outcomes"] += len(todo)
    progress(1.0, "done")
    return Comparison(scenario, diagram, outcomes)


JOB_SECONDS = 600.0
"""Wall-clock budget of one long job in the app (a sweep, frontier, search, ensemble, fit or
background comparison), in seconds: the server kills a job's worker process when it runs out
(``webapp.jobs``), and a job that reports progress past it stops itself there first."""


def seconds_text(seconds: float) -> str:
    """A duration in seconds as the app writes it: whole seconds from 10 s, else one decimal."""
    return f"{seconds:.0f}" if abs(seconds) >= 10 else f"{seconds:.1f}".removesuffix(".0")


def over_budget(seconds: float) -> str:
    """Why a job past the budget of ``seconds`` was stopped, and what to do instead."""
    return (
        f"stopped after {seconds_text(seconds)} s, the app's limit for one job: ask for less "
        "(fewer members, a coarser step, fewer depths) or run it from the command line"
    )


def throttled(
    report: Callable[[float, str], None], interval: float = 0.25, budget: float | None = None
) -> Progress:
    """A planner progress callback that forwards at most every ``interval`` seconds and stops
    the job (InputError naming the time limit) once it has run ``budget`` seconds (default
    JOB_SECONDS)."""
    last = [0.0]
    start = time.monotonic()
    limit = JOB_SECONDS if budget is None else budget

    def progress(fraction: float, message: str) -> None:
        now = time.monotonic()
        if now - start > limit:
            raise InputError([Problem("app", "time", over_budget(limit))])
        if fraction >= 1.0 or now - last[0] >= interval:
            last[0] = now
            report(fraction, message)

    return progress
