"""The comparison table: one row per schedule from ``planner.report.comparison_rows``, plus
whether it recovers; a click on a column heading sorts by it (again: the other way). While the
schedule editor has values to fix, the table says that its rows are for the last valid ones."""

from __future__ import annotations

from dash import Input, Output, State, ctx, html, no_update

from planner.outcomes import Comparison
from webapp import ids
from webapp.settings import Settings
from webapp.views.common import export_buttons, working_comparison

RECOVERED = "Recovered"
LAST_VALID = (
    "These rows are for the last valid values: fix the values marked in the schedule editor "
    "to see the table for what is typed there."
)
TEXT_COLUMNS = ("Schedule", "Verdict", "Why infeasible")
MONEY_COLUMNS = ("Total cost", "Present value")


def table_rows(comparison: Comparison) -> tuple[list[str], list[list[object]]]:
    """The planner's table with a "Recovered" column after the verdict, and units in headers."""
    from planner.report import comparison_rows

    header, rows = comparison_rows(comparison)
    scenario = comparison.scenario
    unit = scenario.control.unit
    currency = scenario.costs.currency if scenario.costs is not None else ""
    units = {
        "Lowest control": unit,
        "Overshoot depth": unit,
        "Total cost": currency,
        "Present value": currency,
    }
    named = [f"{h} ({units[h]})" if units.get(h) else h for h in header]
    at = header.index("Verdict") + 1
    named.insert(at, RECOVERED)
    out = []
    for outcome, row in zip(comparison.outcomes, rows, strict=True):
        row = list(row)
        row.insert(at, "yes" if outcome.recovered else "no")
        out.append(row)
    return named, out


def cell_text(column: str, value: object) -> str:
    if value is None or value == "":
        return "-" if column not in TEXT_COLUMNS else ""
    if isinstance(value, float):
        if column.startswith(MONEY_COLUMNS):
            return f"{value:,.0f}"
        return f"{value:.3g}"
    return str(value)


def sorted_rows(
    rows: list[list[object]], column: int | None, descending: bool
) -> list[list[object]]:
    """Rows in the order asked for; empty cells always last."""
    if column is None:
        return rows

    def key(row):
        value = row[column]
        if value is None or value == "":
            return (1, 0.0, "")
        if isinstance(value, int | float):
            return (0, -value if descending else value, "")
        return (0, 0.0, str(value).lower())

    present = sorted(rows, key=key)
    if descending:
        text = [
            r
            for r in present
            if not isinstance(r[column], int | float) and r[column] not in (None, "")
        ]
        if text:  # text keys sort ascending above; flip them, keep empties last
            empty = [r for r in present if r[column] in (None, "")]
            present = (
                list(reversed(text))
                + [r for r in present if isinstance(r[column], int | float)]
                + empty
            )
    return present


def table(comparison: Comparison | None, sort: dict | None) -> list:
    if comparison is None:
        return [html.Caption("No results yet.")]
    header, rows = table_rows(comparison)
    sort = sort or {}
    column = header.index(sort["column"]) if sort.get("column") in header else None
    descending = bool(sort.get("descending"))
    head = []
    for i, name in enumerate(header):
        mark = ""
        aria = "none"
        if i == column:
            mark, aria = (" \u25bc", "descending") if descending else (" \u25b2", "ascending")
        head.append(
            html.Th(
                html.Button(
                    name + mark,
                    id=ids.sort_button(name),
                    className="sort-button",
                    title="Sort by this column",
                ),
                className="text" if name in TEXT_COLUMNS else "number",
                **{"aria-sort": aria, "data-column": name},
            )
        )
    body = []
    for row in sorted_rows(rows, column, descending):
        cells = [
            html.Td(
                cell_text(name, value),
                className="text" if name in TEXT_COLUMNS else "number",
                **{"data-column": name},
            )
            for name, value in zip(header, row, strict=True)
        ]
        feasible = row[header.index("Feasible")] == "yes"
        body.append(
            html.Tr(
                cells,
                className="" if feasible else "infeasible-row",
                **{"data-schedule": str(row[0])},
            )
        )
    return [html.Thead(html.Tr(head)), html.Tbody(body)]


def layout() -> html.Section:
    return html.Section(
        [
            html.H2("Comparison of schedules"),
            html.P(
                "Click a column heading to sort by it. A dash: not reached within the horizon. "
                "Rows in italics break a limit (see the last column).",
                className="hint",
            ),
            html.Div(html.Table(id=ids.TABLE, className="comparison"), className="table-scroll"),
            export_buttons("table", "this table", formats=("csv",)),
        ],
        className="panel",
    )


def fill(working, _ready, _clicks, sort, *, trigger=None, trigger_value=None):
    """-> (table children, sort store). A heading click flips or sets the sort column."""
    if isinstance(trigger, dict) and trigger.get("type") == ids.SORT_BUTTON:
        if not trigger_value:
            return no_update, no_update  # headings just drawn
        column = trigger["column"]
        sort = sort or {}
        descending = not sort.get("descending") if sort.get("column") == column else False
        sort = {"column": column, "descending": descending}
    children = table(working_comparison(working), sort)
    if (working or {}).get("stale") and len(children) == 2:
        children = [html.Caption(LAST_VALID, className="stale-note"), *children]
    return children, sort


def register(callback, settings: Settings) -> None:
    def on_change(working, ready, clicks, sort):
        value = ctx.triggered[0]["value"] if ctx.triggered else None
        return fill(working, ready, clicks, sort, trigger=ctx.triggered_id, trigger_value=value)

    callback(
        Output(ids.TABLE, "children"),
        Output(ids.SORT, "data"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        Input(ids.ALL_SORT_BUTTONS, "n_clicks"),
        State(ids.SORT, "data"),
    )(on_change)
