"""Tests for progress reporting: throttled log lines away from a terminal, a tqdm bar on one,
nothing when quiet. Time comes from a fake clock: no test depends on how fast it runs."""

from __future__ import annotations

import io
import logging
import re

import pytest

from planner.progress import (
    LOG_MIN_SECONDS,
    LOG_SECONDS,
    LOG_STEP,
    ProgressReport,
    elapsed_text,
    scaled,
)

LINE = re.compile(
    r"^(?:(?P<label>\w+): )?(?P<percent>[ \d]{3})% \[(?P<elapsed>[^\]]+)\] (?P<text>.*)$"
)


class FakeClock:
    """A clock the test moves by hand."""

    def __init__(self) -> None:
        self.now = 1000.0

    def __call__(self) -> float:
        return self.now


class FakeTerminal(io.StringIO):
    """A stream that says it is a terminal."""

    def isatty(self) -> bool:
        return True


def _lines(caplog) -> list[re.Match[str]]:
    """The progress lines logged so far, parsed (every one must have the documented shape)."""
    records = [r for r in caplog.records if r.name == "planner.progress"]
    assert all(r.levelno == logging.INFO for r in records)
    matches = [LINE.match(r.getMessage()) for r in records]
    assert all(matches), [r.getMessage() for r in records]
    return matches


@pytest.fixture
def clock() -> FakeClock:
    return FakeClock()


@pytest.fixture(autouse=True)
def _show_progress_lines(caplog):
    caplog.set_level(logging.INFO, logger="planner.progress")


def test_not_a_terminal_means_log_lines_not_a_bar(clock, caplog):
    stream = io.StringIO()
    report = ProgressReport("fit", stream=stream, clock=clock)
    assert report.mode == "log"
    report(0.0, "starting")
    report(1.0, "done")
    assert stream.getvalue() == ""  # lines go through logging, never as a bar into the stream
    lines = _lines(caplog)
    assert [(m["label"], int(m["percent"]), m["text"]) for m in lines] == [
        ("fit", 0, "starting"),
        ("fit", 100, "done"),
    ]


def test_log_lines_come_every_tenth_of_the_work_and_reach_100(clock, caplog):
    """One call a second for 100 seconds, 1% of the work each: a line at each tenth."""
    report = ProgressReport("ensemble", stream=io.StringIO(), clock=clock)
    for i in range(101):
        report(i / 100, f"member block {i}")
        clock.now += 1.0
    lines = _lines(caplog)
    assert [int(m["percent"]) for m in lines] == list(range(0, 101, 10))
    assert lines[-1]["text"] == "member block 100"
    assert lines[-1]["elapsed"] == "1 min 40 s"
    assert LOG_STEP == 0.1  # the expectation above is written for it


def test_a_fast_run_leaves_its_first_and_last_lines_only(clock, caplog):
    report = ProgressReport("compare", stream=io.StringIO(), clock=clock)
    for i in range(1001):
        report(i / 1000, "integrating")
        clock.now += LOG_MIN_SECONDS / 1000  # the whole run takes LOG_MIN_SECONDS
    assert [int(m["percent"]) for m in _lines(caplog)] == [0, 100]


def test_a_slow_stretch_still_shows_signs_of_life(clock, caplog):
    """Stuck at 5% for two minutes: a line every LOG_SECONDS, no more."""
    report = ProgressReport("fit", stream=io.StringIO(), clock=clock)
    for _ in range(121):
        report(0.05, "bootstrap refits")
        clock.now += 1.0
    lines = _lines(caplog)
    assert len(lines) == 1 + int(120 // LOG_SECONDS)
    assert [m["elapsed"] for m in lines] == [elapsed_text(k * LOG_SECONDS) for k in range(5)]
    assert all(int(m["percent"]) == 5 for m in lines)


def test_almost_done_is_not_shown_as_100(clock, caplog):
    report = ProgressReport("", stream=io.StringIO(), clock=clock)
    report(0.0, "start")
    clock.now += 100.0
    report(0.999, "nearly")
    lines = _lines(caplog)
    assert lines[-1]["label"] is None and int(lines[-1]["percent"]) == 99


def test_a_repeated_end_is_said_once_and_a_new_task_starts_again(clock, caplog):
    report = ProgressReport("sweep", stream=io.StringIO(), clock=clock)
    report(0.0, "up")
    report(1.0, "done")
    report(1.0, "done")  # the inner and the outer task both end
    clock.now += 5.0
    report(0.0, "again")
    report(0.5, "half")  # too soon after the new start for a line
    report(1.0, "done")
    assert [(int(m["percent"]), m["elapsed"]) for m in _lines(caplog)] == [
        (0, "0 s"),
        (100, "0 s"),
        (0, "0 s"),
        (100, "0 s"),
    ]


def test_quiet_writes_nothing(clock, caplog):
    stream = FakeTerminal()
    report = ProgressReport("fit", stream=stream, quiet=True, clock=clock)
    for i in range(11):
        report(i / 10, "working")
        clock.now += 60.0
    report.close()
    assert stream.getvalue() == ""
    assert _lines(caplog) == []


def test_out_of_range_fractions_are_clamped(clock, caplog):
    report = ProgressReport("fit", stream=io.StringIO(), clock=clock)
    report(-0.5, "before")
    report(float("nan"), "unknown")
    report(7.0, "beyond")
    assert [int(m["percent"]) for m in _lines(caplog)] == [0, 100]


def test_a_terminal_gets_a_tqdm_bar_that_ends_at_100(caplog):
    stream = FakeTerminal()
    with ProgressReport("compare", stream=stream) as report:
        assert report.mode == "bar"
        for i in range(5):
            report(i / 4, f"schedule {i}")
    text = stream.getvalue()
    assert "compare:" in text and "100%" in text and "schedule 4" in text
    assert _lines(caplog) == []  # a bar, not log lines
    assert report._bar is None  # reaching 1.0 closed it


def test_an_interrupted_bar_is_closed_where_it_stands():
    stream = FakeTerminal()
    with pytest.raises(RuntimeError), ProgressReport("fit", stream=stream) as report:
        report(0.3, "fitting")
        raise RuntimeError("stop")
    assert report._bar is None
    assert " 30%" in stream.getvalue() and "100%" not in stream.getvalue()


def test_scaled_maps_a_sub_task_onto_its_share():
    seen = []
    inner = scaled(lambda fraction, message: seen.append((fraction, message)), 0.2, 0.6)
    inner(0.0, "a")
    inner(0.5, "b")
    inner(1.0, "c")
    assert seen == [(0.2, "a"), (pytest.approx(0.4), "b"), (pytest.approx(0.6), "c")]


@pytest.mark.parametrize(
    "seconds, text",
    [(0.4, "0 s"), (59.9, "59 s"), (60, "1 min 00 s"), (187, "3 min 07 s"), (7500, "2 h 05 min")],
)
def test_elapsed_text(seconds, text):
    assert elapsed_text(seconds) == text
