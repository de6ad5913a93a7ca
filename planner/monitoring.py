"""Monitoring records: a CSV of yearly loads and lake measurements, read and checked.

File layout (comma separated, UTF-8):

- lines starting with ``#`` are comments (they still count as rows in messages);
- the first other line is the header: one name per column, optionally followed by its unit in
  square brackets or parentheses, for example ``TP [g P / m2]`` or ``load (g P / m2 / yr)``;
- every later line is one time: the time column (decimal years, default the first column) and
  the data columns. An empty cell (or ``NA``, ``N/A``, ``NaN``, ``-``) is a gap; gaps are allowed
  in every column but the time column. Values are any finite real numbers: a record may hold
  anomalies or logarithms as well as loads and amounts. Reading a column as an amount (the
  default of :meth:`Record.column`, which the fit uses) refuses its negative values.

A column is looked up by its name alone (``TP``) or by its name and unit as the header writes them
(``TP [g P / m2]``; ``TP (g P/m2)`` is the same: brackets or parentheses, spaces in the unit
ignored). Two columns may share a name only when they state different units (``TP [g P / m2]``
and ``TP [ug/L]``); the name alone is then ambiguous and the unit chooses.

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

from planner.errors import InputError, Problem, capped
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

    @property
    def headers(self) -> tuple[str, ...]:
        """Each data column as a header writes it: ``TP [g P / m2]``, or the bare name."""
        return tuple(_header(n, u) for n, u in zip(self.names, self.units, strict=True))

    def has(self, name: str) -> bool:
        """Whether ``name`` (with or without its unit) designates at least one data column."""
        return bool(_matching(name, self.names, self.units))

    def find(self, name: str, *, option: str = "") -> int:
        """Index of the data column that ``name`` designates (see the module docstring); a
        missing or ambiguous name is an InputError that lists the columns and, when given, the
        option that chooses another."""
        return _find(self.source, name, self.names, self.units, option)

    def label(self, index: int) -> str:
        """How messages name data column ``index``: its name, or its header when another
        column shares the name."""
        return _labels(self.names, self.units)[index]

    def column(self, name: str, *, option: str = "", amounts: bool = True) -> np.ndarray:
        """The values of column ``name`` (NaN for gaps).

        ``amounts=True`` reads the column as loads or amounts: a negative value is an
        InputError naming its row. ``amounts=False`` accepts any real value (anomalies,
        logarithms). A missing or ambiguous name is an InputError (see :meth:`find`).
        """
        index = self.find(name, option=option)
        values = self.values[index]
        if amounts:
            negative = np.flatnonzero(values < 0)  # gaps (NaN) compare False
            if negative.size:
                column = self.label(index)
                raise InputError(
                    capped(
                        [
                            Problem(
                                self.source,
                                f"row {self.rows[i]}, column {column}",
                                f"negative value {values[i]:g}: loads and amounts cannot be "
                                "negative",
                            )
                            for i in negative
                        ],
                        self.source,
                    )
                )
        return values

    def unit(self, name: str) -> str:
        return self.units[self.find(name)]

    def observed(self, name: str) -> int:
        """How many values (not gaps) column ``name`` holds."""
        return int(np.count_nonzero(np.isfinite(self.values[self.find(name)])))

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


def _header(name: str, unit: str) -> str:
    return f"{name} [{unit}]" if unit else name


def _labels(names: tuple[str, ...], units: tuple[str, ...]) -> list[str]:
    """How messages name each column: its name, or its header when the name is shared."""
    return [_header(n, u) if names.count(n) > 1 else n for n, u in zip(names, units, strict=True)]


def _matching(requested: str, names: tuple[str, ...], units: tuple[str, ...]) -> list[int]:
    """Indices of the columns ``requested`` designates: same name and, when it states a unit,
    the same stated unit."""
    name, unit = split_unit(requested)
    return [
        i
        for i, (n, u) in enumerate(zip(names, units, strict=True))
        if n == name and (not unit or (u and same_unit(u, unit)))
    ]


def _find(
    source: str,
    requested: str,
    names: tuple[str, ...],
    units: tuple[str, ...],
    option: str,
    *,
    what: str = "",
) -> int:
    """The one column ``requested`` designates, else an InputError whose reason starts with
    ``what`` and lists the columns."""
    matches = _matching(requested, names, units)
    if len(matches) == 1:
        return matches[0]
    headers = [_header(n, u) for n, u in zip(names, units, strict=True)]
    hint = f"; choose one with {option}" if option else ""
    if not matches:
        reason = f"{what}not found (columns: {', '.join(headers) or 'none'}){hint}"
    else:
        shared = ", ".join(headers[i] for i in matches)
        reason = (
            f"{what}ambiguous: {len(matches)} columns are named so ({shared}); "
            f"add the unit, e.g. {headers[matches[0]]!r}{hint}"
        )
    raise InputError([Problem(source, f"column {requested.strip()}", reason)])


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
    problems = _header_problems(source, header_row, names, units)
    if problems:
        raise InputError(problems)
    if time_column is None:
        time_index = 0
    else:
        time_index = _find(source, time_column, names, units, "--time-column", what="time column ")
    time_name = names[time_index]
    data_names = tuple(n for i, n in enumerate(names) if i != time_index)
    if not data_names:
        raise InputError([Problem(source, f"row {header_row}", "no data column besides the time")])
    data_units = tuple(u for i, u in enumerate(units) if i != time_index)
    labels = _labels(data_names, data_units)

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
            labels, (c for i, c in enumerate(cells) if i != time_index), strict=True
        ):
            cells_out.append(_value_cell(source, row, name, cell, problems))
        if time is not None:
            times.append(time)
            rows.append(row)
            values.append(cells_out)
    if problems:
        raise InputError(capped(problems, source, MAX_PROBLEMS))
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


def _header_problems(
    source: str, row: int, names: tuple[str, ...], units: tuple[str, ...]
) -> list[Problem]:
    """Unnamed columns, and names shared by columns that do not state different units."""
    problems = []
    seen: dict[str, list[int]] = {}
    for index, (name, unit) in enumerate(zip(names, units, strict=True), start=1):
        if not name:
            problems.append(Problem(source, f"row {row}, column {index}", "column without a name"))
            continue
        earlier = seen.setdefault(name, [])
        clash = next((i for i in earlier if same_unit(units[i - 1], unit)), None)
        if clash is not None:
            problems.append(
                Problem(
                    source,
                    f"row {row}, column {name}",
                    f"two columns are named {name!r} (columns {clash} and {index}); rename one, "
                    "or state their different units in brackets",
                )
            )
        earlier.append(index)
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
    return value
