"""Downloads: PNG and HTML of each figure, CSV of the table, and the one-page briefing.

Every export is rebuilt on the server from the working scenario with the same planner figure
builders the views use (the sweep, which is not kept on the server, from its shown figure).
HTML pages come from ``planner.briefing`` and carry the caution.
"""

from __future__ import annotations

import plotly.graph_objects as go
from dash import ALL, Input, Output, State, ctx, dcc, html, no_update

from planner.briefing import comparison_briefing
from webapp import exports, ids
from webapp.settings import Settings
from webapp.views.common import working_comparison, working_scenario

FORMAT_LABELS = {"png": "PNG image", "html": "HTML page", "csv": "CSV table"}
TITLES = {
    "diagram": "Schedules on the equilibrium curve",
    "series": "Schedules over time",
    "side": "Schedules side by side",
    "sweep": "Quasi-static sweep",
}


def export_buttons(what: str, label: str, formats=("png", "html")) -> html.Div:
    """A row of download buttons for one figure or table, with its own message line."""
    return html.Div(
        [
            html.Span(f"Download {label}:", className="field-label"),
            *(
                html.Button(FORMAT_LABELS[f], id=ids.export_button(what, f), className="button small")
                for f in formats
            ),
            html.Span(id=ids.export_message(what), className="export-message", role="status"),
        ],
        className="export-row",
    )


def briefing_bar() -> html.Div:
    return html.Div(
        [
            html.Div(
                [
                    html.Strong("Briefing for a board or the public"),
                    html.Span(
                        " One page: scenario summary, diagram with the schedules, time series, "
                        "the comparison table and the caution.",
                        className="hint",
                    ),
                ]
            ),
            html.Button("Download the briefing (HTML)", id=ids.export_button("briefing", "html"), className="button primary"),
            html.Span(id=ids.export_message("briefing"), className="export-message", role="status"),
            dcc.Download(id=ids.DOWNLOAD),
        ],
        className="briefing-bar",
    )


class ExportRefused(Exception):
    """An export that cannot be made now; the message says why."""


def build_export(what: str, fmt: str, working, shown, side_choice, sweep_figure_json, source: str):
    """The file for a download: ``(dict for dcc.Download, file name)``."""
    if not working or not working.get("data"):
        raise ExportRefused("choose a scenario first")
    if working.get("stale"):
        raise ExportRefused("fix the values marked in the schedule editor first")
    scenario = working_scenario(working)
    stem = exports.slug(source or scenario.name)
    if what == "sweep":
        if not sweep_figure_json or not sweep_figure_json.get("data"):
            raise ExportRefused("run the sweep first")
        figure = go.Figure(sweep_figure_json)
    else:
        comparison = working_comparison(working)
        if comparison is None:
            raise ExportRefused("results are still being computed")
        if what == "briefing":
            name = f"{stem}-briefing.html"
            return dict(content=comparison_briefing(comparison), filename=name, type="text/html"), name
        if what == "table":
            from webapp.views.table import table_rows

            header, rows = table_rows(comparison)
            name = f"{stem}-comparison.csv"
            return dict(content=exports.table_csv(header, rows), filename=name, type="text/csv"), name
        if what == "diagram":
            from webapp.views.diagram import diagram_figure

            figure = diagram_figure(scenario, comparison, shown)
        elif what == "series":
            from webapp.views.series import series_figure

            figure = series_figure(comparison, shown)
        elif what == "side":
            from webapp.views.side_by_side import choice_problem, side_figure

            problem = choice_problem(side_choice)
            if problem:
                raise ExportRefused(problem)
            figure = side_figure(comparison, side_choice)
        else:
            raise ExportRefused(f"unknown export {what!r}")
    name = f"{stem}-{what}.{fmt}"
    if fmt == "png":
        try:
            png = exports.figure_png(figure, width=1400 if what == "side" else None)
        except exports.ExportUnavailable as error:
            raise ExportRefused(str(error)) from None
        return dcc.send_bytes(png, name, type="image/png"), name
    if fmt == "html":
        page = exports.figure_html(figure, f"{scenario.name}: {TITLES[what]}", TITLES[what])
        return dict(content=page, filename=name, type="text/html"), name
    raise ExportRefused(f"unknown format {fmt!r}")


def on_export(clicks, working, shown, side_choice, sweep_figure_json, message_ids, *, trigger=None):
    """Any download button -> (download, one message per button row)."""
    blank = [""] * len(message_ids)
    if not isinstance(trigger, dict) or not any(clicks or []):
        return no_update, [no_update] * len(message_ids)
    what, fmt = trigger["what"], trigger["format"]
    source = (working or {}).get("source", "")
    try:
        download, name = build_export(what, fmt, working, shown, side_choice, sweep_figure_json, source)
        text, download_out = f"Downloaded {name}", download
    except ExportRefused as error:
        text, download_out = f"Not exported: {error}.", no_update
    messages = [text if m["what"] == what else "" for m in message_ids] if message_ids else blank
    return download_out, messages


def register(callback, settings: Settings) -> None:
    def handle(clicks, working, shown, side_choice, sweep_figure_json, message_ids):
        return on_export(
            clicks, working, shown, side_choice, sweep_figure_json, message_ids, trigger=ctx.triggered_id
        )

    callback(
        Output(ids.DOWNLOAD, "data"),
        Output(ids.export_message(ALL), "children"),
        Input(ids.ALL_EXPORT_BUTTONS, "n_clicks"),
        State(ids.WORKING, "data"),
        State(ids.SHOWN, "value"),
        State(ids.SIDE_CHOICE, "value"),
        State(ids.SWEEP_GRAPH, "figure"),
        State(ids.export_message(ALL), "id"),
        prevent_initial_call=True,
    )(handle)
