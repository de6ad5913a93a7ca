"""Tests for the `planner` command: check, schema, diagram (JSON and HTML), errors, imports."""

from __future__ import annotations

import argparse
import contextlib
import io
import json
import logging
import os
import re
import subprocess
import sys
import tomllib
from functools import cache
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from planner.cli import build_parser, main

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
    changes of the closed-form derivative over 0 < P < 2 (g P / m2)."""
    p = tomllib.loads(path.read_text(encoding="utf-8"))["model"]["parameters"]
    s, r, m, q = p["s"], p["r"], p["m"], p["q"]

    def slope(P):
        return s - r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2

    grid = np.linspace(0.001, 2.0, 2000)
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
    text = ALDER.read_text(encoding="utf-8").replace("P = 0.71", "P = 0.71\nZ = 1.0", 1)
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


# ---------------------------------------------------------------------------------------------
# version, verbosity, messages and help

MONITORING = SCENARIOS / "data" / "alder-mere-monitoring.csv"
STAMP = r"\d{4}-\d\d-\d\d \d\d:\d\d:\d\d"


def _run_main(argv: list[str]) -> tuple[int, str, str]:
    """Run the command in this process with stdout and stderr captured (neither a terminal)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def test_version_is_the_package_version(capsys):
    from importlib.metadata import version

    import planner

    with pytest.raises(SystemExit) as stopped:
        main(["--version"])
    assert stopped.value.code == 0
    assert capsys.readouterr().out.strip() == f"planner {planner.__version__}"
    assert planner.__version__ == version("regime-planner")  # the installed metadata agrees


def test_progress_away_from_a_terminal_is_log_lines_and_quiet_silences_them(tmp_path):
    csv = tmp_path / "table.csv"
    code, out, err = _run_main(["compare", str(ALDER), "--csv", str(csv)])
    assert code == 0, err
    assert "Caution" in out  # the summary stays on stdout
    lines = err.splitlines()
    assert re.fullmatch(rf"{STAMP} compare:   0% \[\d+ s\] .+", lines[0]), lines
    assert re.fullmatch(rf"{STAMP} compare: 100% \[\d+ s\] done", lines[-2]), lines
    assert re.fullmatch(rf"{STAMP} wrote {re.escape(str(csv))}", lines[-1]), lines
    assert "\r" not in err  # no bar drawn into a log
    for argv in (["-q", "compare", str(ALDER)], ["compare", str(ALDER), "--quiet"]):
        code, quiet_out, quiet_err = _run_main([*argv, "--csv", str(csv), "--force"])
        assert code == 0 and quiet_err == ""
        assert quiet_out == out


def test_quiet_and_verbose_exclude_each_other(capsys):
    for argv in (["-q", "-v", "check", str(ALDER)], ["-q", "check", str(ALDER), "-v"]):
        with pytest.raises(SystemExit) as stopped:
            main(argv)
        assert stopped.value.code == 2
        assert "-q/--quiet" in capsys.readouterr().err


@pytest.mark.parametrize(
    "quiet, verbose, shown",
    [
        (False, False, ["note", "warning: careful"]),
        (True, False, ["warning: careful"]),
        (False, True, ["detail", "note", "warning: careful"]),
    ],
)
def test_messages_follow_quiet_and_verbose_and_are_put_back(quiet, verbose, shown):
    from planner.cli import _messages_to_stderr

    logger = logging.getLogger("planner.anything")
    parent = logging.getLogger("planner")
    before = (parent.level, parent.propagate, list(parent.handlers))
    err = io.StringIO()
    with contextlib.redirect_stderr(err), _messages_to_stderr(quiet=quiet, verbose=verbose):
        logger.debug("detail")
        logger.info("note")
        logger.warning("careful")
    assert [line.split(" ", 2)[2] for line in err.getvalue().splitlines()] == shown  # stamped
    assert (parent.level, parent.propagate, list(parent.handlers)) == before


def test_messages_on_a_terminal_carry_no_time():
    from planner.cli import MessageFormatter

    record = logging.LogRecord("planner.cli", logging.INFO, __file__, 1, "wrote %s", ("a",), None)
    assert MessageFormatter(stamped=False).format(record) == "wrote a"
    assert re.fullmatch(rf"{STAMP} wrote a", MessageFormatter(stamped=True).format(record))


def test_fit_with_stderr_to_a_pipe_shows_progress_lines(tmp_path):
    """`planner fit ... 2>log`: standard error is no terminal, yet the fit reports progress;
    --force replaces the --out file as it does for every output option."""
    out = tmp_path / "fitted.toml"
    out.write_text("old", encoding="utf-8")
    argv = ["fit", str(MONITORING), "--scenario", str(ALDER), "--bootstrap", "10"]
    done = subprocess.run(
        [sys.executable, "-m", "planner.cli", *argv, "--out", str(out), "--force"],
        capture_output=True,  # stderr is a pipe, as with 2>log
        text=True,
        timeout=300,
    )
    assert done.returncode == 0, done.stderr
    progress = [line for line in done.stderr.splitlines() if re.match(rf"{STAMP} fit: ", line)]
    assert len(progress) >= 2, done.stderr
    assert re.search(r" fit:   0% \[", progress[0]) and re.search(r" fit: 100% \[", progress[-1])
    assert f"wrote {out}" in done.stderr
    assert out.read_text(encoding="utf-8") != "old"
    assert "Traceback" not in done.stderr and done.stdout.strip()


def _option_help(parser: argparse.ArgumentParser) -> dict[str, str]:
    """Each option's help as printed (one line), by its first option string."""
    text = parser.format_help().split("options:", 1)[1]
    blocks = re.split(r"\n(?=  -)", text)
    return {block.split()[0].rstrip(","): " ".join(block.split()) for block in blocks[1:]}


NO_DEFAULT = {"--html", "--csv", "--out", "--save-to", "--hold-years", "--scenario"}
"""Options with nothing to default to: files written only when asked, a required option, the
converse holds (none unless asked)."""


def test_help_states_every_default():
    """Every option that takes a value says what happens without it, as "(default: ...)" or,
    after another note, "(...; default: ...)"; argparse's own wording for plain values."""
    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    for name, parser in sub.choices.items():
        shown = _option_help(parser)
        for action in parser._actions:
            option = action.option_strings[0] if action.option_strings else None
            if option in (None, "-h") or action.nargs == 0 or option in NO_DEFAULT:
                continue
            assert re.search(r"(\(|; )default: ", shown[option]), (name, option, shown[option])
            if action.default not in (None, []):  # a value: argparse's own wording
                assert f"(default: {action.default})" in shown[option], (name, option)


def test_help_reads_defaults_from_where_they_live(capsys):
    from planner.calibration import DEFAULT_BOOTSTRAP
    from planner.ensemble import DEFAULT_CHUNK
    from planner.scenario.uncertainty import Uncertainty

    members = Uncertainty.model_fields["members"].default
    with pytest.raises(SystemExit):
        main(["ensemble", "--help"])
    text = " ".join(capsys.readouterr().out.split())
    assert f"[uncertainty] members, {members} when it sets none" in text
    assert f"(default: {DEFAULT_CHUNK})" in text
    assert "(default: local)" in text
    with pytest.raises(SystemExit):
        main(["fit", "--help"])
    assert f"(default: {DEFAULT_BOOTSTRAP})" in " ".join(capsys.readouterr().out.split())


def test_the_same_option_reads_the_same_on_every_command():
    """--json, --html OUT, --seed S, --time-column NAME...: one spelling and metavar each."""
    sub = next(a for a in build_parser()._actions if isinstance(a, argparse._SubParsersAction))
    seen: dict[str, set] = {}
    for parser in sub.choices.values():
        for action in parser._actions:
            for option in action.option_strings:
                seen.setdefault(option, set()).add(action.metavar)
    assert {option: metavars for option, metavars in seen.items() if len(metavars) > 1} == {}
    assert seen["--html"] == {"OUT"} and seen["--seed"] == {"S"}
    for parser in sub.choices.values():
        if any(a.dest == "json" for a in parser._actions):
            assert any(a.dest == "html" for a in parser._actions)
