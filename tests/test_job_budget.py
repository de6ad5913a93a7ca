"""Long jobs in the app run in worker processes that the server kills: past the app's budget per
job, when the user presses Cancel, or when the server stops; a worker that dies on its own is
reported too. Each time the result area says in plain words what happened, and nothing the job
started is left running.

The jobs are driven as a browser drives them, through Dash's callback requests, against an app
whose frontier planner call is replaced by a hostile one: it starts a process of its own, then
blocks inside one C call that holds the interpreter lock and never reports progress, so only the
server can stop it (common practice, no source: a wall-clock budget per user job, enforced by
killing the worker, as batch schedulers and web servers do with a request timeout).
"""

from __future__ import annotations

import importlib.util
import json
import os
import re
import signal
import subprocess
import sys
import time
import tomllib
from pathlib import Path
from urllib.parse import urlencode

import psutil
import pytest

import planner.frontier
from planner.errors import InputError
from planner.report import CAUTION
from planner.scenario import load_scenario, scenario_from_data
from webapp import compute, create_app, ids, jobs
from webapp.files import default_scenario_dir
from webapp.settings import JOB_SECONDS_VARIABLE

ALDER = default_scenario_dir() / "alder-mere.toml"
ROOT = Path(__file__).resolve().parent.parent
WAIT = 60.0  # seconds: a bound on every wait below (never a timing assert)


def _hostile(pid_file: Path):
    """A stand-in for the frontier that starts a helper process, then spins inside one C call
    for hours (``sum`` over a range holds the interpreter lock: no signal handler, no progress
    report ever runs)."""

    def recovery_frontier(*_args, **_kwargs):
        helper = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(600)"])
        pid_file.write_text(json.dumps({"job": os.getpid(), "helper": helper.pid}))
        return sum(range(10**13))

    return recovery_frontier


def _running(pid: int) -> bool:
    """Whether ``pid`` still runs (a zombie runs nothing: only its exit status is left, for its
    parent or the system's init to collect)."""
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


def _wait_until(condition, what: str):
    deadline = time.monotonic() + WAIT
    while time.monotonic() < deadline:
        value = condition()
        if value:
            return value
        time.sleep(0.05)
    raise AssertionError(f"not within {WAIT:.0f} s: {what}")


class Page:
    """One page load of the app, speaking Dash's callback protocol through the test client."""

    def __init__(self, app):
        self.app = app
        self.client = app.server.test_client()
        page = self.client.get("/").get_data(as_text=True)
        self.end_id = re.search(r'"end_id":\s*"([^"]+)"', page).group(1)

    def post(self, body: dict, **args):
        query = urlencode({"endId": self.end_id, **args})
        return self.client.post(f"/_dash-update-component?{query}", json=body)

    def callback_key(self, output_id: str) -> str:
        return next(key for key in self.app.callback_map if f"{output_id}." in key)

    def run_body(self, run: str, values: dict[str, object]) -> dict:
        """What the page posts when the Run button ``run`` is pressed, read from the app's own
        callback map (its outputs and states), the states' values from ``values`` by id."""
        key, spec = next(
            (key, spec)
            for key, spec in self.app.callback_map.items()
            if {"id": run, "property": "n_clicks"} in spec["inputs"]
        )
        declared = spec["output"] if isinstance(spec["output"], list) else [spec["output"]]
        outputs = [{"id": str(o.component_id), "property": o.component_property} for o in declared]
        return {
            "output": key,
            "outputs": outputs,
            "inputs": [{"id": run, "property": "n_clicks", "value": 1}],
            "changedPropIds": [f"{run}.n_clicks"],
            "state": [
                {"id": st["id"], "property": st["property"], "value": values.get(st["id"])}
                for st in spec["state"]
            ],
        }

    def frontier_body(self, working: dict) -> dict:
        return self.run_body(ids.FRONTIER_RUN, {ids.WORKING: working})

    def sweep_body(self, working: dict, step: str = "") -> dict:
        return self.run_body(ids.SWEEP_RUN, {ids.WORKING: working, ids.SWEEP_STEP: step})

    def start(self, body: dict) -> dict:
        """Press the job's Run button -> the job's handles."""
        reply = self.post(body)
        assert reply.status_code == 200, reply.get_data(as_text=True)
        return reply.get_json()

    def start_frontier(self, working: dict) -> tuple[dict, dict]:
        """Press "Draw the frontier" -> (the request body, the job's handles)."""
        body = self.frontier_body(working)
        return body, self.start(body)

    def cancel_frontier(self, handles: dict) -> None:
        """Press Cancel, as the page does: the cancel callback names the running job."""
        body = {
            "output": f"{ids.FRONTIER_CANCEL}.id",
            "outputs": {"id": ids.FRONTIER_CANCEL, "property": "id"},
            "inputs": [{"id": ids.FRONTIER_CANCEL, "property": "n_clicks", "value": 1}],
            "changedPropIds": [f"{ids.FRONTIER_CANCEL}.n_clicks"],
            "state": [],
        }
        reply = self.post(body, cancelJob=handles["job"])
        assert reply.status_code in (200, 204), reply.get_data(as_text=True)

    def result(self, body: dict, handles: dict) -> dict:
        """Poll as the page does until the job's outputs arrive."""

        def arrived():
            reply = self.post(body, cacheKey=handles["cacheKey"], job=handles["job"])
            assert reply.status_code == 200, (reply.status_code, reply.get_data(as_text=True))
            return reply.get_json().get("response")

        return _wait_until(arrived, "the job's outputs")


def _pid(handles: dict) -> int:
    """The worker's process id, which Dash sends (signed) as the job handle."""
    return int(handles["job"].rpartition("~")[0])


@pytest.fixture
def working() -> dict:
    """The Alder Mere demo as the editor hands it over, its diagram already cached (the job's
    process, forked from this one, starts with it and goes straight to the frontier)."""
    scenario = load_scenario(ALDER)
    compute.diagram_of(scenario)
    return {"source": ALDER.name, "data": compute.dump(scenario), "complete": True}


@pytest.fixture
def hostile(monkeypatch, tmp_path) -> Path:
    pid_file = tmp_path / "pids.json"
    monkeypatch.setattr(planner.frontier, "recovery_frontier", _hostile(pid_file))
    return pid_file


def _started(pid_file: Path) -> dict:
    return json.loads(_wait_until(lambda: pid_file.exists() and pid_file.read_text(), "start"))


def _app(tmp_path, monkeypatch, seconds: str | None = None):
    if seconds is None:
        monkeypatch.delenv(JOB_SECONDS_VARIABLE, raising=False)
    else:
        monkeypatch.setenv(JOB_SECONDS_VARIABLE, seconds)
    return create_app(default_scenario_dir(), cache_dir=tmp_path / "cache")


def _load_benchmark(name: str):
    spec = importlib.util.spec_from_file_location(name, ROOT / "benchmarks" / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_a_job_past_the_budget_is_killed_with_everything_it_started(
    tmp_path, monkeypatch, working, hostile
):
    """Budget 2 s: the server kills the spinning worker and its helper process, and the
    frontier's message area says it was stopped after 2 s, the app's limit for one job."""
    page = Page(_app(tmp_path, monkeypatch, "2"))
    body, handles = page.start_frontier(working)
    pids = _started(hostile)
    assert pids["job"] == _pid(handles)
    response = page.result(body, handles)
    figure, message = response[ids.FRONTIER_GRAPH], response[ids.FRONTIER_MESSAGE]
    text = message["children"]
    assert "The frontier was stopped after 2 s, the app's limit for one job" in text
    assert "Stopped before it finished" in json.dumps(figure)
    _wait_until(lambda: not psutil.pid_exists(pids["job"]), "the worker reaped")
    _wait_until(lambda: not _running(pids["helper"]), "the helper killed")


def test_cancel_kills_the_job_while_the_app_serves_other_users(
    tmp_path, monkeypatch, working, hostile
):
    """With the default budget the hostile job would run for ten minutes: meanwhile another
    user's schedule edit is recomputed, then Cancel kills the job and its helper and the message
    says the user stopped it."""
    page = Page(_app(tmp_path, monkeypatch))
    body, handles = page.start_frontier(working)
    pids = _started(hostile)

    other = Page(page.app)
    app_load = _load_benchmark("app_load")
    draft = {"source": ALDER.name, "data": working["data"], "serial": 1}
    edit = app_load.recompute_body(
        app_load.recompute_callback_id(page.app),
        draft,
        {(app_load.EDITED_SCHEDULE, "floor"): "0.07"},
    )
    reply = other.post(edit)
    assert reply.status_code == 200 and b'"floor":0.07' in reply.get_data()
    assert _running(pids["job"])  # the other user was served while the job ran

    page.cancel_frontier(handles)
    message = page.result(body, handles)[ids.FRONTIER_MESSAGE]["children"]
    assert re.search(r"The frontier was stopped after [\d.]+ s because you pressed Cancel", message)
    _wait_until(lambda: not psutil.pid_exists(pids["job"]), "the worker reaped")
    _wait_until(lambda: not _running(pids["helper"]), "the helper killed")


def test_a_worker_that_dies_on_its_own_is_reported(tmp_path, monkeypatch, working, hostile):
    """Killed from outside (as the system does when memory runs out): the page is told that
    the job ended without an answer, and the helper it left behind is killed too."""
    page = Page(_app(tmp_path, monkeypatch))
    body, handles = page.start_frontier(working)
    pids = _started(hostile)
    os.kill(pids["job"], signal.SIGKILL)
    message = page.result(body, handles)[ids.FRONTIER_MESSAGE]["children"]
    assert "without an answer" in message and "ended unexpectedly" in message
    _wait_until(lambda: not psutil.pid_exists(pids["job"]), "the worker reaped")
    _wait_until(lambda: not _running(pids["helper"]), "the helper killed")


def test_no_job_outlives_the_server(tmp_path, monkeypatch, working, hostile):
    """What the server runs on shutdown (at exit, or when a serving process stops) kills every
    job it started."""
    page = Page(_app(tmp_path, monkeypatch))
    page.start_frontier(working)
    pids = _started(hostile)
    assert (
        pids["job"]
        in page.app.callback_map[page.callback_key(ids.FRONTIER_GRAPH)]["manager"].live()
    )
    jobs.stop_all()
    _wait_until(lambda: not psutil.pid_exists(pids["job"]), "the worker reaped")
    _wait_until(lambda: not _running(pids["helper"]), "the helper killed")


def test_a_job_that_finishes_delivers_its_result_and_leaves_nothing_behind(
    tmp_path, monkeypatch, working
):
    """The ordinary path through the same machinery: a coarse sweep of the demo lake comes back
    with its figure, no message, and a summary with one jump each way, the hysteresis loop of a
    bistable lake under a slowly dialled load (Scheffer et al. 2001, Nature 413:591-596, figure 1),
    without a second copy of the caution the page already shows; its worker is reaped."""
    page = Page(_app(tmp_path, monkeypatch))
    body = page.sweep_body(working, step="0.01")
    handles = page.start(body)
    response = page.result(body, handles)
    assert response[ids.SWEEP_MESSAGE]["children"] == ""
    summary = response[ids.SWEEP_SUMMARY]["children"]
    assert "jump while dialling up" in summary and "jump while dialling down" in summary
    assert CAUTION not in summary
    assert "quasi-static sweep" in json.dumps(response[ids.SWEEP_GRAPH]["figure"]["layout"])
    _wait_until(lambda: not psutil.pid_exists(_pid(handles)), "the worker reaped")
    assert page.app.callback_map[page.callback_key(ids.SWEEP_GRAPH)]["manager"].live() == []


def test_a_model_that_integrates_without_end_is_stopped_at_the_budget(tmp_path, monkeypatch):
    """A user formula that passes every check but makes each integration step tiny: the lake
    model of the demo plus 0.001 sin(1e6 P), a wiggle far faster than any time scale of the lake
    (the sweep of it runs for minutes). With a budget of 2 s the server kills the real planner
    work and the sweep's message says so."""
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data.pop("uncertainty", None)
    data["model"] = {
        "kind": "formula",
        "equations": {"P": "L - s*P + r*P**q/(m**q + P**q) + 0.001*sin(1e6*P)"},
        "parameters": data["model"]["parameters"],
    }
    scenario = scenario_from_data(data, "wiggle.toml")  # valid: nothing refuses it up front
    working = {"source": "wiggle.toml", "data": compute.dump(scenario), "complete": True}
    page = Page(_app(tmp_path, monkeypatch, "2"))
    body = page.sweep_body(working)
    handles = page.start(body)
    response = page.result(body, handles)
    assert (
        "The sweep was stopped after 2 s, the app's limit for one job"
        in (response[ids.SWEEP_MESSAGE]["children"])
    )
    _wait_until(lambda: not psutil.pid_exists(_pid(handles)), "the worker reaped")


@pytest.mark.parametrize(
    "value, field", [("ten", JOB_SECONDS_VARIABLE), ("0", "job_seconds"), ("nan", "job_seconds")]
)
def test_a_bad_budget_is_refused_before_the_app_starts(tmp_path, monkeypatch, value, field):
    with pytest.raises(InputError) as raised:
        _app(tmp_path, monkeypatch, value)
    text = str(raised.value)
    assert field in text and ("not a number" in text or "positive number of seconds" in text)


def test_the_stopped_messages_say_why_in_plain_words():
    """The three endings, as the result area words them (durations: one decimal below 10 s)."""
    assert jobs.stopped_text("sweep", jobs.BUDGET, 600.0) == (
        f"The sweep was {compute.over_budget(600.0)}."
    )
    assert "stopped after 600 s, the app's limit for one job" in compute.over_budget(600.0)
    assert jobs.stopped_text("fit", jobs.CANCELLED, 3.04) == (
        "The fit was stopped after 3 s because you pressed Cancel."
    )
    assert jobs.stopped_text("fit", jobs.CANCELLED, 0.46).startswith(
        "The fit was stopped after 0.5 s"
    )
    assert "without an answer" in jobs.stopped_text("ensemble", jobs.ENDED, 12.0)
