"""Reading monitoring records: layout, units, gaps, columns named with or without their unit,
any real values (negative ones refused where the fit reads amounts), and every malformed file
rejected with exit code 2 and a message naming the row or the column (for `planner fit` and
`planner signals`)."""

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
DEMO = ALDER.parent / "data" / "alder-mere-monitoring.csv"

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


def test_a_load_in_another_unit_is_converted_and_a_unit_that_is_no_load_is_refused():
    """A load in mg P / m2 / yr is read in the scenario's g P / m2 / yr (1 mg = 1e-3 g, SI
    prefixes); a load column in ug/L (a concentration) cannot be a load and is refused naming
    the file and the column (common practice, no source)."""
    text = "year,load [mg P / m2 / yr],TP\n2000,2000,1.0\n2001,2500,1.1\n"
    observations = observations_for(parse_record(text, "units.csv"), load_scenario(ALDER))
    np.testing.assert_allclose(observations.path(np.array([0.0, 1.0])), [2.0, 2.5], rtol=1e-12)
    text = "year,load [ug/L],TP\n2000,2.0,1.0\n2001,2.0,1.1\n"
    with pytest.raises(InputError, match="units.csv: column load: 'ug/L' is a concentration"):
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
    "infinite value": (
        "year,load,TP\n2000,2.0,1.0\n2001,2.1,-inf\n2002,2.2,1.2\n",
        "row 3, column TP: '-inf' is not a number",
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
    "duplicate column in the same unit": (
        "year,TP [g P / m2],TP [g P/m2]\n2000,2.0,1.0\n2001,2.1,1.1\n",
        "row 1, column TP: two columns are named 'TP' (columns 2 and 3)",
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


def _demo_header() -> list[str]:
    lines = DEMO.read_text(encoding="utf-8").splitlines()
    return next(line for line in lines if not line.startswith("#")).split(",")


def test_the_demo_records_written_headers_name_its_columns():
    """Each header cell the demo record writes (scenarios/data/make_demo_record.py), e.g.
    `TP [g P / m2]`, names its column, as does the bare name and the same unit written with
    parentheses or other spacing (common practice, no source)."""
    record = read_record(DEMO)
    header = _demo_header()
    assert header == ["year", "load [g P / m2 / yr]", "TP [g P / m2]"]
    assert record.headers == tuple(header[1:])
    for index, written in enumerate(header[1:]):
        name = record.names[index]
        for spelling in (
            written,
            name,
            written.replace(" ", ""),
            f"{name} ({record.units[index]})",
        ):
            assert record.has(spelling)
            assert record.find(spelling) == index
            np.testing.assert_array_equal(record.column(spelling), record.values[index])
            assert record.unit(spelling) == record.units[index]
    assert read_record(DEMO, time_column="year").times.tolist() == record.times.tolist()


def test_fit_takes_columns_by_their_written_headers():
    """`observations_for` (the fit) accepts the demo's written headers for the load and the
    observed column and reads the same observations as with the bare names (common practice,
    no source)."""
    record, scenario = read_record(DEMO), load_scenario(ALDER)
    by_name = observations_for(record, scenario, control_column="load", states={"P": "TP"})
    by_header = observations_for(
        record,
        scenario,
        control_column="load [g P / m2 / yr]",
        states={"P": "TP [g P / m2]"},
    )
    np.testing.assert_array_equal(by_header.values, by_name.values)
    np.testing.assert_array_equal(by_header.rows, by_name.rows)
    times = np.linspace(0.0, float(record.times[-1] - record.times[0]), 7)
    np.testing.assert_array_equal(by_header.path(times), by_name.path(times))


def test_missing_and_ambiguous_columns_list_the_columns():
    """A name in another unit is not found; a name shared by columns in different units is
    ambiguous until the unit is given; both messages list the columns (common practice, no
    source)."""
    text = "year,TP [g P / m2],TP [ug/L],load\n2000,1.0,30,2\n2001,1.1,33,2\n"
    record = parse_record(text, "two.csv")
    assert record.names == ("TP", "TP", "load")
    assert record.find("TP [ug/L]") == 1 and record.find("TP (g P/m2)") == 0
    with pytest.raises(InputError) as error:
        record.column("TP", option="--column")
    (problem,) = error.value.problems
    assert (problem.source, problem.field) == ("two.csv", "column TP")
    assert "ambiguous: 2 columns are named so (TP [g P / m2], TP [ug/L])" in problem.reason
    assert problem.reason.endswith("choose one with --column")
    with pytest.raises(InputError) as error:
        record.column("TP [mg/L]")
    columns = "(columns: TP [g P / m2], TP [ug/L], load)"
    assert str(error.value) == f"two.csv: column TP [mg/L]: not found {columns}"
    with pytest.raises(InputError) as error:
        record.column("load [t/yr]")  # the column states no unit, so none can match
    assert str(error.value) == f"two.csv: column load [t/yr]: not found {columns}"
    with pytest.raises(InputError, match=r"column day: time column not found \(columns: year"):
        parse_record(text, "two.csv", time_column="day")


def test_negative_values_are_read_and_refused_only_as_amounts():
    """Any finite value is read (anomalies and logarithms are negative); reading a column as
    loads or amounts, as the fit does, refuses the negative ones naming each row (common
    practice, no source)."""
    text = "year,load,TP\n2000,2.0,1.0\n2001,2.1,-0.4\n2002,2.2,0\n2003,2.3,-1e-3\n"
    record = parse_record(text, "signs.csv")
    np.testing.assert_array_equal(record.column("TP", amounts=False), [1.0, -0.4, 0.0, -1e-3])
    with pytest.raises(InputError) as error:
        record.column("TP")
    assert [str(p) for p in error.value.problems] == [
        "signs.csv: row 3, column TP: negative value -0.4: loads and amounts cannot be negative",
        "signs.csv: row 5, column TP: negative value -0.001: loads and amounts cannot be negative",
    ]
    np.testing.assert_array_equal(record.column("load"), [2.0, 2.1, 2.2, 2.3])


def test_fit_refuses_a_negative_observation_and_signals_accepts_it(tmp_path):
    """The fit reads loads and lake TP as amounts and refuses a negative value by row and
    column (exit 2); `signals` reads any real value and computes the indicators (exit 0)
    (common practice, no source)."""
    values = [1.0 + 0.05 * i for i in range(12)]
    values[4] = -0.4
    lines = ["year,load,TP", *(f"{2000 + i},2.0,{v}" for i, v in enumerate(values))]
    path = tmp_path / "record.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    code, stderr = _run(["fit", str(path), "--scenario", str(ALDER), "--bootstrap", "0"])
    assert code == 2, stderr
    assert f"{path}: row 6, column TP: negative value -0.4" in stderr
    code, stderr = _run(["signals", str(path), "--column", "TP"])
    assert code == 0, stderr
