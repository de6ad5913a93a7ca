"""Monitoring records: a CSV of yearly loads and lake measurements, read and checked.

File layout (comma separated, UTF-8):

- lines starting with ``#`` are comments (they still count as rows in messages);
- the first other line is the header: one name per column, optionally followed by its unit in
  square brackets or parentheses, for example ``TP [g P / m2]`` or ``load (g P / m2 / yr)``;
- every later line is one time: the time column (decimal years, default the first column) and
  the data columns. An empty cell (or ``NA``, ``N/A``, ``NaN``, ``-``) is a gap; gaps are allowed
  in every column but the time column.

Rows in messages are the line numbers of the file (1 = the first line), which are the row
numbers a spreadsheet shows. Every problem is an :class:`~planner.errors.InputError` whose field
names the row and the column, e.g. ``row 7, column TP``.
"""

from __future__ import annotations

import csv
import io
import os
import re
from dataclasses import dataclass, field

import numpy as np

from planner.errors import InputError, Problem
from planner.textfiles import read_user_text

MAX_RECORD_BYTES = 5_000_000
MAX_PROBLEMS = 20  # report at most this many cell problems, then say how many more there were
GAP_TOKENS = frozenset({"", "na", "n/a", "nan", "-"})
MIN_ROWS = 2
_UNIT = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<bracket>[^\]]*)\]|\((?P<paren>[^)]*)\))\s*$")


@dataclass(frozen=True, eq=False)
class Record:
    """A monitoring record: one time column and named data columns, gaps as NaN.

    ``times`` (k,) strictly increasing, in the time column's unit (years unless stated);
    ``values`` (number of columns, k) in each column's unit; ``rows`` (k,) the file row of each
    time, for messages; ``units`` the unit stated in the header ("" when none was given).
    """

    source: str
    time_name: str
    time_unit: str
    times: np.ndarray
    rows: np.ndarray
    names: tuple[str, ...]
    units: tuple[str, ...]
    values: np.ndarray = field(repr=False)

    def __post_init__(self) -> None:
        for array in (self.times, self.rows, self.values):
            array.setflags(write=False)

    def has(self, name: str) -> bool:
        return name in self.names

    def column(self, name: str, *, option: str = "") -> np.ndarray:
        """The values of column ``name`` (NaN for gaps); a missing column is an InputError that
        lists the columns and, when given, the option that chooses another."""
        if name not in self.names:
            hint = f"; choose one with {option}" if option else ""
            raise InputError(
                [
                    Problem(
                        self.source,
                        f"column {name}",
                        f"not found (columns: {', '.join(self.names) or 'none'}){hint}",
                    )
                ]
            )
        return self.values[self.names.index(name)]

    def unit(self, name: str) -> str:
        return self.units[self.names.index(name)]

    def observed(self, name: str) -> int:
        """How many values (not gaps) column ``name`` holds."""
        return int(np.count_nonzero(np.isfinite(self.column(name))))

    def row_of(self, index: int) -> int:
        """File row of the ``index``-th time."""
        return int(self.rows[index])


def split_unit(header: str) -> tuple[str, str]:
    """``"TP [g P / m2]"`` -> ``("TP", "g P / m2")``; a header without a unit gives ``""``."""
    text = header.strip()
    match = _UNIT.match(text)
    if match is None or not match.group("name"):
        return text, ""
    unit = match.group("bracket") if match.group("bracket") is not None else match.group("paren")
    return match.group("name").strip(), unit.strip()


def same_unit(a: str, b: str) -> bool:
    """Units agree when they are equal ignoring spaces (``g P/m2`` and ``g P / m2``); letter case
    matters (mg and Mg differ). An unstated unit ("") agrees with anything."""
    if not a or not b:
        return True
    return a.replace(" ", "") == b.replace(" ", "")


def read_record(path: str | os.PathLike[str], *, time_column: str | None = None) -> Record:
    """Read and check a monitoring CSV file (see the module docstring for the layout)."""
    text = read_user_text(path, MAX_RECORD_BYTES, encoding="utf-8-sig")
    return parse_record(text, str(path), time_column=time_column)


def parse_record(text: str, source: str = "<text>", *, time_column: str | None = None) -> Record:
    """Check CSV text (from a file or an upload) and return the record.

    ``time_column`` names the time column (default: the first column). Problems are collected
    over the whole file (up to MAX_PROBLEMS) and raised together.
    """
    if len(text.encode("utf-8", errors="replace")) > MAX_RECORD_BYTES:
        raise InputError([Problem(source, "(file)", f"larger than {MAX_RECORD_BYTES} bytes")])
    try:
        lines = list(enumerate(csv.reader(io.StringIO(text)), start=1))
    except csv.Error as error:
        raise InputError([Problem(source, "(file)", f"not valid CSV: {error}")]) from None
    lines = [
        (row, cells) for row, cells in lines if cells and not cells[0].lstrip().startswith("#")
    ]
    lines = [(row, cells) for row, cells in lines if any(c.strip() for c in cells)]
    if not lines:
        raise InputError([Problem(source, "(file)", "empty: expected a header and data rows")])
    header_row, header = lines[0]
    names, units = zip(*(split_unit(cell) for cell in header), strict=True)
    problems = _header_problems(source, header_row, names)
    if problems:
        raise InputError(problems)
    time_name = names[0] if time_column is None else time_column
    if time_name not in names:
        raise InputError(
            [
                Problem(
                    source,
                    f"column {time_name}",
                    f"time column not found (columns: {', '.join(names)}); "
                    "choose it with --time-column",
                )
            ]
        )
    time_index = names.index(time_name)
    data_names = tuple(n for i, n in enumerate(names) if i != time_index)
    if not data_names:
        raise InputError([Problem(source, f"row {header_row}", "no data column besides the time")])
    data_units = tuple(u for i, u in enumerate(units) if i != time_index)

    problems = []
    times: list[float] = []
    rows: list[int] = []
    values: list[list[float]] = []
    first_row_of: dict[float, int] = {}
    for row, cells in lines[1:]:
        if len(cells) != len(names):
            problems.append(
                Problem(
                    source,
                    f"row {row}",
                    f"{len(cells)} cells but the header has {len(names)} columns",
                )
            )
            continue
        time = _time_cell(source, row, time_name, cells[time_index], problems)
        if time is not None:
            if time in first_row_of:
                problems.append(
                    Problem(
                        source,
                        f"row {row}, column {time_name}",
                        f"time {time:g} appears twice (first at row {first_row_of[time]}); "
                        "keep one row per time",
                    )
                )
            elif times and time < times[-1]:
                problems.append(
                    Problem(
                        source,
                        f"row {row}, column {time_name}",
                        f"time {time:g} comes after {times[-1]:g}; sort the rows by time",
                    )
                )
            first_row_of.setdefault(time, row)
        cells_out = []
        for name, cell in zip(
            data_names, (c for i, c in enumerate(cells) if i != time_index), strict=True
        ):
            cells_out.append(_value_cell(source, row, name, cell, problems))
        if time is not None:
            times.append(time)
            rows.append(row)
            values.append(cells_out)
    if problems:
        raise InputError(_capped(problems, source))
    if len(times) < MIN_ROWS:
        raise InputError(
            [
                Problem(
                    source,
                    "(file)",
                    f"only {len(times)} data row(s); a record needs at least {MIN_ROWS}",
                )
            ]
        )
    return Record(
        source=source,
        time_name=time_name,
        time_unit=units[time_index],
        times=np.array(times, dtype=float),
        rows=np.array(rows, dtype=int),
        names=data_names,
        units=data_units,
        values=np.array(values, dtype=float).T.copy(),
    )


def _header_problems(source: str, row: int, names: tuple[str, ...]) -> list[Problem]:
    problems = []
    seen: dict[str, int] = {}
    for index, name in enumerate(names, start=1):
        if not name:
            problems.append(Problem(source, f"row {row}, column {index}", "column without a name"))
        elif name in seen:
            problems.append(
                Problem(
                    source,
                    f"row {row}, column {name}",
                    f"two columns are named {name!r} (columns {seen[name]} and {index})",
                )
            )
        seen.setdefault(name, index)
    return problems


def _number(cell: str) -> float | None:
    try:
        return float(cell)
    except ValueError:
        return None


def _time_cell(source: str, row: int, column: str, cell: str, problems: list) -> float | None:
    text = cell.strip()
    where = f"row {row}, column {column}"
    if text.lower() in GAP_TOKENS:
        problems.append(Problem(source, where, "time is missing; every row needs its time"))
        return None
    value = _number(text)
    if value is None or not np.isfinite(value):
        problems.append(Problem(source, where, f"time {text!r} is not a number"))
        return None
    return value


def _value_cell(source: str, row: int, column: str, cell: str, problems: list) -> float:
    text = cell.strip()
    if text.lower() in GAP_TOKENS:
        return float("nan")
    where = f"row {row}, column {column}"
    value = _number(text)
    if value is None or not np.isfinite(value):
        problems.append(
            Problem(source, where, f"{text!r} is not a number (leave the cell empty for a gap)")
        )
        return float("nan")
    if value < 0:
        problems.append(
            Problem(
                source, where, f"negative value {value:g}: loads and amounts cannot be negative"
            )
        )
    return value


def _capped(problems: list[Problem], source: str) -> list[Problem]:
    if len(problems) <= MAX_PROBLEMS:
        return problems
    more = len(problems) - MAX_PROBLEMS
    return [
        *problems[:MAX_PROBLEMS],
        Problem(source, "(file)", f"{more} more problem(s) not shown"),
    ]
