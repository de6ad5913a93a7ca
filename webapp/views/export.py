"""Downloads: PNG and HTML of each figure, CSV of the table, and the one-page briefing.

Every export is rebuilt on the server from the working scenario with the same planner figure
builders the views use (the sweep, which is not kept on the server, from its shown figure).
HTML pages come from ``planner.briefing`` and carry the caution.
"""

from __future__ import annotations

import plotly.graph_objects as go
from dash import ALL, Input, Output, State, ctx, dcc, html, no_update

from planner.briefing import comparison_briefing
from planner.report import table_csv
from webapp import exports, ids
from webapp.settings import Settings
from webapp.views.common import working_comparison, working_scenario
from webapp.views.diagram import diagram_figure
from webapp.views.series import series_figure
from webapp.views.side_by_side import choice_problem, side_figure
from webapp.views.table import table_rows

TITLES = {
    "diagram": "Schedules on the equilibrium curve",
    "series": "Schedules over time",
    "side": "Schedules side by side",
    "sweep": "Quasi-static sweep",
}


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
            html.Button(
                "Download the briefing (HTML)",
                id=ids.export_button("briefing", "html"),
                className="button primary",
            ),
            html.Span(id=ids.export_message("briefing"), className="export-message", role="status"),
            dcc.Download(id=ids.DOWNLOAD),
        ],
        className="briefing-bar",
    )


class ExportRefusedError(Exception):
    """An export that cannot be made now; the message says why."""


def build_export(what: str, fmt: str, working, shown, side_choice, sweep_figure_json, source: str):
    """The file for a download: ``(dict for dcc.Download, file name)``."""
    if not working or not working.get("data"):
        raise ExportRefusedError("choose a scenario first")
    if working.get("stale"):
        raise ExportRefusedError("fix the values marked in the schedule editor first")
    scenario = working_scenario(working)
    stem = exports.slug(source or scenario.name)
    if what == "sweep":
        if not sweep_figure_json or not sweep_figure_json.get("data"):
            raise ExportRefusedError("run the sweep first")
        figure = go.Figure(sweep_figure_json)
    else:
        comparison = working_comparison(working)
        if comparison is None:
            raise ExportRefusedError("results are still being computed")
        if what == "briefing":
            name = f"{stem}-briefing.html"
            return dict(
                content=comparison_briefing(comparison), filename=name, type="text/html"
            ), name
        if what == "table":
            header, rows = table_rows(comparison)
            name = f"{stem}-comparison.csv"
            return dict(content=table_csv(header, rows), filename=name, type="text/csv"), name
        if what == "diagram":
            figure = diagram_figure(scenario, comparison, shown)
        elif what == "series":
            figure = series_figure(comparison, shown)
        elif what == "side":
            problem = choice_problem(side_choice)
            if problem:
                raise ExportRefusedError(problem)
            figure = side_figure(comparison, side_choice)
        else:
            raise ExportRefusedError(f"unknown export {what!r}")
    name = f"{stem}-{what}.{fmt}"
    if fmt == "png":
        try:
            png = exports.figure_png(figure, width=1400 if what == "side" else None)
        except exports.PngUnavailableError as error:
            raise ExportRefusedError(str(error)) from None
        return dcc.send_bytes(png, name, type="image/png"), name
    if fmt == "html":
        page = exports.figure_html(figure, f"{scenario.name}: {TITLES[what]}", TITLES[what])
        return dict(content=page, filename=name, type="text/html"), name
    raise ExportRefusedError(f"unknown format {fmt!r}")


def on_export(clicks, working, shown, side_choice, sweep_figure_json, message_ids, *, trigger=None):
    """Any download button -> (download, one message per button row)."""
    if not isinstance(trigger, dict) or not any(clicks or []):
        return no_update, [no_update] * len(message_ids)
    what, fmt = trigger["what"], trigger["format"]
    source = (working or {}).get("source", "")
    try:
        download, name = build_export(
            what, fmt, working, shown, side_choice, sweep_figure_json, source
        )
        text, download_out = f"Downloaded {name}", download
    except ExportRefusedError as error:
        text, download_out = f"Not exported: {error}.", no_update
    messages = [text if m["what"] == what else "" for m in message_ids]
    return download_out, messages


def register(callback, settings: Settings) -> None:
    def handle(clicks, working, shown, side_choice, sweep_figure_json, message_ids):
        return on_export(
            clicks,
            working,
            shown,
            side_choice,
            sweep_figure_json,
            message_ids,
            trigger=ctx.triggered_id,
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
