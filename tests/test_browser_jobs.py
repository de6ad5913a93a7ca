"""Cancel on every long job, in a real headless Chromium: while the frontier, the search, the
sweep, the ensemble or the fit runs, its Cancel button shows beside the progress bar; pressing it
kills the job's worker process and the result area says the job was stopped and why.

The planner call behind each job is replaced by one that blocks (asleep inside one C call for
ten minutes), so the job is certainly still running when Cancel is pressed (common practice, no
source: a user must be able to stop any long job).
"""

from __future__ import annotations

import os
import re
import time

import psutil
import pytest

import planner.calibration
import planner.ensemble
import planner.frontier
import planner.search
import planner.sweep
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS
from webapp import ids
from webapp.files import default_scenario_dir

pytestmark = BROWSER_MARKS

RECORD = default_scenario_dir() / "data" / "alder-mere-monitoring.csv"

# tab label, planner module and function, how the job starts, its Cancel button and message,
# and how the message names the job
JOBS = {
    "frontier": (
        "Recovery frontier",
        planner.frontier,
        "recovery_frontier",
        ids.FRONTIER_RUN,
        ids.FRONTIER_CANCEL,
        ids.FRONTIER_MESSAGE,
        "The frontier",
    ),
    "search": (
        "Recovery frontier",
        planner.search,
        "search",
        ids.SEARCH_RUN,
        ids.SEARCH_CANCEL,
        ids.SEARCH_MESSAGE,
        "The search for the cheapest schedule",
    ),
    "sweep": (
        "Slow sweep",
        planner.sweep,
        "sweep_for",
        ids.SWEEP_RUN,
        ids.SWEEP_CANCEL,
        ids.SWEEP_MESSAGE,
        "The sweep",
    ),
    "ensemble": (
        "Uncertainty",
        planner.ensemble,
        "run_ensemble",
        ids.ENSEMBLE_RUN,
        ids.ENSEMBLE_CANCEL,
        ids.ENSEMBLE_MESSAGE,
        "The ensemble",
    ),
    "fit": (
        "Monitoring data",
        planner.calibration,
        "fit_record",
        None,  # the upload starts it
        ids.DATA_CANCEL,
        ids.DATA_MESSAGE,
        "The fit",
    ),
}


def _blocking(pid_file):
    def planner_call(*_args, **_kwargs):
        pid_file.write_text(str(os.getpid()))
        time.sleep(600)

    return planner_call


def _running(pid: int) -> bool:
    try:
        return psutil.Process(pid).status() != psutil.STATUS_ZOMBIE
    except psutil.NoSuchProcess:
        return False


@pytest.mark.parametrize("job", list(JOBS))
def test_cancel_stops_a_running_job_and_says_so(page, served, shots, tmp_path, monkeypatch, job):
    from playwright.sync_api import expect

    tab, module, function, run, cancel, message, named = JOBS[job]
    pid_file = tmp_path / "job.pid"
    monkeypatch.setattr(module, function, _blocking(pid_file))
    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1400, "height": 1000})

    page.goto(served["url"])
    expect(page.locator(f"#{ids.SUMMARY}")).to_contain_text("Recovery threshold")
    page.get_by_text(tab, exact=True).click()
    cancel_button = page.locator(f"#{cancel}")
    expect(cancel_button).to_be_hidden()  # nothing to cancel yet

    if run is None:
        page.locator(f"#{ids.DATA_UPLOAD} input[type=file]").set_input_files(str(RECORD))
    else:
        page.locator(f"#{run}").click()
        expect(page.locator(f"#{run}")).to_be_disabled()
    expect(cancel_button).to_be_visible()
    expect(cancel_button).to_be_enabled()
    deadline = time.monotonic() + TIMEOUT_MS / 1000
    while not pid_file.exists() and time.monotonic() < deadline:
        time.sleep(0.05)
    worker = int(pid_file.read_text())
    assert _running(worker)
    page.screenshot(path=str(shots / f"{job}-running.png"), full_page=True)

    cancel_button.click()
    expect(page.locator(f"#{message}")).to_contain_text(
        re.compile(rf"{re.escape(named)} was stopped after [\d.]+ s because you pressed Cancel")
    )
    expect(cancel_button).to_be_hidden()
    if run is not None:
        expect(page.locator(f"#{run}")).to_be_enabled()
    if job == "search":  # nothing was found, so nothing can be added
        expect(page.locator(f"#{ids.SEARCH_ADD}")).to_be_disabled()
    page.screenshot(path=str(shots / f"{job}-cancelled.png"), full_page=True)
    deadline = time.monotonic() + 30
    while _running(worker) and time.monotonic() < deadline:
        time.sleep(0.05)
    assert not _running(worker)
