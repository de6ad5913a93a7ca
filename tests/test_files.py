"""Tests for what the planner writes: atomic text files that never replace a saved file by
accident, and CSV tables a spreadsheet cannot turn into formulas."""

from __future__ import annotations

import contextlib
import csv
import io
import json
import os
import stat
import tomllib
from pathlib import Path

import pytest

from planner.cli import main
from planner.errors import InputError
from planner.report import table_csv
from planner.textfiles import STALE_SECONDS, write_user_text

ALDER = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
HOSTILE = ("=cmd|' /C calc'!A0", "@SUM(A1:A9)", "+1+1", "-2+3", "\t=1", "\r=1")


def test_write_user_text_keeps_an_existing_file_unless_asked(tmp_path):
    target = tmp_path / "plan.toml"
    write_user_text(target, "first")
    with pytest.raises(InputError) as error:
        write_user_text(target, "second")
    assert "exists already" in str(error.value) and str(target) in str(error.value)
    assert target.read_text() == "first"
    write_user_text(target, "second", overwrite=True)
    assert target.read_text() == "second"
    assert [p.name for p in tmp_path.iterdir()] == ["plan.toml"]  # no temporary left behind


def test_write_user_text_gives_the_usual_permissions(tmp_path):
    """Not 0600 as a bare temporary file would have: what open() gives under the umask."""
    mask = os.umask(0o022)
    try:
        target = write_user_text(tmp_path / "shared.toml", "x")
    finally:
        os.umask(mask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o644


def test_a_failed_write_leaves_the_old_file_and_no_temporary(tmp_path):
    target = tmp_path / "plan.toml"
    target.write_text("saved before")
    with pytest.raises(UnicodeEncodeError):
        write_user_text(target, "half \ud800 written", overwrite=True)
    assert target.read_text() == "saved before"
    assert [p.name for p in tmp_path.iterdir()] == ["plan.toml"]


def test_write_into_a_missing_folder_names_the_file(tmp_path):
    target = tmp_path / "missing" / "plan.toml"
    with pytest.raises(InputError) as error:
        write_user_text(target, "x")
    assert str(target) in str(error.value) and "cannot write" in str(error.value)


def test_csv_cells_that_would_start_a_formula_are_escaped():
    """Text cells starting with = + - @ tab or carriage return are prefixed with an apostrophe;
    numbers stay numbers (OWASP, CSV Injection, mitigation; common practice, no source)."""
    text = table_csv(("name", *HOSTILE[:1]), [[value, -0.5] for value in HOSTILE])
    rows = list(csv.reader(io.StringIO(text, newline="")))
    assert rows[0] == ["name", "'" + HOSTILE[0]]
    for row, value in zip(rows[1:], HOSTILE, strict=True):
        assert row == ["'" + value, "-0.5"]
        assert not row[0].startswith(("=", "+", "-", "@", "\t", "\r"))


def test_compare_csv_escapes_a_hostile_schedule_name(tmp_path):
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data["schedules"] = data["schedules"][:1]
    data["schedules"][0]["name"] = HOSTILE[0]
    import tomli_w

    scenario = tmp_path / "hostile.toml"
    scenario.write_text(tomli_w.dumps(data), encoding="utf-8")
    out_csv = tmp_path / "table.csv"
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(io.StringIO()):
        assert main(["compare", str(scenario), "--csv", str(out_csv)]) == 0
    rows = list(csv.reader(out_csv.open(encoding="utf-8")))
    assert rows[1][0] == "'" + HOSTILE[0]
    # the JSON keeps the name as the user wrote it: escaping is for spreadsheets only
    out = io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(io.StringIO()):
        assert main(["compare", str(scenario), "--json"]) == 0
    assert json.loads(out.getvalue())["schedules"][0]["name"] == HOSTILE[0]


def _cli(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def test_outputs_are_kept_unless_forced(tmp_path):
    table = tmp_path / "table.csv"
    table.write_text("saved by the user")
    code, out, err = _cli("compare", ALDER, "--csv", table)
    assert code == 2 and f"{table}: --csv: exists already" in err and "--force" in err
    assert out == ""  # refused before any work
    assert table.read_text() == "saved by the user"
    code, _, err = _cli("compare", ALDER, "--csv", table, "--force")
    assert code == 0, err
    assert table.read_text(encoding="utf-8").startswith("Schedule")


def test_output_folders_are_checked_before_the_work(tmp_path):
    """`fit --out` into a missing folder fails at once (nothing fitted, nothing printed), not
    after the whole fit."""
    record = ALDER.parent / "data" / "alder-mere-monitoring.csv"
    missing = tmp_path / "missing" / "fitted.toml"
    code, out, err = _cli("fit", record, "--scenario", ALDER, "--out", missing)
    assert code == 2 and out == ""
    assert f"{missing}: --out: its folder" in err and "does not exist" in err
    code, out, err = _cli("diagram", ALDER, "--html", tmp_path)
    assert code == 2 and "is a folder" in err


def test_stale_temporaries_of_killed_saves_are_cleaned(tmp_path):
    """A save killed before its rename leaves a hidden temporary; the next save into the
    folder removes those older than STALE_SECONDS and keeps a young one (a save in progress)."""
    stale = tmp_path / ".plan.toml.abc123.tmp"
    young = tmp_path / ".other.toml.def456.tmp"
    for path in (stale, young):
        path.write_text("half")
    old = stale.stat().st_mtime - STALE_SECONDS - 60
    os.utime(stale, (old, old))
    write_user_text(tmp_path / "plan.toml", "whole")
    assert not stale.exists() and young.exists()
    assert (tmp_path / "plan.toml").read_text() == "whole"
