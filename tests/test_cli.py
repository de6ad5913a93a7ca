"""Tests for the `planner` command: check, schema, diagram (JSON and HTML), errors, imports."""

from __future__ import annotations

import contextlib
import io
import json
import os
import subprocess
import sys
import tomllib
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from planner.cli import main

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"
FOLD_AGREEMENT = 1e-8


@cache
def _diagram_json() -> dict:
    """Run `diagram --json` once (a few tenths of a second) and keep the parsed output."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(["diagram", str(ALDER), "--json"])
    assert code == 0, err.getvalue()
    return json.loads(out.getvalue())


def _reference_folds(path: Path) -> list[tuple[float, float]]:
    """(L, P) where L(P) = s P - r P^q/(m^q + P^q) has dL/dP = 0: scipy brentq on sign
    changes of the closed-form derivative over 0 < P < 20."""
    p = tomllib.loads(path.read_text(encoding="utf-8"))["model"]["parameters"]
    s, r, m, q = p["s"], p["r"], p["m"], p["q"]

    def slope(P):
        return s - r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2

    grid = np.linspace(0.01, 20.0, 2000)
    values = slope(grid)
    folds = []
    for i in np.nonzero(np.sign(values[:-1]) * np.sign(values[1:]) < 0)[0]:
        P = brentq(slope, grid[i], grid[i + 1], xtol=1e-15, rtol=1e-15)
        folds.append((s * P - r * P**q / (m**q + P**q), P))
    return sorted(folds)


def test_check_demo(capsys):
    assert main(["check", str(ALDER)]) == 0
    out = capsys.readouterr().out
    assert "valid" in out
    assert out.startswith(f"{ALDER}: valid")


@pytest.mark.parametrize("path", sorted(SCENARIOS.glob("*.toml")), ids=lambda p: p.stem)
def test_check_every_demo(path, capsys):
    assert main(["check", str(path)]) == 0
    assert "valid" in capsys.readouterr().out


def test_schema(capsys):
    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    for key in ("model", "control", "schedules"):
        assert key in schema["properties"]


def test_diagram_json_shape():
    data = _diagram_json()
    assert data["control"] == "L"
    assert data["classification"] in {"reversible", "hysteretic", "irreversible"}
    assert data["folds"]
    for fold in data["folds"]:
        assert isinstance(fold["control"], float)
        assert set(fold["state"]) == {"P"}
        assert fold["kind"] in {"collapse", "recovery", "fold"}
    window = data["window"]
    assert window is not None
    assert window["recovery"] < window["collapse"]
    assert data["branches"]
    for branch in data["branches"]:
        assert isinstance(branch["stable"], bool)
        assert branch["points"]
        for point in branch["points"]:
            assert isinstance(point["control"], float)
            assert set(point["state"]) == {"P"}
            assert data["range"][0] <= point["control"] <= data["range"][1]
    assert {b["stable"] for b in data["branches"]} == {True, False}


def test_diagram_json_folds_match_the_fold_condition():
    """The folds of the recycling model are where L(P) = s P - r P^q/(m^q + P^q) has
    dL/dP = 0; derived here with scipy brentq.

    Model: Carpenter, Ludwig & Brock 1999, Management of eutrophication for lakes subject to
    potentially irreversible change, Ecological Applications 9:751-771, model equation.
    """
    data = _diagram_json()
    expected = _reference_folds(ALDER)
    assert len(expected) == 2
    folds = [f for f in data["folds"] if f["in_range"]]
    assert len(folds) == 2
    for fold, (L, P) in zip(folds, expected, strict=True):
        assert abs(fold["control"] - L) < FOLD_AGREEMENT
        assert abs(fold["state"]["P"] - P) < 1e-7
        assert fold["residual"] < 1e-10
    assert [f["kind"] for f in folds] == ["recovery", "collapse"]
    assert data["classification"] == "hysteretic"
    assert abs(data["window"]["recovery"] - expected[0][0]) < FOLD_AGREEMENT
    assert abs(data["window"]["collapse"] - expected[1][0]) < FOLD_AGREEMENT


def test_diagram_html(tmp_path, capsys):
    out = tmp_path / "report" / "diagram.html"
    assert main(["diagram", str(ALDER), "--html", str(out)]) == 2  # no such folder: said first
    out.parent.mkdir()
    capsys.readouterr()
    assert main(["diagram", str(ALDER), "--html", str(out)]) == 0
    captured = capsys.readouterr()
    assert "Caution" in captured.out  # the terminal summary carries it too
    text = out.read_text(encoding="utf-8")
    assert "Caution" in text
    assert "screening" in text
    assert text.lstrip().startswith("<!DOCTYPE html>")


def test_invalid_file_exits_2_naming_file_and_field(tmp_path, capsys):
    text = ALDER.read_text(encoding="utf-8").replace("P = 7.1", "P = 7.1\nZ = 1.0", 1)
    bad = tmp_path / "bad.toml"
    bad.write_text(text, encoding="utf-8")
    for command in (["check", str(bad)], ["diagram", str(bad), "--json"]):
        assert main(command) == 2
        captured = capsys.readouterr()
        assert captured.out == ""
        lines = captured.err.strip().splitlines()
        assert lines
        assert any(line.startswith(f"{bad}: state.Z: ") for line in lines)


def test_missing_file_exits_2(tmp_path, capsys):
    missing = tmp_path / "none.toml"
    assert main(["check", str(missing)]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"{missing}: (file): ")


def test_bad_toml_exits_2(tmp_path, capsys):
    bad = tmp_path / "syntax.toml"
    bad.write_text('name = "no end\n', encoding="utf-8")
    assert main(["check", str(bad)]) == 2
    assert capsys.readouterr().err.startswith(f"{bad}: (file): ")


def test_importing_planner_does_not_import_dash():
    code = (
        "import planner, planner.cli, planner.figures, planner.equilibria, sys; "
        "print('dash' in sys.modules)"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True
    )
    assert result.stdout.strip() == "False"


@pytest.mark.parametrize("path", sorted(SCENARIOS.glob("*.toml")), ids=lambda p: p.stem)
def test_check_loads_no_numerical_or_plotting_stack(path):
    """`planner check` only validates: sympy, the scipy solvers, pandas, plotly and dash take
    most of a second to load and must stay out of it (built-in models carry plain metadata)."""
    heavy = ("sympy", "scipy.optimize", "scipy.integrate", "pandas", "plotly", "dash")
    code = (
        "import sys, planner.cli; "
        f"status = planner.cli.main(['check', {str(path)!r}]); "
        f"print(status, [name for name in {heavy!r} if name in sys.modules])"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True
    )
    lines = result.stdout.strip().splitlines()
    assert lines[0] == f"{path}: valid"
    assert lines[-1] == "0 []"


def test_unreachable_recovery_threshold_is_said_in_words_never_as_a_load():
    """The Tarnby Water demo's recovery fold lies at a negative load (the minimum of
    L(P) = s P - r P^q / (m^q + P^q) on its upper part, scipy brentq on the closed-form
    derivative): `diagram` reports no recovery threshold value, says "not reachable by load
    cuts alone" and never tells the manager to cut the load by an amount.

    Reference: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771 (model);
    Strogatz 2015, Nonlinear Dynamics and Chaos, section 3.1 (fold condition).
    """
    tarnby = SCENARIOS / "tarnby-water.toml"
    recovery_fold = min(L for L, _ in _reference_folds(tarnby))
    assert recovery_fold < 0
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        assert main(["diagram", str(tarnby), "--json"]) == 0, err.getvalue()
    data = json.loads(out.getvalue())
    recovery = data["thresholds"]["recovery"]
    assert recovery["value"] is None and recovery["reachable"] is False
    assert "lowest achievable" in recovery["reason"]
    assert data["window"] is None
    assert data["current"]["to_recovery"] is None
    fold = [f for f in data["folds"] if f["kind"] == "recovery"][0]
    assert abs(fold["control"] - recovery_fold) < FOLD_AGREEMENT and not fold["in_range"]
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        assert main(["diagram", str(tarnby)]) == 0
    text = out.getvalue()
    assert "not reachable by load cuts alone" in text
    assert "must fall by" not in text and "may rise by" not in text


def test_a_reader_that_stops_early_is_no_error():
    """`planner diagram | head -1` when head has already gone: the command's output pipe has
    no reader, so its first write fails; it ends quietly (no traceback, exit 0) instead of
    reporting an internal error."""
    read_end, write_end = os.pipe()
    os.close(read_end)  # the reader is gone before anything is written
    try:
        done = subprocess.run(
            [sys.executable, "-m", "planner.cli", "diagram", str(ALDER)],
            stdout=write_end,
            stderr=subprocess.PIPE,
            timeout=120,
        )
    finally:
        os.close(write_end)
    err = done.stderr.decode()
    assert done.returncode == 0, err
    assert "Traceback" not in err and "internal error" not in err
