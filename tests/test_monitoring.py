"""Reading monitoring records: layout, units, gaps, and every malformed file rejected with exit
code 2 and a message naming the row or the column (for `planner fit` and `planner signals`)."""

from __future__ import annotations

import contextlib
import io
from pathlib import Path

import numpy as np
import pytest

from planner.calibration import observations_for
from planner.cli import main
from planner.errors import InputError
from planner.monitoring import parse_record, read_record, same_unit, split_unit
from planner.scenario import load_scenario

ALDER = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"

GOOD = """# invented test record
year,load [g P / m2 / yr],TP [g P / m2],chlorophyll (ug/L)
2001,2.0,1.6,12
2002,,1.7,
2003,2.2,NA,14
2004,2.4,1.9,15
"""


def test_reads_names_units_gaps_and_rows():
    record = parse_record(GOOD, "good.csv")
    assert record.time_name == "year"
    assert record.names == ("load", "TP", "chlorophyll")
    assert record.units == ("g P / m2 / yr", "g P / m2", "ug/L")
    assert record.times.tolist() == [2001.0, 2002.0, 2003.0, 2004.0]
    assert record.rows.tolist() == [3, 4, 5, 6]  # file rows: comment 1, header 2
    assert np.isnan(record.column("load")[1]) and np.isnan(record.column("TP")[2])
    assert record.observed("TP") == 3


def test_split_and_compare_units():
    assert split_unit("TP [g P / m2]") == ("TP", "g P / m2")
    assert split_unit("load (t/yr)") == ("load", "t/yr")
    assert split_unit("year") == ("year", "")
    assert same_unit("g P/m2", "g P / m2")
    assert not same_unit("mg/L", "Mg/L")
    assert same_unit("", "g P / m2")


def test_load_gaps_are_interpolated_and_the_first_load_held_back():
    """The load path is linear between the rows that have a load (the module's convention)."""
    text = "year,load,P\n2000,,1.0\n2001,2.0,1.1\n2002,,1.2\n2003,3.0,1.3\n"
    scenario = load_scenario(ALDER)
    observations = observations_for(parse_record(text), scenario)
    assert observations.path(np.array([0.0, 1.0, 2.0, 3.0])).tolist() == [2.0, 2.0, 2.5, 3.0]
    assert observations.columns == (("P", "P"),)


def test_unit_that_differs_from_the_scenario_is_refused():
    text = "year,load [mg P / m2 / yr],TP\n2000,2.0,1.0\n2001,2.0,1.1\n"
    with pytest.raises(InputError, match="column load: unit 'mg P / m2 / yr' differs"):
        observations_for(parse_record(text, "units.csv"), load_scenario(ALDER))


def test_missing_file_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="cannot read"):
        read_record(tmp_path / "absent.csv")


MALFORMED = {
    "missing time": (
        "year,load,TP\n2000,2.0,1.0\n,2.1,1.1\n2002,2.2,1.2\n",
        "row 3, column year: time is missing",
    ),
    "duplicate time": (
        "year,load,TP\n2000,2.0,1.0\n2001,2.1,1.1\n2001,2.2,1.2\n",
        "row 4, column year: time 2001 appears twice (first at row 3)",
    ),
    "unsorted times": (
        "year,load,TP\n2000,2.0,1.0\n2002,2.1,1.1\n2001,2.2,1.2\n",
        "row 4, column year: time 2001 comes after 2002",
    ),
    "negative value": (
        "year,load,TP\n2000,2.0,1.0\n2001,2.1,-0.4\n2002,2.2,1.2\n",
        "row 3, column TP: negative value -0.4",
    ),
    "non-numeric value": (
        "year,load,TP\n2000,2.0,1.0\n2001,lots,1.1\n2002,2.2,1.2\n",
        "row 3, column load: 'lots' is not a number",
    ),
    "non-numeric time": (
        "year,load,TP\n2000,2.0,1.0\nyear two,2.1,1.1\n2002,2.2,1.2\n",
        "row 3, column year: time 'year two' is not a number",
    ),
    "ragged row": (
        "year,load,TP\n2000,2.0,1.0\n2001,2.1\n2002,2.2,1.2\n",
        "row 3: 2 cells but the header has 3 columns",
    ),
    "duplicate column": (
        "year,TP,TP\n2000,2.0,1.0\n2001,2.1,1.1\n",
        "row 1, column TP: two columns are named 'TP'",
    ),
    "only a header": ("year,load,TP\n", "(file): only 0 data row(s)"),
}


def _run(argv: list[str]) -> tuple[int, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, err.getvalue()


@pytest.mark.parametrize("case", sorted(MALFORMED))
@pytest.mark.parametrize("command", ["fit", "signals"])
def test_malformed_csv_exits_2_naming_row_or_column(tmp_path, case, command):
    text, expected = MALFORMED[case]
    path = tmp_path / "record.csv"
    path.write_text(text, encoding="utf-8")
    argv = (
        ["fit", str(path), "--scenario", str(ALDER), "--bootstrap", "0"]
        if command == "fit"
        else ["signals", str(path), "--column", "TP"]
    )
    code, stderr = _run(argv)
    assert code == 2, stderr
    assert f"{path}: {expected}" in stderr


def _many_rows(count: int, *, missing_load: bool = False) -> str:
    lines = ["year,load,TP"]
    for i in range(count):
        load = "" if missing_load else "2.0"
        lines.append(f"{2000 + i},{load},{1.6 + 0.01 * i:.3f}")
    return "\n".join(lines) + "\n"


@pytest.mark.parametrize(
    "argv_tail, text, expected",
    [
        (["--fit", "s,r,m"], _many_rows(6), "column TP: too few points for the fit"),
        ([], _many_rows(12, missing_load=True), "column load: needs a load in at least two rows"),
        (["--control-column", "flow"], _many_rows(12), "column flow: not found"),
        (["--state", "P=SRP"], _many_rows(12), "column SRP: not found"),
    ],
)
def test_fit_record_problems_exit_2_naming_the_column(tmp_path, argv_tail, text, expected):
    path = tmp_path / "record.csv"
    path.write_text(text, encoding="utf-8")
    code, stderr = _run(
        ["fit", str(path), "--scenario", str(ALDER), "--bootstrap", "0", *argv_tail]
    )
    assert code == 2, stderr
    assert expected in stderr


@pytest.mark.parametrize(
    "argv_tail, text, expected",
    [
        (["--column", "TP"], _many_rows(6), "column TP: too few points"),
        (
            [],
            _many_rows(12),
            "(columns): several data columns (load, TP); choose one with --column",
        ),
        (["--column", "SRP"], _many_rows(12), "column SRP: not found"),
        (["--column", "TP", "--window", "1.5"], _many_rows(12), "--window: window: must be"),
    ],
)
def test_signals_record_problems_exit_2(tmp_path, argv_tail, text, expected):
    path = tmp_path / "record.csv"
    path.write_text(text, encoding="utf-8")
    code, stderr = _run(["signals", str(path), *argv_tail])
    assert code == 2, stderr
    assert expected in stderr
