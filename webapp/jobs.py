"""Long jobs in the app (sweep, frontier, search, ensemble, fit): each runs in a worker process
that the server kills when the job's wall-clock budget runs out or when the user presses Cancel.

Dash runs a background callback in a process of its own (``dash.DiskcacheManager``). This module
adds what makes that safe to offer to every user, in one place for every long job:

- the job's process leads a process group of its own, so killing the group kills whatever the job
  started as well;
- the server process that started a job watches it from a thread: past the budget it kills the
  group whatever the job is doing (a job stuck inside one C call never reaches a progress report,
  so the cooperative check in ``compute.throttled`` alone cannot stop it), then reaps the process;
- Cancel kills the same way, from whichever server process receives the click;
- either way the job's result area says in plain words that it was stopped, after how long and
  why; a process that died on its own (out of memory, say) is reported as ending without an
  answer, so the page never waits for a result that will not come.

A view describes its job once with ``register_job``; the progress bar and the Cancel button come
from ``job_progress``.
"""

from __future__ import annotations

import atexit
import contextlib
import functools
import os
import signal
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import diskcache
import multiprocess
import multiprocess.connection
import multiprocess.util  # before atexit.register(stop_all): see there
import psutil
from dash import DiskcacheManager, Input, Output, html

from webapp import compute

POLL_MS = 400  # how often the page asks for progress while a job runs
WATCH_SECONDS = 0.25  # how often the server checks a job it started
STOP_WAIT = 5.0  # seconds to wait for a killed process to die
KEEP_SECONDS = 24 * 3600  # how long a job's record, or its stopped message, stays in the cache
RECORD_PREFIX = "planner-job:"

BUDGET, CANCELLED, ENDED = "budget", "cancelled", "ended"
SHOWN = {"display": "flex"}
HIDDEN = {"display": "none"}

_live: dict[int, Any] = {}  # pid -> the multiprocess.Process this server process started
_live_lock = threading.Lock()


def _after_fork_in_child() -> None:
    """A job (or a forked server worker) must never kill the jobs of the process it came from."""
    global _live, _live_lock
    _live = {}
    _live_lock = threading.Lock()


os.register_at_fork(after_in_child=_after_fork_in_child)


def stopped_text(what: str, reason: str, seconds: float) -> str:
    """What the result area says about a job that was stopped (``reason``: BUDGET, CANCELLED or
    ENDED) after ``seconds``."""
    if reason == BUDGET:
        return f"The {what} was {compute.over_budget(seconds)}."
    took = compute.seconds_text(seconds)
    if reason == CANCELLED:
        return f"The {what} was stopped after {took} s because you pressed Cancel."
    return (
        f"The {what} stopped after {took} s without an answer: its worker process ended "
        "unexpectedly (for example, out of memory). Try asking for less."
    )


def _dead(member: psutil.Process) -> bool:
    try:
        return member.status() == psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return True


def kill_tree(pid: int) -> list[int]:
    """Kill a job's process, its process group and every descendant; wait until they are dead.

    Returns the process ids killed. A killed child stays a zombie until its parent reaps it:
    the server reaps its own jobs; the system's init reaps the job's orphaned children.
    """
    try:
        leader = psutil.Process(pid)
        family = [leader, *leader.children(recursive=True)]
    except psutil.NoSuchProcess:
        return []
    with contextlib.suppress(OSError):  # the whole group at once: nothing can slip out
        if os.getpgid(pid) == pid:
            os.killpg(pid, signal.SIGKILL)
    for member in family:
        with contextlib.suppress(psutil.NoSuchProcess):
            member.kill()
    deadline = time.monotonic() + STOP_WAIT
    while not all(_dead(member) for member in family) and time.monotonic() < deadline:
        time.sleep(0.02)
    return [member.pid for member in family]


def _exited(pid: int) -> bool:
    """Whether this process's child ``pid`` has ended (without reaping it, so that its process
    id still names its group)."""
    try:
        return os.waitid(os.P_PID, pid, os.WEXITED | os.WNOHANG | os.WNOWAIT) is not None
    except ChildProcessError:
        return True


def stop_all() -> None:
    """Kill every job this server process started (on shutdown: no job outlives the server)."""
    with _live_lock:
        processes = list(_live.values())
        _live.clear()
    for process in processes:
        kill_tree(process.pid)
        process.join(STOP_WAIT)


# multiprocess.util's exit hook waits for running jobs; atexit runs the hook registered last
# first, so registering after importing it kills the jobs before that hook would wait for them.
atexit.register(stop_all)


@dataclass(frozen=True)
class _Job:
    what: str  # the job in the user's words: "sweep", "frontier"...
    stopped: Callable[[str], Sequence]  # the callback's outputs showing a message


class JobManager(DiskcacheManager):
    """Dash's disk-cache background manager, with a budget per job and a message when a job is
    stopped. ``folder`` holds the job queue and results (shared by the server's processes)."""

    def __init__(self, folder: str | os.PathLike[str], *, budget: float):
        self.budget = float(budget)
        self.jobs: dict[str, _Job] = {}
        super().__init__(diskcache.Cache(str(Path(folder))))

    # -- what Dash calls ------------------------------------------------------------------------

    def make_job_fn(self, fn, progress, key=None):
        run = super().make_job_fn(fn, progress, key)
        budget = self.budget

        def job_fn(*args):
            with contextlib.suppress(OSError):
                os.setpgid(0, 0)  # also done by the server: whichever runs first
            # This process runs one job: progress reports past the server's budget stop it too.
            compute.JOB_SECONDS = budget
            run(*args)

        job_fn.job_name = getattr(fn, "job_name", None)
        return job_fn

    def call_job_fn(self, key, job_fn, args, context):
        process = multiprocess.Process(
            target=job_fn, args=(key, self._make_progress_key(key), args, context)
        )
        process.start()
        pid = process.pid
        with contextlib.suppress(OSError):
            os.setpgid(pid, pid)
        try:
            created = psutil.Process(pid).create_time()
        except psutil.NoSuchProcess:
            created = None
        record = {
            "key": key,
            "name": getattr(job_fn, "job_name", None),
            "started": time.time(),
            "created": created,
        }
        self.handle.set(RECORD_PREFIX + str(pid), record, expire=KEEP_SECONDS)
        with _live_lock:
            _live[pid] = process
        watcher = threading.Thread(
            target=self._watch, args=(process, time.monotonic()), name=f"job-{pid}", daemon=True
        )
        watcher.start()
        return pid

    def terminate_job(self, job):
        """Dash calls this when the user presses Cancel (or runs the same job again)."""
        if job is None:
            return
        pid = int(job)
        record = self._record(pid)
        if record is None:  # finished and delivered: only a process about to exit is left
            kill_tree(pid)
        else:
            self._stop(pid, record, CANCELLED)

    def get_result(self, key, job):
        result = self.handle.get(key, self.UNDEFINED)
        if result is self.UNDEFINED:
            if not job or self.job_running(job):
                return self.UNDEFINED
            # The process is gone: its result may have landed just before it exited.
            result = self.handle.get(key, self.UNDEFINED)
            record = self._record(int(job), key)
            if result is self.UNDEFINED:
                if record is None:
                    return self.UNDEFINED
                result = self._stopped_output(record, ENDED, time.time() - record["started"])
                if result is None:
                    return self.UNDEFINED
        self.clear_cache_entry(key)
        self.clear_cache_entry(self._make_progress_key(key))
        if job:
            self.clear_cache_entry(RECORD_PREFIX + str(int(job)))
        return result

    # -- our own ----------------------------------------------------------------------------

    def add_job(self, name: str, what: str, stopped: Callable[[str], Sequence]) -> None:
        """Say how the job registered as ``name`` shows a message in its result area."""
        self.jobs[name] = _Job(what, stopped)

    def live(self) -> list[int]:
        """Process ids of the jobs this server process started that are still running."""
        with _live_lock:
            return [pid for pid in _live if not _exited(pid)]

    def _record(self, pid: int, key: str | None = None) -> dict | None:
        record = self.handle.get(RECORD_PREFIX + str(pid))
        if record is None or (key is not None and record["key"] != key):
            return None
        return record

    def _stopped_output(self, record: dict, reason: str, seconds: float) -> Sequence | None:
        job = self.jobs.get(record["name"])
        return None if job is None else job.stopped(stopped_text(job.what, reason, seconds))

    def _stop(self, pid: int, record: dict, reason: str) -> None:
        """Leave the message for the page first (a job finishing this instant still wins: its
        result overwrites it), then kill the job if it is still the process we started."""
        seconds = self.budget if reason == BUDGET else time.time() - record["started"]
        output = self._stopped_output(record, reason, seconds)
        if output is not None:
            self.handle.add(record["key"], output, expire=KEEP_SECONDS)
        try:
            same = psutil.Process(pid).create_time() == record["created"]
        except psutil.NoSuchProcess:
            same = False
        if same:
            kill_tree(pid)

    def _watch(self, process, started: float) -> None:
        """In the server process that started the job: stop it at the budget, and once it has
        ended kill anything it left in its group and reap it."""
        pid = process.pid
        deadline = started + self.budget
        stopped = False
        while not _exited(pid):
            left = deadline - time.monotonic()
            if left <= 0 and not stopped:
                record = self._record(pid)
                if record is not None:
                    self._stop(pid, record, BUDGET)
                else:
                    kill_tree(pid)
                stopped = True
            multiprocess.connection.wait([process.sentinel], max(0.0, min(left, WATCH_SECONDS)))
        with contextlib.suppress(OSError):  # the exited leader still holds its group's id
            os.killpg(pid, signal.SIGKILL)
        process.join(STOP_WAIT)
        with _live_lock:
            _live.pop(pid, None)


# ---------------------------------------------------------------------------------------------
# the widget and the registration every long job shares


@dataclass(frozen=True)
class JobIds:
    """The components of one job's controls: its Run button (None when something else starts
    it, as an upload does), its progress box, bar and text, and its Cancel button."""

    run: str | None
    box: str
    bar: str
    text: str
    cancel: str


def job_progress(job: JobIds, label: str) -> html.Div:
    """The progress bar and the Cancel button, shown only while the job runs."""
    return html.Div(
        [
            html.Label(label, htmlFor=job.bar, className="progress-label"),
            html.Progress(id=job.bar, value="0", max="100"),
            html.Span(id=job.text, className="progress-text"),
            html.Button(
                "Cancel",
                id=job.cancel,
                className="button",
                disabled=True,
                style={"flexShrink": 0},
            ),
        ],
        id=job.box,
        className="progress-box",
        style=HIDDEN,
    )


def progress_reporter(set_progress) -> Callable[[float, str], None]:
    """A planner progress callback that moves the job's bar and text (throttled)."""
    return compute.throttled(lambda f, m: set_progress((str(round(100 * f)), f"{f:.0%}: {m}")))


def register_job(
    callback,
    settings,
    function: Callable,
    job: JobIds,
    *,
    name: str,
    what: str,
    outputs: Sequence[Output],
    inputs: Sequence,
    stopped: Callable[[str], Sequence],
) -> None:
    """Register ``function(set_progress, *inputs) -> outputs`` as a long job run in a worker
    process: a progress bar, Cancel, and the app's budget. ``stopped(text)`` gives the outputs
    that show ``text`` (why and when the job was stopped) in the job's result area."""
    manager = settings.jobs
    manager.add_job(name, what, stopped)

    @functools.wraps(function)
    def run(*args):
        return function(*args)

    run.job_name = name
    running = [
        (Output(job.cancel, "disabled"), False, True),
        (Output(job.box, "style"), SHOWN, HIDDEN),
    ]
    if job.run is not None:
        running.insert(0, (Output(job.run, "disabled"), True, False))
    callback(
        *outputs,
        *inputs,
        background=True,
        manager=manager,
        interval=POLL_MS,
        progress=[Output(job.bar, "value"), Output(job.text, "children")],
        progress_default=["0", ""],
        running=running,
        cancel=[Input(job.cancel, "n_clicks")],
        prevent_initial_call=True,
    )(run)
