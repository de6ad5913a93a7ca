"""Monitoring records: a CSV of loads and lake measurements, read, checked and read for a model.

File layout (comma separated, UTF-8):

- lines starting with ``#`` are comments (they still count as rows in messages); one of them
  may choose the yearly means (below): ``# season: annual`` or ``# season: growing``;
- the first other line is the header: one name per column, optionally followed by its unit in
  square brackets or parentheses, for example ``TP [ug/L]``, ``TP (g P / m2)`` or
  ``load [t/yr]``;
- every later line is one time: the time column (default the first column) and the data
  columns. An empty cell (or ``NA``, ``N/A``, ``NaN``, ``-``) is a gap; gaps are allowed in every
  column but the time column. Values are any finite real numbers: a record may hold anomalies or
  logarithms as well as loads and amounts. Reading a column as an amount (the default of
  :meth:`Record.column`, which the fit uses) refuses its negative values.

Times are decimal years (``2004``, ``2004.375``) or ISO dates, every row written the same way:

- ``YYYY-MM-DD`` is the start of that day: year + (days since 1 January) / (days in the year),
  so 2001-07-02 is 2001.5 (the convention of :func:`decimal_year`);
- ``YYYY-MM`` stands for the month as a whole and is dated at its middle as a twelfth of the
  year: year + (month - 0.5) / 12, so monthly values are evenly spaced.

A column is looked up by its name alone (``TP``) or by its name and unit as the header writes them
(``TP [g P / m2]``; ``TP (g P/m2)`` is the same: brackets or parentheses, spacing ignored; two
units are the same when pint converts one into the other with a factor of 1, so ``TP [mg/m3]``
finds ``TP [ug/L]``). Two columns may share a name only when they state different units
(``TP [g P / m2]`` and ``TP [ug/L]``); the name alone is then ambiguous and the unit chooses.

Reading a record for a model (:func:`model_record`, which ``planner fit`` uses):

- units: each column the model reads is converted to the model's unit with pint
  (:mod:`planner.units`): within a dimension as it is (``mg/m2/yr`` to ``g P / m2 / yr``,
  ``kg/yr`` to ``t/yr``), and across dimensions through the lake's morphometry (the scenario's
  ``[lake]`` block): a concentration (``ug/L``, ``mg/L``, ``mg/m3``) times the mean depth is an
  areal store (g/m2), times the volume a lake-wide mass; a lake-wide load (``kg/yr``, ``t/yr``)
  divided by the area is an areal load. A unit that cannot be read, or converted without a
  ``[lake]`` block, is refused naming the file, the column and the reason; a column or a model
  without a stated unit is taken as it is.
- yearly means: dated records, and records in decimal years with several rows in a year whose
  file says ``# season: ...``, are reduced to one row a year. A column of loads (the control)
  is averaged over every sample of the calendar year (a load is a yearly rate). The other
  columns are averaged over the chosen season: ``annual``, every sample of the year (the
  default); ``growing``, the samples taken from May to September (:data:`GROWING_SEASON`; for a
  decimal year, the month is the twelfth of the year it falls in). Means are plain means of
  the samples (not weighted by the time between them). Each year's mean is dated by the year
  itself (2004), as the rows of a yearly record are. A year without a sample has no mean: it is
  missing, never filled in, and reported. A record in decimal years without a season line, or
  with one row a year, is taken row by row as it stands.

Rows in messages are the line numbers of the file (1 = the first line), which are the row
numbers a spreadsheet shows. Every problem is an :class:`~planner.errors.InputError` whose field
names the row and the column, e.g. ``row 7, column TP``.
"""

from __future__ import annotations

import calendar
import csv
import datetime
import io
import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from planner.errors import InputError, Problem, capped, listing, quote
from planner.textfiles import read_user_text
from planner.units import (
    AREAL_LOAD,
    AREAL_STORE,
    CONCENTRATION,
    LOAD,
    MASS,
    UnitLabel,
    UnitTextError,
    areal_load,
    areal_store,
    concentration,
    describe_dimension,
    parse_quantity,
    quantity,
    read_unit,
    significant,
    total_load,
)

MAX_RECORD_BYTES = 5_000_000
MAX_PROBLEMS = 20  # report at most this many cell problems, then say how many more there were
GAP_TOKENS = frozenset({"", "na", "n/a", "nan", "-"})
MIN_ROWS = 2
SEASONS = ("annual", "growing")
"""How the samples of a year are averaged (see the module docstring)."""
DEFAULT_SEASON = "annual"
GROWING_SEASON = (5, 9)
"""First and last month of the growing season: May to September, the open-water season of
temperate lakes in the northern hemisphere (common practice, no source)."""
_UNIT = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<bracket>[^\]]*)\]|\((?P<paren>[^)]*)\))\s*$")
_DATE = re.compile(r"^(?P<year>\d{4})-(?P<month>\d{1,2})(?:-(?P<day>\d{1,2}))?$")
_SEASON_LINE = re.compile(r"^#\s*season\s*:(?P<value>.*)$", re.IGNORECASE)


@dataclass(frozen=True, eq=False)
class Record:
    """A monitoring record: one time column and named data columns, gaps as NaN.

    ``times`` (k,) strictly increasing, in the time column's unit (years unless stated; decimal
    years when the column holds dates); ``values`` (number of columns, k) in each column's unit;
    ``rows`` (k,) the file row of each time, for messages; ``units`` the unit stated in the
    header ("" when none was given). ``dates`` holds the time cells as written when they are
    ISO dates (empty otherwise); ``months`` (k,) the calendar month (1-12) of each time, or
    None; ``season`` the yearly means the file asks for (``# season: ...``), or None, and
    ``season_row`` the row of that line.
    """

    source: str
    time_name: str
    time_unit: str
    times: np.ndarray
    rows: np.ndarray
    names: tuple[str, ...]
    units: tuple[str, ...]
    values: np.ndarray = field(repr=False)
    dates: tuple[str, ...] = ()
    months: np.ndarray | None = field(default=None, repr=False)
    season: str | None = None
    season_row: int | None = None

    def __post_init__(self) -> None:
        for array in (self.times, self.rows, self.values, self.months):
            if array is not None:
                array.setflags(write=False)

    @property
    def dated(self) -> bool:
        """Whether the time column holds ISO dates (else decimal years)."""
        return bool(self.dates)

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
    """Units agree when pint converts one into the other with a factor of 1 (``g P/m2`` and
    ``g P / m2``, ``ug/L`` and ``mg/m3``) and the substances they weigh, where both name one,
    agree; letter case matters (mg and Mg differ). A unit the planner cannot read agrees only
    with the same text (spacing ignored). An unstated unit ("") agrees with anything."""
    if not a or not b:
        return True
    if a.replace(" ", "") == b.replace(" ", ""):
        return True
    try:
        first, second = read_unit(a), read_unit(b)
    except UnitTextError:
        return False
    if first.dimension != second.dimension or not _same_substance(first, second):
        return False
    factor = float(quantity(1.0, first).to(second.expression).magnitude)
    return math.isclose(factor, 1.0, rel_tol=1e-12)


_PHOSPHORUS = frozenset({"P", "TP"})


def _same_substance(first: UnitLabel, second: UnitLabel) -> bool:
    """Whether two labels may weigh the same substance: one names none, they name the same, or
    both name phosphorus ("g P" and "g TP")."""
    a, b = first.substance, second.substance
    return not a or not b or a == b or {a, b} <= _PHOSPHORUS


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
    comments = [
        (row, ",".join(cells)) for row, cells in lines if cells and cells[0].lstrip()[:1] == "#"
    ]
    season, season_row, problems = _season_line(source, comments)
    lines = [
        (row, cells) for row, cells in lines if cells and not cells[0].lstrip().startswith("#")
    ]
    lines = [(row, cells) for row, cells in lines if any(c.strip() for c in cells)]
    if not lines:
        raise InputError([Problem(source, "(file)", "empty: expected a header and data rows")])
    header_row, header = lines[0]
    names, units = zip(*(split_unit(cell) for cell in header), strict=True)
    problems += _header_problems(source, header_row, names, units)
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

    times_read = _TimeColumn(source, time_name)
    values: list[list[float]] = []
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
        accepted = times_read.add(row, cells[time_index], problems)
        cells_out = []
        for name, cell in zip(
            labels, (c for i, c in enumerate(cells) if i != time_index), strict=True
        ):
            cells_out.append(_value_cell(source, row, name, cell, problems))
        if accepted:
            values.append(cells_out)
    if problems:
        raise InputError(capped(problems, source, MAX_PROBLEMS))
    if len(times_read.times) < MIN_ROWS:
        raise InputError(
            [
                Problem(
                    source,
                    "(file)",
                    f"only {len(times_read.times)} data row(s); a record needs at least {MIN_ROWS}",
                )
            ]
        )
    return Record(
        source=source,
        time_name=time_name,
        time_unit=units[time_index],
        times=np.array(times_read.times, dtype=float),
        rows=np.array(times_read.rows, dtype=int),
        names=data_names,
        units=data_units,
        values=np.array(values, dtype=float).T.copy(),
        dates=tuple(times_read.dates),
        months=np.array(times_read.months, dtype=int),
        season=season,
        season_row=season_row,
    )


def _season_line(
    source: str, comments: list[tuple[int, str]]
) -> tuple[str | None, int | None, list[Problem]]:
    """The season a comment line ``# season: annual|growing`` chooses, its row, and problems
    (an unknown season, or two lines that disagree)."""
    season, season_row, problems = None, None, []
    for row, text in comments:
        match = _SEASON_LINE.match(text.strip())
        if match is None:
            continue
        value = match.group("value").strip().lower()
        if value not in SEASONS:
            problems.append(
                Problem(
                    source,
                    f"row {row}, season",
                    f"{quote(match.group('value').strip())} is not a season: a line "
                    "'# season: ...' chooses the yearly means; write '# season: annual' (every "
                    f"sample of the year) or '# season: growing' ({_months_words(GROWING_SEASON)})",
                )
            )
        elif season is not None and value != season:
            problems.append(
                Problem(
                    source,
                    f"row {row}, season",
                    f"{value!r} contradicts {season!r} (row {season_row}); keep one season line",
                )
            )
        elif season is None:
            season, season_row = value, row
    return season, season_row, problems


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


def decimal_year(year: int, month: int, day: int | None = None) -> float:
    """A calendar date as a decimal year: a day (YYYY-MM-DD) at its start, year + (days since
    1 January) / (days in the year), so 2001-07-02 is 2001.5 and 2004-12-31 is 2004 + 365/366;
    a month as a whole (YYYY-MM) at its middle as a twelfth of the year, year + (month - 0.5)
    / 12. ValueError (the reason in words) when there is no such date."""
    if day is None:
        datetime.date(year, month, 1)  # checks the year and month
        return year + (month - 0.5) / 12.0
    date = datetime.date(year, month, day)
    first = datetime.date(year, 1, 1)
    length = (datetime.date(year + 1, 1, 1) - first).days if year < 9999 else 365
    return year + (date - first).days / length


def month_of(decimal: float) -> int:
    """The calendar month (1-12) a decimal year falls in, counting months as twelfths of the
    year (the convention of ``YYYY-MM`` dates)."""
    fraction = decimal - math.floor(decimal)
    return min(int(fraction * 12.0) + 1, 12)


_KIND_WORDS = {"date": "a date", "decimal": "a decimal year"}


class _TimeColumn:
    """The time cells of a record as they are read: decimal years or ISO dates, every row
    written the same way; collects the times, rows, months and problems."""

    def __init__(self, source: str, column: str):
        self.source, self.column = source, column
        self.times: list[float] = []
        self.rows: list[int] = []
        self.months: list[int] = []
        self.dates: list[str] = []
        self.first_row_of: dict[float, int] = {}
        self.kind: tuple[str, int, str] | None = None  # ("date" | "decimal", its row, its cell)

    def add(self, row: int, cell: str, problems: list[Problem]) -> bool:
        """Read one time cell; True when the row has a time (problems may still be found)."""
        text = cell.strip()
        where = f"row {row}, column {self.column}"
        if text.lower() in GAP_TOKENS:
            problems.append(
                Problem(self.source, where, "time is missing; every row needs its time")
            )
            return False
        read = self._read(text, where, problems)
        if read is None:
            return False
        time, month, kind = read
        if self.kind is None:
            self.kind = (kind, row, text)
        elif kind != self.kind[0]:
            first_kind, first_row, first_text = self.kind
            problems.append(
                Problem(
                    self.source,
                    where,
                    f"{quote(text)} is {_KIND_WORDS[kind]} but row {first_row} holds "
                    f"{_KIND_WORDS[first_kind]} ({quote(first_text)}); write every time the "
                    "same way",
                )
            )
            return False
        shown = text if kind == "date" else f"{time:g}"
        noun = "date" if kind == "date" else "time"
        if time in self.first_row_of:
            problems.append(
                Problem(
                    self.source,
                    where,
                    f"{noun} {shown} appears twice (first at row {self.first_row_of[time]}); "
                    "keep one row per time",
                )
            )
        elif self.times and time < self.times[-1]:
            before = self.dates[-1] if kind == "date" else f"{self.times[-1]:g}"
            problems.append(
                Problem(
                    self.source,
                    where,
                    f"{noun} {shown} comes after {before}; sort the rows by time",
                )
            )
        self.first_row_of.setdefault(time, row)
        self.times.append(time)
        self.rows.append(row)
        self.months.append(month)
        if kind == "date":
            self.dates.append(text)
        return True

    def _read(self, text: str, where: str, problems: list[Problem]):
        """(decimal year, month, kind) of a cell, or None after recording the problem."""
        date = _DATE.match(text)
        if date is not None:
            year, month = int(date.group("year")), int(date.group("month"))
            day = None if date.group("day") is None else int(date.group("day"))
            try:
                return decimal_year(year, month, day), month, "date"
            except ValueError as error:
                problems.append(
                    Problem(
                        self.source, where, f"date {quote(text)} is not a calendar date ({error})"
                    )
                )
                return None
        value = _number(text)
        if value is None or not np.isfinite(value):
            problems.append(
                Problem(
                    self.source,
                    where,
                    f"time {text!r} is not a number: write a decimal year (2004.5) or an ISO "
                    "date (2004-07-02, or 2004-07 for a month)",
                )
            )
            return None
        return value, month_of(value), "decimal"


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


# ---------------------------------------------------------------------------------------------
# Yearly means


def _months_words(months: tuple[int, int]) -> str:
    first, last = months
    return f"{calendar.month_name[first]} to {calendar.month_name[last]}"


def _years_words(years: Sequence[int]) -> str:
    return listing([str(y) for y in years], limit=20)


@dataclass(frozen=True)
class YearlyMeans:
    """How a record was reduced to one row a year (see the module docstring).

    ``season_columns`` are averaged over the season's samples, ``whole_year_columns`` (loads)
    over every sample of the calendar year; ``samples`` the fewest and most samples a year of
    the season columns (years that have any); ``left_out`` how many samples of the season columns
    fell outside the season; ``missing`` the years from the first to the last season mean without
    one; ``first`` and ``last`` the first and last time as the file writes it.
    """

    season: str
    chosen_by: str
    months: tuple[int, int]
    season_columns: tuple[str, ...]
    whole_year_columns: tuple[str, ...]
    years: tuple[int, ...]
    missing: tuple[int, ...]
    samples: tuple[int, int]
    left_out: int
    first: str
    last: str

    @property
    def season_words(self) -> str:
        """ "the growing season, May to September" or "the whole year"."""
        if self.season == "growing":
            return f"the growing season, {_months_words(self.months)}"
        return "the whole year"

    def words(self) -> str:
        """The reduction in one sentence, for a report: "yearly means of 3 to 6 samples a year
        from 1986-07-11 to 2024-09-14, each dated by its year: TP over the growing season ...".
        """
        fewest, most = self.samples
        count = f"{fewest}" if fewest == most else f"{fewest} to {most}"
        parts = []
        if self.season_columns:
            left = f"; {self.left_out} samples outside it left out" if self.left_out else ""
            parts.append(
                f"{', '.join(self.season_columns)} over {self.season_words} "
                f"(season {self.season!r}, {self.chosen_by}{left})"
            )
        if self.whole_year_columns:
            parts.append(
                f"{', '.join(self.whole_year_columns)} over each calendar year (a yearly rate)"
            )
        text = (
            f"yearly means of {count} samples a year from {self.first} to {self.last}, each "
            f"dated by its year: {', '.join(parts)}"
        )
        if self.missing:
            text += (
                f"; no {', '.join(self.season_columns)} sample in {_years_words(self.missing)}: "
                "those years are missing, not filled in"
            )
        return text

    def as_json(self) -> dict[str, Any]:
        return {
            "season": self.season,
            "chosen_by": self.chosen_by,
            "months": list(self.months),
            "season_columns": list(self.season_columns),
            "whole_year_columns": list(self.whole_year_columns),
            "years": list(self.years),
            "missing_years": list(self.missing),
            "samples_per_year": list(self.samples),
            "left_out": self.left_out,
            "first": self.first,
            "last": self.last,
        }


def _check_season(season: str) -> None:
    if season not in SEASONS:
        raise InputError(
            [Problem("season", "season", f"{quote(season)} is not one of {', '.join(SEASONS)}")]
        )


def several_a_year(record: Record) -> bool:
    """Whether some calendar year holds more than one row of the record."""
    years = np.floor(record.times)
    return bool(np.any(years[1:] == years[:-1]))


def yearly_means(
    record: Record,
    season: str = DEFAULT_SEASON,
    *,
    whole_year: Sequence[str] = (),
    chosen_by: str = "chosen by the caller",
) -> tuple[Record, YearlyMeans]:
    """The record reduced to one row a year (see the module docstring) and how.

    ``whole_year`` names the columns of yearly rates (loads), averaged over every sample of the
    calendar year; the others are averaged over ``season`` ("annual": every sample; "growing":
    the samples in the months of :data:`GROWING_SEASON`). A year is the calendar year of a date,
    or the whole part of a decimal year. A year without any mean has no row. ``chosen_by`` says
    in the report who chose the season.
    """
    _check_season(season)
    whole = {record.find(name) for name in whole_year}
    seasonal = [i for i in range(len(record.names)) if i not in whole]
    months = record.months if record.months is not None else _months(record.times)
    first_month, last_month = GROWING_SEASON if season == "growing" else (1, 12)
    in_season = (months >= first_month) & (months <= last_month)
    years, position = np.unique(np.floor(record.times).astype(int), return_inverse=True)
    means = np.full((len(record.names), years.size), np.nan)
    for index, column in enumerate(record.values):
        use = np.isfinite(column) if index in whole else np.isfinite(column) & in_season
        counts = np.bincount(position[use], minlength=years.size)
        sums = np.bincount(position[use], weights=column[use], minlength=years.size)
        means[index, counts > 0] = sums[counts > 0] / counts[counts > 0]
    keep = np.any(np.isfinite(means), axis=0)
    # samples: rows with a value in a season column, inside the season (outside: left out)
    present = np.any(np.isfinite(record.values[seasonal]), axis=0)
    per_year = np.bincount(position[present & in_season], minlength=years.size)
    sampled_years = years[per_year > 0]
    missing = ()
    if sampled_years.size:
        span = range(int(sampled_years[0]), int(sampled_years[-1]) + 1)
        missing = tuple(sorted(set(span) - set(sampled_years.tolist())))
    counted = per_year[per_year > 0]
    first_rows = np.full(years.size, np.iinfo(np.int64).max)
    np.minimum.at(first_rows, position, record.rows)
    labels = _labels(record.names, record.units)
    shown = record.dates if record.dated else tuple(f"{t:g}" for t in record.times)
    reduced = Record(
        source=record.source,
        time_name="year",
        time_unit="",
        times=years[keep].astype(float),
        rows=first_rows[keep],
        names=record.names,
        units=record.units,
        values=means[:, keep].copy(),
    )
    summary = YearlyMeans(
        season=season,
        chosen_by=chosen_by,
        months=(first_month, last_month),
        season_columns=tuple(labels[i] for i in seasonal),
        whole_year_columns=tuple(labels[i] for i in sorted(whole)),
        years=tuple(int(y) for y in years[keep]),
        missing=missing,
        samples=(int(counted.min()), int(counted.max())) if counted.size else (0, 0),
        left_out=int(np.count_nonzero(present & ~in_season)),
        first=shown[0],
        last=shown[-1],
    )
    return reduced, summary


def _months(times: np.ndarray) -> np.ndarray:
    return np.array([month_of(float(t)) for t in times], dtype=int)


# ---------------------------------------------------------------------------------------------
# Reading columns in the model's units


@dataclass(frozen=True)
class Morphometry:
    """The lake quantities a conversion goes through (pint quantities), from a ``[lake]``
    block, with the text the block gives them."""

    area: Any
    mean_depth: Any
    area_text: str
    depth_text: str

    @classmethod
    def of(cls, lake: Any) -> Morphometry:
        return cls(
            area=parse_quantity(lake.area),
            mean_depth=parse_quantity(lake.mean_depth),
            area_text=lake.area,
            depth_text=lake.mean_depth,
        )

    @property
    def volume(self) -> Any:
        return (self.area * self.mean_depth).to("m**3")

    @property
    def volume_text(self) -> str:
        return f"{significant(float(self.volume.magnitude))} m3 (area x mean depth)"


_THROUGH = {
    (CONCENTRATION, AREAL_STORE): (
        "times the mean depth {depth}",
        lambda q, lake: areal_store(q, lake.mean_depth),
    ),
    (AREAL_STORE, CONCENTRATION): (
        "divided by the mean depth {depth}",
        lambda q, lake: concentration(q, lake.mean_depth),
    ),
    (CONCENTRATION, MASS): ("times the volume {volume}", lambda q, lake: q * lake.volume),
    (MASS, CONCENTRATION): ("divided by the volume {volume}", lambda q, lake: q / lake.volume),
    (AREAL_STORE, MASS): ("times the area {area}", lambda q, lake: q * lake.area),
    (MASS, AREAL_STORE): ("divided by the area {area}", lambda q, lake: q / lake.area),
    (AREAL_LOAD, LOAD): ("times the area {area}", lambda q, lake: total_load(q, lake.area)),
    (LOAD, AREAL_LOAD): ("divided by the area {area}", lambda q, lake: areal_load(q, lake.area)),
}
"""Conversions across dimensions through the lake's morphometry: (column's dimension, model's
dimension) -> (how, in words; the pint operation on a quantity and a :class:`Morphometry`)."""

_NEEDS = {"{depth}": "mean depth", "{volume}": "area and mean depth", "{area}": "area"}


@dataclass(frozen=True)
class ColumnConversion:
    """How one column is read in the model's unit: model value = ``factor`` x column value
    (every conversion here is linear). ``through`` says which lake quantity it used ("" when
    none)."""

    column: str
    unit: str
    target: str
    reads_as: str
    factor: float
    through: str = ""

    @property
    def changes(self) -> bool:
        """Whether the values change (a conversion worth stating)."""
        return bool(self.through) or not math.isclose(self.factor, 1.0, rel_tol=1e-12)

    def words(self) -> str:
        """ "TP [ug/L] read as P in g P / m2: 1 ug/L = 0.0031 g P / m2 (times the mean depth
        3.1 m)"."""
        how = f" ({self.through})" if self.through else ""
        return (
            f"{self.column} read as {self.reads_as} in {self.target}: 1 {self.unit} = "
            f"{significant(self.factor, 4)} {self.target}{how}"
        )

    def as_json(self) -> dict[str, Any]:
        return {
            "column": self.column,
            "unit": self.unit,
            "model_unit": self.target,
            "reads_as": self.reads_as,
            "factor": self.factor,
            "through": self.through or None,
        }


def _hint(target: UnitLabel) -> str:
    if target.dimension in (LOAD, AREAL_LOAD):
        return "give loads as a mass per year (kg/yr, t/yr) or per area and year (mg/m2/yr)"
    return (
        "give lake TP as a concentration (ug/L, mg/L, mg/m3), an areal store (g P / m2) or a "
        "lake-wide mass (kg)"
    )


def column_conversion(
    record: Record,
    column: str,
    target: str,
    lake: Any = None,
    *,
    reads_as: str,
    option: str = "",
) -> ColumnConversion:
    """How column ``column`` of ``record`` reads in the model's unit ``target`` (see the
    module docstring), through pint and, across dimensions, the morphometry of ``lake`` (a
    ``[lake]`` block, or None). An InputError names the file, the column and the reason when
    the unit cannot be read or converted. A column or a model without a stated unit is taken
    as it is (factor 1)."""
    index = record.find(column, option=option)
    unit, target = record.units[index], target.strip()
    header = _header(record.names[index], unit)

    def refuse(reason: str) -> InputError:
        return InputError([Problem(record.source, f"column {record.label(index)}", reason)])

    if not unit or not target or unit.replace(" ", "") == target.replace(" ", ""):
        return ColumnConversion(header, unit or target, target or unit, reads_as, 1.0)
    try:
        stated = read_unit(unit)
    except UnitTextError as error:
        raise refuse(f"cannot read the unit {quote(unit)}: {error}") from None
    try:
        wanted = read_unit(target)
    except UnitTextError as error:
        raise refuse(
            f"{quote(unit)} cannot be converted to the scenario's unit of {reads_as}, "
            f"{quote(target)}, which is not a unit the planner reads ({error}); give the column "
            "in that unit"
        ) from None
    if not _same_substance(stated, wanted):
        raise refuse(
            f"{quote(unit)} weighs {stated.substance} but {reads_as} is in {quote(target)}, "
            f"which weighs {wanted.substance}"
        )
    amount = quantity(1.0, stated)
    if stated.dimension == wanted.dimension:
        factor = float(amount.to(wanted.expression).magnitude)
        return ColumnConversion(header, unit, target, reads_as, factor)
    route = _THROUGH.get((stated.dimension, wanted.dimension))
    if route is None:
        raise refuse(
            f"{quote(unit)} is {describe_dimension(stated.dimension)}, which cannot be read as "
            f"{reads_as} in {quote(target)} ({describe_dimension(wanted.dimension)}); "
            f"{_hint(wanted)}"
        )
    how, operation = route
    if lake is None:
        needs = next(words for key, words in _NEEDS.items() if key in how)
        raise refuse(
            f"{quote(unit)} is {describe_dimension(stated.dimension)} and {reads_as} is "
            f"{describe_dimension(wanted.dimension)} ({quote(target)}): converting needs the "
            f"lake's {needs}; add a [lake] block (area, mean_depth) to the scenario, or give "
            f"the column in {quote(target)}"
        )
    morphometry = Morphometry.of(lake)
    factor = float(operation(amount, morphometry).to(wanted.expression).magnitude)
    through = how.format(
        depth=morphometry.depth_text, area=morphometry.area_text, volume=morphometry.volume_text
    )
    return ColumnConversion(header, unit, target, reads_as, factor, through)


@dataclass(frozen=True)
class ModelColumn:
    """A column a model reads: ``column`` as requested (name, with or without its unit),
    ``unit`` the model's ("" when it states none), ``reads_as`` what the column is read as, for
    messages ("P", "the load L"), ``option`` the option that chooses another column, and
    ``whole_year`` for a yearly rate (a load), averaged over every sample of the year."""

    column: str
    unit: str
    reads_as: str
    option: str = ""
    whole_year: bool = False


@dataclass(frozen=True)
class RecordReading:
    """How a record was read for a model: the conversions of its columns, the yearly means
    (None when the rows were taken as they stand) and a note on the times (or "")."""

    conversions: tuple[ColumnConversion, ...] = ()
    means: YearlyMeans | None = None
    note: str = ""

    def statements(self) -> list[str]:
        """Each conversion that changes values, the yearly means and the note, one line each."""
        lines = [c.words() for c in self.conversions if c.changes]
        if self.means is not None:
            lines.append(self.means.words())
        if self.note:
            lines.append(self.note)
        return lines

    def as_json(self) -> dict[str, Any]:
        return {
            "conversions": [c.as_json() for c in self.conversions],
            "yearly_means": None if self.means is None else self.means.as_json(),
            "note": self.note or None,
        }


def model_record(
    record: Record,
    columns: Sequence[ModelColumn],
    *,
    lake: Any = None,
    season: str | None = None,
) -> tuple[Record, RecordReading, tuple[str, ...]]:
    """The columns a model reads, in the model's units, and reduced to yearly means where the
    record asks for them (see the module docstring).

    Returns the new record (only those columns, values converted with
    :func:`column_conversion`; negative values refused by row), how it was read, and for each
    of ``columns`` the name that designates it in the new record. ``season`` ("annual" or
    "growing") overrides the file's season line; without either, dated records get annual
    means and records in decimal years are taken row by row.
    """
    if season is not None:
        _check_season(season)
    conversions: list[ColumnConversion] = []
    names: list[str] = []
    units: list[str] = []
    data: list[np.ndarray] = []
    designators: list[str] = []
    taken: dict[tuple[int, str], str] = {}
    for request in columns:
        conversion = column_conversion(
            record,
            request.column,
            request.unit,
            lake,
            reads_as=request.reads_as,
            option=request.option,
        )
        index = record.find(request.column, option=request.option)
        key = (index, conversion.target)
        if key in taken:
            designators.append(taken[key])
            continue
        values = record.column(request.column, option=request.option)
        name, copy = record.names[index], 1
        while name in names:  # the same name read twice (another column, or another unit)
            copy += 1
            name = f"{record.names[index]} {copy}"
        names.append(name)
        units.append(conversion.target)
        data.append(values * conversion.factor)
        conversions.append(conversion)
        designators.append(name)
        taken[key] = name
    whole_year = [designators[i] for i, request in enumerate(columns) if request.whole_year]
    chosen, chosen_by = season, "chosen by the caller"
    if chosen is None and record.season is not None:
        chosen, chosen_by = (
            record.season,
            f"set by the file's line '# season: {record.season}' in row {record.season_row}",
        )
    if chosen is None and record.dated:
        chosen, chosen_by = DEFAULT_SEASON, "the default for dated samples"
    selected = Record(
        source=record.source,
        time_name=record.time_name,
        time_unit=record.time_unit,
        times=record.times,
        rows=record.rows,
        names=tuple(names),
        units=tuple(units),
        values=np.array(data, dtype=float),
        dates=record.dates,
        months=record.months,
    )
    note = ""
    means = None
    several = several_a_year(selected)
    if chosen is not None and (record.dated or several):
        selected, means = yearly_means(selected, chosen, whole_year=whole_year, chosen_by=chosen_by)
    elif chosen is not None:
        note = (
            f"one row a year, taken as it stands (season {chosen!r}, {chosen_by}, applies to "
            "records with several samples a year)"
        )
    elif several:
        note = (
            "several rows in some years: each is compared with the model at its own time "
            "(decimal years, taken as they stand); add the line '# season: annual' (or "
            "'# season: growing') to the file to fit yearly means instead"
        )
    reading = RecordReading(conversions=tuple(conversions), means=means, note=note)
    return selected, reading, tuple(designators)
