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
from planner.textfiles import write_user_text

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
