"""The command's file outputs: Parquet tables beside CSV and JSON, figures as PNG, SVG and PDF,
the checks made before any work, one option wording on every command, and one path through
the Python API (``planner.api``) for every command's numbers."""

from __future__ import annotations

import argparse
import contextlib
import importlib.util
import io
import json
import re
import struct
import sys
import tomllib
import xml.etree.ElementTree as ElementTree
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from planner import api
from planner.cli import build_parser, main

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"
MONITORING = SCENARIOS / "data" / "alder-mere-monitoring.csv"

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
"""W3C 2003, Portable Network Graphics (PNG) Specification (Second Edition), section 5.2."""
PARQUET_MAGIC = b"PAR1"
"""Apache Parquet format specification, "File Format": 4 bytes at the start and at the end."""
PDF_HEADER, PDF_END = b"%PDF-", b"%%EOF"
"""ISO 32000-1:2008 (PDF 1.7), sections 7.5.2 (file header) and 7.5.5 (file trailer)."""
SVG_NAMESPACE = "http://www.w3.org/2000/svg"
"""W3C 2011, Scalable Vector Graphics (SVG) 1.1 (Second Edition), section 5.1.2."""

needs_images = pytest.mark.skipif(
    api.image_export_missing() is not None, reason=str(api.image_export_missing())
)


def _run(argv: list[str]) -> tuple[int, str, str]:
    """The command run in this process, stdout and stderr captured (neither a terminal)."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


def _ok(argv: list[str]) -> str:
    code, out, err = _run(["-q", *argv])
    assert code == 0, err
    return out


def _parquet(path: Path) -> pd.DataFrame:
    """The file read back by pandas (pyarrow), after checking the Parquet magic number at both
    ends (Apache Parquet format specification, "File Format")."""
    data = path.read_bytes()
    assert data[:4] == PARQUET_MAGIC and data[-4:] == PARQUET_MAGIC
    return pd.read_parquet(path)


# ---------------------------------------------------------------------------------------------
# Parquet beside CSV and JSON


@pytest.fixture(scope="module")
def compared(tmp_path_factory) -> tuple[dict, pd.DataFrame, pd.DataFrame]:
    """One `compare` run writing CSV and Parquet and printing JSON."""
    folder = tmp_path_factory.mktemp("compare")
    csv, parquet = folder / "table.csv", folder / "table.parquet"
    out = _ok(["compare", str(ALDER), "--json", "--csv", str(csv), "--parquet", str(parquet)])
    return json.loads(out), pd.read_csv(csv, keep_default_na=False), _parquet(parquet)


def test_compare_parquet_is_the_csv_table_with_real_dtypes(compared):
    """The Parquet table holds the CSV's cells, column for column, as typed values: "yes" and
    "no" as booleans, numbers as float64 (an empty cell as NaN), text as strings; plus the
    ``recovered`` flag. Read back with pandas.read_parquet (pyarrow engine)."""
    _, csv, frame = compared
    assert list(frame.columns[:2]) == ["schedule", "verdict"] and "recovered" in frame.columns
    typed = frame.drop(columns="recovered")
    assert len(typed.columns) == len(csv.columns) and len(frame) == len(csv) > 1
    for column, header in zip(typed.columns, csv.columns, strict=True):
        cells, values = csv[header], typed[column]
        if set(cells) <= {"yes", "no"}:
            assert values.dtype == bool, column
            assert list(values) == [cell == "yes" for cell in cells], column
        elif pd.api.types.is_float_dtype(values):
            expected = [float(cell) if cell != "" else np.nan for cell in cells]
            np.testing.assert_array_equal(values.to_numpy(), expected, err_msg=column)
        else:
            assert pd.api.types.is_string_dtype(values), (column, values.dtype)
            assert [v if isinstance(v, str) else "" for v in values] == list(cells), column
    assert frame["recovered"].dtype == bool
    assert {frame[c].dtype for c in ("feasible", "relapsed")} == {np.dtype(bool)}
    assert frame.attrs["units"]["meets_target_at"] == "yr"  # units travel in the metadata


def test_compare_parquet_agrees_with_the_json_of_the_same_run(compared):
    """The contract's JSON fields (DESIGN section 5) and the table of one run agree exactly."""
    data, _, frame = compared
    rows = frame.set_index("schedule")
    for entry in data["schedules"]:
        row = rows.loc[entry["name"]]
        assert bool(row["recovered"]) is entry["recovered"]
        assert bool(row["relapsed"]) is entry["relapsed"]
        assert row["lowest_control"] == entry["min_control"]
        assert row["present_value"] == entry["cost"]["present_value"]
        assert row["total_cost"] == entry["cost"]["total"]
        met = entry["meets_target_at"]
        assert np.isnan(row["meets_target_at"]) if met is None else row["meets_target_at"] == met


def test_sweep_and_frontier_parquet_agree_with_their_json(tmp_path):
    """Sweep points (one row per step, up then down) and frontier rows (one per depth) carry
    the numbers of the JSON printed by the same run, as floats."""
    sweep_file, frontier_file = tmp_path / "sweep.parquet", tmp_path / "frontier.parquet"
    data = json.loads(
        _ok(["sweep", str(ALDER), "--step", "0.01", "--json", "--parquet", str(sweep_file)])
    )
    frame = _parquet(sweep_file)
    points = [(way, p) for way in ("up", "down") for p in data[way]]
    assert list(frame["direction"]) == [way for way, _ in points]
    np.testing.assert_array_equal(frame["control"], [p["control"] for _, p in points])
    np.testing.assert_array_equal(frame["P"], [p["state"]["P"] for _, p in points])
    assert frame["control"].dtype == np.float64 and frame["P"].dtype == np.float64

    argv = ["frontier", str(ALDER), "--depths", "0.01,0.03", "--json"]
    data = json.loads(_ok([*argv, "--parquet", str(frontier_file)]))
    frame = _parquet(frontier_file)
    assert len(frame) == len(data["points"]) == 2
    np.testing.assert_array_equal(frame["depth"], [p["depth"] for p in data["points"]])
    np.testing.assert_array_equal(
        frame["least_hold_years"], [p["hold_years"] for p in data["points"]]
    )
    assert frame["achievable"].dtype == bool
    assert list(frame["achievable"]) == [p["achievable"] for p in data["points"]]


def test_fit_parquet_holds_the_fitted_values_and_intervals_of_the_json(tmp_path):
    """One row per fitted parameter, initial state and threshold: value and interval as in
    the JSON of the same run."""
    target = tmp_path / "fit.parquet"
    argv = ["fit", str(MONITORING), "--scenario", str(ALDER), "--bootstrap", "4", "--json"]
    data = json.loads(_ok([*argv, "--fit", "s,r", "--parquet", str(target)]))
    frame = _parquet(target)
    parameters = frame[frame["quantity"] == "parameter"].set_index("name")
    assert sorted(parameters.index) == sorted(data["fitted"]) == ["r", "s"]
    for name, entry in data["parameters"].items():
        assert parameters.loc[name, "value"] == entry["value"]
        low, high = entry["interval"]
        assert (parameters.loc[name, "low"], parameters.loc[name, "high"]) == (low, high)
    assert {str(frame[c].dtype) for c in ("value", "low", "high")} == {"float64"}


def _scenario_without_load_variability(folder: Path) -> Path:
    """Alder Mere with its priors but loads exactly as scheduled: each member's outcome then
    follows from its drawn parameters alone."""
    text = ALDER.read_text(encoding="utf-8")
    start = text.index("[uncertainty.load_variability]")
    end = text.find("\n[", start + 1)
    path = folder / "priors-only.toml"
    path.write_text(text[:start] + ("" if end < 0 else text[end + 1 :]), encoding="utf-8")
    assert "load_variability" not in tomllib.loads(path.read_text(encoding="utf-8"))["uncertainty"]
    return path


def test_ensemble_parquet_members_and_summary(tmp_path):
    """The summary has one row per schedule as in the JSON; the members table one row per
    member and schedule with the member's drawn parameters and outcome. One question, one
    answer (DESIGN section 9): a member's drawn parameters, put into the scenario and run by
    ``compare``, give that member's verdict; draws of the triangular prior stay in its support
    (Kotz & van Dorp 2004, Beyond Beta, chapter 1: support [low, high])."""
    scenario = _scenario_without_load_variability(tmp_path)
    summary_file, members_file = tmp_path / "summary.parquet", tmp_path / "members.parquet"
    argv = ["ensemble", str(scenario), "--members", "12", "--seed", "5", "--json"]
    data = json.loads(
        _ok([*argv, "--parquet", str(summary_file), "--members-parquet", str(members_file)])
    )
    summary, members = _parquet(summary_file), _parquet(members_file)
    assert list(summary["schedule"]) == [s["name"] for s in data["schedules"]]
    assert list(summary["recovered_members"]) == [s["recovered_members"] for s in data["schedules"]]
    np.testing.assert_array_equal(
        summary["p_recovered"], [s["p_recovered"] for s in data["schedules"]]
    )
    assert summary["members"].dtype == np.int64 and summary["feasible"].dtype == bool

    assert len(members) == 12 * len(data["schedules"])
    assert members["member"].dtype == np.int64 and members["recovered"].dtype == bool
    for name in ("r", "m", "s", "meets_target_at", "present_value"):
        assert members[name].dtype == np.float64, name
    counted = members.groupby("schedule", sort=False)["recovered"].sum()
    assert list(counted) == [s["recovered_members"] for s in data["schedules"]]
    assert members["s"].between(1.1, 1.3).all()  # the demo's triangular prior on s
    first = members[members["schedule"] == data["schedules"][0]["name"]]
    for name in ("r", "m", "s"):  # common random numbers: the same draws under every schedule
        for _, rows in members.groupby("schedule"):
            np.testing.assert_array_equal(rows[name].to_numpy(), first[name].to_numpy())

    base = tomllib.loads(scenario.read_text(encoding="utf-8"))
    del base["uncertainty"]
    for member in (0, 7):
        drawn = first.iloc[member]
        base["model"]["parameters"].update({k: float(drawn[k]) for k in ("r", "m", "s")})
        outcomes = api.compare(base).outcomes
        rows = members[members["member"] == member].set_index("schedule")
        for outcome in outcomes:
            assert bool(rows.loc[outcome.name, "recovered"]) is outcome.recovered, outcome.name


# ---------------------------------------------------------------------------------------------
# Figures as images


def _png_size(path: Path) -> tuple[int, int]:
    """Width and height in pixels: by PIL when it is installed, else from the IHDR chunk that
    follows the signature (W3C 2003, PNG Specification, sections 5.2, 5.3 and 11.2.2: a
    4-byte length, the type "IHDR", then width and height as 4-byte big-endian integers)."""
    try:
        from PIL import Image
    except ImportError:
        data = path.read_bytes()[:24]
        assert data[12:16] == b"IHDR"
        return struct.unpack(">II", data[16:24])
    with Image.open(path) as image:
        return image.size


@needs_images
def test_png_figure_has_the_png_signature_and_its_size(tmp_path):
    """`diagram --figure x.png`: a PNG (its 8-byte signature, W3C 2003, PNG Specification,
    section 5.2) of the figure's layout size times the PNG scale."""
    target = tmp_path / "diagram.png"
    _ok(["diagram", str(ALDER), "--figure", str(target)])
    assert target.read_bytes()[:8] == PNG_SIGNATURE
    figure = api.diagram(ALDER).figure()
    width = (figure.layout.width or api.IMAGE_WIDTH) * api.IMAGE_SCALE
    height = (figure.layout.height or api.IMAGE_HEIGHT) * api.IMAGE_SCALE
    assert _png_size(target) == (width, height)
    small = tmp_path / "small.png"  # a size asked for from Python
    small.write_bytes(api.figure_image(figure, "png", width=320, height=240))
    assert _png_size(small) == (320 * api.IMAGE_SCALE, 240 * api.IMAGE_SCALE)


@needs_images
def test_svg_and_pdf_figures(tmp_path):
    """`sweep --figure x.svg` is an SVG document (root element ``svg`` in the SVG namespace,
    W3C 2011, SVG 1.1, section 5.1.2) and `frontier --figure x.PDF` a PDF (header ``%PDF-``,
    trailer ending ``%%EOF``, ISO 32000-1:2008, sections 7.5.2 and 7.5.5): the suffix, in
    either case, chooses the format."""
    svg, pdf = tmp_path / "loop.svg", tmp_path / "frontier.PDF"
    _ok(["sweep", str(ALDER), "--step", "0.01", "--figure", str(svg)])
    root = ElementTree.parse(svg).getroot()
    assert root.tag == f"{{{SVG_NAMESPACE}}}svg"
    assert "P" in svg.read_text(encoding="utf-8")  # the axis title: a drawn figure, not a shell
    _ok(["frontier", str(ALDER), "--depths", "0.01,0.03", "--figure", str(pdf)])
    data = pdf.read_bytes()
    assert data.startswith(PDF_HEADER) and data.rstrip().endswith(PDF_END)


# ---------------------------------------------------------------------------------------------
# Refused before any work


def _refused(argv: list[str]) -> str:
    """Exit 2 with nothing on stdout (the summary comes only after the work) and no progress
    line (the work never started); the message."""
    code, out, err = _run(argv)
    assert code == 2 and out == "", (code, out, err)
    assert "%" not in err  # no progress line such as "compare:   0% [0 s] ..."
    return err


@pytest.mark.parametrize("name", ["diagram.gif", "diagram", "diagram.png.txt"])
def test_a_figure_suffix_that_is_no_image_is_refused(tmp_path, name):
    err = _refused(["diagram", str(ALDER), "--figure", str(tmp_path / name)])
    assert re.match(rf"{re.escape(str(tmp_path / name))}: --figure: .+\.png, \.svg, \.pdf", err)
    assert not (tmp_path / name).exists()


@pytest.mark.parametrize("option, name", [("--figure", "f.svg"), ("--parquet", "t.parquet")])
def test_an_existing_file_is_kept_unless_force(tmp_path, option, name):
    target = tmp_path / name
    target.write_bytes(b"kept")
    err = _refused(["compare", str(ALDER), option, str(target)])
    assert f"{target}: {option}: exists already" in err and "--force" in err
    assert target.read_bytes() == b"kept"
    if option == "--parquet" or api.image_export_missing() is None:
        _ok(["compare", str(ALDER), option, str(target), "--force"])
        assert target.read_bytes() != b"kept"


@pytest.mark.parametrize(
    "option, name",
    [("--figure", "f.pdf"), ("--parquet", "t.parquet"), ("--members-parquet", "m.parquet")],
)
def test_a_missing_folder_is_said_before_the_work(tmp_path, option, name):
    target = tmp_path / "no such folder" / name
    err = _refused(["ensemble", str(ALDER), "--members", "3", option, str(target)])
    assert f"{target}: {option}: its folder" in err and "does not exist" in err


def test_without_pyarrow_the_parquet_option_names_the_extra(monkeypatch, tmp_path):
    """A module mapped to None in sys.modules is one that cannot be imported (Python Language
    Reference, section 5.3.1, "The module cache")."""
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    err = _refused(["compare", str(ALDER), "--parquet", str(tmp_path / "t.parquet")])
    assert "--parquet: " in err and "pyarrow" in err and "'export' extra" in err


def test_without_kaleido_or_chromium_the_figure_option_says_what_is_missing(monkeypatch, tmp_path):
    target = str(tmp_path / "f.png")
    monkeypatch.setitem(sys.modules, "kaleido", None)
    err = _refused(["diagram", str(ALDER), "--figure", target])
    assert "--figure: " in err and "kaleido" in err and "'export' extra" in err
    monkeypatch.delitem(sys.modules, "kaleido")
    if importlib.util.find_spec("kaleido") is None:
        return  # kaleido is missing here in truth: said above
    monkeypatch.setenv("BROWSER_PATH", str(tmp_path / "no-chromium"))
    err = _refused(["diagram", str(ALDER), "--figure", target])
    assert "--figure: " in err and "Chromium" in err and "no-chromium" in err


# ---------------------------------------------------------------------------------------------
# One wording, one path


def _subparsers() -> dict[str, argparse.ArgumentParser]:
    parser = build_parser()
    sub = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    return dict(sub.choices)


FIGURE_HELP = re.compile(
    r"write .+ as an image: PNG, SVG or PDF by OUT's suffix \(needs the export extra and "
    r"Chromium\) \(default: not written\)"
)
PARQUET_HELP = re.compile(
    r"write .+ as Parquet, each column typed \(needs the export extra\) \(default: not written\)"
)


def test_output_options_read_alike_on_every_command():
    """Every command that prints JSON also writes HTML, a figure and its table as Parquet, with
    one wording per option; each such command takes --force; --seed reads alike."""
    commands = _subparsers()
    with_outputs = [n for n, p in commands.items() if any(a.dest == "json" for a in p._actions)]
    expected = {"diagram", "compare", "sweep", "frontier", "search", "fit", "signals", "ensemble"}
    assert set(with_outputs) == expected
    for name in with_outputs:
        actions = {a.dest: a for a in commands[name]._actions}
        for dest in ("html", "figure", "parquet", "force"):
            assert dest in actions, (name, dest)
        assert FIGURE_HELP.fullmatch(actions["figure"].help), (name, actions["figure"].help)
        assert PARQUET_HELP.fullmatch(actions["parquet"].help), (name, actions["parquet"].help)
        assert actions["html"].help.endswith("(default: not written)")
        if "seed" in actions:
            assert actions["seed"].help.startswith("seed of the random draws: "), name
    members = {a.dest: a for a in commands["ensemble"]._actions}["members_parquet"]
    assert PARQUET_HELP.fullmatch(members.help)


def _spy(monkeypatch, name: str) -> list:
    """Record the calls of planner.api.NAME (the real function still runs)."""
    calls: list = []
    real = getattr(api, name)

    def spy(*args, **kwargs):
        calls.append(args)
        return real(*args, **kwargs)

    monkeypatch.setattr(api, name, spy)
    return calls


@pytest.mark.parametrize(
    "function, argv",
    [
        ("load", ["check", str(ALDER)]),
        ("diagram", ["diagram", str(ALDER)]),
        ("compare", ["compare", str(ALDER)]),
        ("hysteresis_sweep", ["sweep", str(ALDER), "--step", "0.02"]),
        ("overshoot_frontier", ["frontier", str(ALDER), "--depths", "0.03"]),
        ("cheapest_schedule", ["search", str(ALDER), "--family", "overshoot"]),
        ("chance_of_recovery", ["ensemble", str(ALDER), "--members", "4"]),
        ("fit", ["fit", str(MONITORING), "--scenario", str(ALDER), "--bootstrap", "0"]),
        ("early_warnings", ["signals", str(MONITORING), "--column", "TP"]),
    ],
)
def test_every_command_gets_its_numbers_from_the_api(monkeypatch, function, argv):
    """The command and a notebook ask the same function (issue: one public API, the CLI calls
    the same functions): replacing planner.api.FUNCTION by a recording wrapper sees the call."""
    calls = _spy(monkeypatch, function)
    _ok(argv)
    assert len(calls) == 1


@needs_images
def test_a_result_gives_its_figure_as_image_bytes():
    """``result.image(format, ...)`` from Python: the figure the arguments choose (here the
    comparison over time) as an SVG document (W3C 2011, SVG 1.1, section 5.1.2)."""
    comparison = api.compare(ALDER)
    data = comparison.image("svg", view="time")
    root = ElementTree.fromstring(data)
    assert root.tag == f"{{{SVG_NAMESPACE}}}svg"
    title = comparison.figure(view="time").layout.title.text
    assert title.split(":")[0] in data.decode("utf-8")
    with pytest.raises(ValueError, match="format"):
        comparison.image("gif")
