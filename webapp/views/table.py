"""The comparison table: one row per schedule from ``planner.report.comparison_rows``, plus
whether it recovers; sortable by any column."""

from __future__ import annotations

from dash import Input, Output, dash_table, html
from dash.dash_table.Format import Format, Group, Scheme

from planner.outcomes import Comparison
from planner.report import comparison_rows
from webapp import ids
from webapp.settings import Settings
from webapp.views.common import working_comparison
from webapp.views.export import export_buttons

RECOVERED = "Recovered"


def table_rows(comparison: Comparison) -> tuple[list[str], list[list[object]]]:
    """The planner's table with a "Recovered" column after the verdict, and units in headers."""
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


def _column(name: str, sample: list[object]) -> dict:
    numeric = any(isinstance(v, float | int) and not isinstance(v, bool) for v in sample)
    column = {"name": name, "id": name}
    if numeric:
        column["type"] = "numeric"
        if name.startswith(("Total cost", "Present value")):
            column["format"] = Format(precision=0, scheme=Scheme.fixed, group=Group.yes)
        else:
            column["format"] = Format(precision=3, scheme=Scheme.decimal_or_exponent)
    return column


def table_data(comparison: Comparison | None) -> tuple[list[dict], list[dict]]:
    if comparison is None:
        return [], []
    header, rows = table_rows(comparison)
    columns = [_column(h, [row[i] for row in rows]) for i, h in enumerate(header)]
    data = [dict(zip(header, row, strict=True)) for row in rows]
    return data, columns


def layout() -> html.Section:
    return html.Section(
        [
            html.H2("Comparison of schedules"),
            html.P("Click a column heading to sort. Empty cells: not reached within the horizon.", className="hint"),
            dash_table.DataTable(
                id=ids.TABLE,
                data=[],
                columns=[],
                sort_action="native",
                sort_mode="single",
                style_table={"overflowX": "auto"},
                style_cell={
                    "fontFamily": "Helvetica, Arial, sans-serif",
                    "fontSize": "13px",
                    "padding": "6px 8px",
                    "whiteSpace": "normal",
                    "height": "auto",
                    "minWidth": "70px",
                    "maxWidth": "260px",
                    "textAlign": "right",
                },
                style_cell_conditional=[
                    *(
                        {"if": {"column_id": c}, "textAlign": "left"}
                        for c in ("Schedule", "Verdict", "Why infeasible")
                    ),
                    {"if": {"column_id": "Why infeasible"}, "minWidth": "260px"},
                    {"if": {"column_id": "Schedule"}, "minWidth": "160px"},
                ],
                style_header={"fontWeight": "600", "backgroundColor": "#f2f4f6", "whiteSpace": "normal"},
                style_data_conditional=[
                    {"if": {"filter_query": '{Feasible} = "no"'}, "fontStyle": "italic"},
                ],
            ),
            export_buttons("table", "this table", formats=("csv",)),
        ],
        className="panel",
    )


def fill(working, _ready):
    return table_data(working_comparison(working))


def register(callback, settings: Settings) -> None:
    callback(
        Output(ids.TABLE, "data"),
        Output(ids.TABLE, "columns"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
    )(fill)
