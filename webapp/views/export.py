"""Downloads: PNG and HTML of each figure, CSV of the table, and the briefing (HTML or PDF).

Every export is rebuilt on the server from the working scenario with the same planner figure
builders the views use (the sweep, which is not kept on the server, from its shown figure).
Pages come from ``planner.briefing`` and carry the caution once.

The briefing shows the schedules ticked under "Show schedules" and, besides the comparison, each
long job's result the user added with that tab's "Add to briefing" (:func:`briefing_row`): the
part is copied into the page's briefing store with the identity of its scenario, and a part from
another version of the scenario is left out of the export, which says so.
"""

from __future__ import annotations

import plotly.graph_objects as go
from dash import ALL, Input, Output, State, ctx, dcc, html, no_update

from planner.briefing import PART_KINDS, BriefingParts, briefing_html
from planner.errors import InputError
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
# Long jobs whose figure (PNG) and table (CSV) the job files on the server (exports.keep_result).
KEPT_RESULTS = {
    "frontier": ("frontier", "the recovery frontier"),
    "search": ("schedules-searched", "the search for the cheapest schedule"),
    "ensemble": ("chance-of-recovery", "the ensemble"),
    "fit": ("fit", "the fit"),
}
PART_LABELS = {
    "ensemble": "the chance of recovery (Uncertainty)",
    "search": "the cheapest option (Recovery frontier)",
    "frontier": "the recovery frontier",
    "fit": "the fit to monitoring data",
    "sweep": "the slow sweep",
}
RUN_FIRST = {
    "ensemble": "run the ensemble",
    "search": "find the cheapest schedule",
    "frontier": "draw the frontier",
    "fit": "upload a monitoring record",
    "sweep": "run the sweep",
}

# The briefing's own components (their ids live in webapp.ids; these names are kept for
# callers that read them from here).
PARTS_STORE = ids.BRIEFING_PARTS
BRIEFING_CONTENTS = ids.BRIEFING_CONTENTS
BRIEFING_CLEAR = ids.BRIEFING_CLEAR
briefing_add = ids.briefing_add
briefing_add_message = ids.briefing_add_message


def briefing_row(kind: str) -> html.Div:
    """The row a tab places under its result: "Add to briefing" and its message."""
    if kind not in PART_KINDS:
        raise ValueError(f"no briefing part {kind!r}; one of {PART_KINDS}")
    return html.Div(
        [
            html.Button("Add to briefing", id=briefing_add(kind), className="button small"),
            html.Span(id=briefing_add_message(kind), className="export-message", role="status"),
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
                        " The verdict and the recommendation, the thresholds in words, the "
                        "schedules shown compared, and any result added from the other tabs.",
                        className="hint",
                    ),
                    html.Div(id=BRIEFING_CONTENTS, className="hint", **{"aria-live": "polite"}),
                ]
            ),
            html.Button(
                "Download the briefing (HTML)",
                id=ids.export_button("briefing", "html"),
                className="button primary",
            ),
            html.Button(
                "Download the briefing (PDF)",
                id=ids.export_button("briefing", "pdf"),
                className="button",
            ),
            html.Button("Remove added results", id=BRIEFING_CLEAR, className="button small"),
            html.Span(id=ids.export_message("briefing"), className="export-message", role="status"),
            dcc.Download(id=ids.DOWNLOAD),
            dcc.Store(id=PARTS_STORE, data={}),
        ],
        className="briefing-bar",
    )


class ExportRefusedError(Exception):
    """An export that cannot be made now; the message says why."""


def _stale_refusal(what: str, working, stamps) -> str | None:
    """Why the shown result ``what`` belongs to another version of the scenario, or None."""
    from webapp.views.staleness import refusal

    return refusal(what, working, stamps)


def briefing_page(working, shown, parts=None) -> tuple[str, list[str], list[str]]:
    """The briefing's HTML, the kinds of the added results it holds, and the kinds left out
    because they were computed for another version of the scenario."""
    scenario = working_scenario(working)
    comparison = working_comparison(working)
    if comparison is None:
        raise ExportRefusedError("results are still being computed")
    kept, left_out = exports.current_parts(working, parts)
    briefing = BriefingParts(
        scenario,
        comparison,
        shown=None if shown is None else tuple(shown),
        parts=tuple(kept),
        source=(working or {}).get("source", ""),
    )
    return briefing_html(briefing), [p.kind for p in kept], left_out


def _briefing_export(fmt: str, working, shown, parts, stem: str):
    page_html, kept, left_out = briefing_page(working, shown, parts)
    name = f"{stem}-briefing.{fmt}"
    if fmt == "html":
        download = dict(content=page_html, filename=name, type="text/html")
    elif fmt == "pdf":
        from planner.briefing import PdfError, print_pdf

        try:
            pdf = print_pdf(page_html)
        except InputError as error:
            raise ExportRefusedError(
                "the PDF is printed by Chromium, which is not installed on the server; "
                "download the HTML and print it from your browser"
            ) from error
        except PdfError as error:
            raise ExportRefusedError(f"the PDF could not be printed ({error})") from None
        download = dcc.send_bytes(pdf, name, type="application/pdf")
    else:
        raise ExportRefusedError(f"unknown format {fmt!r}")
    note = ""
    if kept:
        note += "; with " + ", ".join(PART_LABELS[k] for k in kept)
    if left_out:
        note += "; left out (computed for another version of the scenario: run again, then add): "
        note += ", ".join(PART_LABELS[k] for k in left_out)
    return download, name + note


def _png_download(figure: go.Figure, name: str, width: int | None = None):
    try:
        png = exports.figure_png(figure, width=width)
    except exports.PngUnavailableError as error:
        raise ExportRefusedError(str(error)) from None
    return dcc.send_bytes(png, name, type="image/png"), name


def _kept_export(what: str, fmt: str, working, stamps, stem: str):
    """PNG of the figure or CSV of the table of a long job's result (frontier, search,
    ensemble, fit), refused while the result shown is stale or when none was run for the
    scenario in the editor."""
    refused = _stale_refusal(what, working, stamps)
    if refused:
        raise ExportRefusedError(refused)
    kept = exports.kept_result(working, what)
    if kept is None:
        raise ExportRefusedError(f"{RUN_FIRST[what]} for the scenario as it is now first")
    file_stem, _ = KEPT_RESULTS[what]
    name = f"{stem}-{file_stem}.{fmt}"
    if fmt == "csv":
        return dict(content=kept["csv"], filename=name, type="text/csv"), name
    if fmt == "png":
        return _png_download(go.Figure(kept["figure"]), name)
    raise ExportRefusedError(f"unknown format {fmt!r}")


def build_export(
    what: str,
    fmt: str,
    working,
    shown,
    side_choice,
    sweep_figure_json,
    source: str,
    parts=None,
    stamps=None,
):
    """The file for a download: ``(dict for dcc.Download, what the message says was saved)``.
    ``parts``: the briefing store; ``stamps``: the result stamps (webapp.views.staleness)."""
    if not working or not working.get("data"):
        raise ExportRefusedError("choose a scenario first")
    if working.get("stale"):
        raise ExportRefusedError("fix the values marked in the schedule editor first")
    scenario = working_scenario(working)
    stem = exports.slug(source or scenario.name)
    if what == "briefing":
        return _briefing_export(fmt, working, shown, parts, stem)
    if what in KEPT_RESULTS:
        return _kept_export(what, fmt, working, stamps, stem)
    if what == "sweep":
        if not sweep_figure_json or not sweep_figure_json.get("data"):
            raise ExportRefusedError("run the sweep first")
        refused = _stale_refusal("sweep", working, stamps)
        if refused:
            raise ExportRefusedError(refused)
        figure = go.Figure(sweep_figure_json)
    else:
        comparison = working_comparison(working)
        if comparison is None:
            raise ExportRefusedError("results are still being computed")
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
        return _png_download(figure, name, width=1400 if what == "side" else None)
    if fmt == "html":
        page = exports.figure_html(figure, f"{scenario.name}: {TITLES[what]}", TITLES[what])
        return dict(content=page, filename=name, type="text/html"), name
    raise ExportRefusedError(f"unknown format {fmt!r}")


def on_export(
    clicks,
    working,
    shown,
    side_choice,
    sweep_figure_json,
    message_ids,
    parts=None,
    stamps=None,
    *,
    trigger=None,
):
    """Any download button -> (download, one message per button row)."""
    if not isinstance(trigger, dict) or not any(clicks or []):
        return no_update, [no_update] * len(message_ids)
    what, fmt = trigger["what"], trigger["format"]
    source = (working or {}).get("source", "")
    try:
        download, name = build_export(
            what, fmt, working, shown, side_choice, sweep_figure_json, source, parts, stamps
        )
        text, download_out = f"Downloaded {name}", download
    except ExportRefusedError as error:
        text, download_out = f"Not exported: {error}.", no_update
    messages = [text if m["what"] == what else "" for m in message_ids]
    return download_out, messages


def on_add(clicks, working, parts, button_ids, *, trigger=None):
    """A tab's "Add to briefing" -> (briefing store, one message per tab)."""
    if not isinstance(trigger, dict) or not any(clicks or []):
        return no_update, [no_update] * len(button_ids)
    kind = trigger["kind"]
    found = exports.offered_part(working, kind)
    parts = dict(parts or {})
    if found is None:
        text = f"Nothing to add: {RUN_FIRST[kind]} for the scenario as it is now, then add it."
        store = no_update
    else:
        parts[kind] = found
        text = f"Added {PART_LABELS[kind]} to the briefing."
        store = parts
    return store, [text if b["kind"] == kind else "" for b in button_ids]


def contents(parts, working) -> str:
    """The line under the briefing bar: which added results the briefing holds now."""
    kept, left_out = exports.current_parts(working, parts)
    if not kept and not left_out:
        return "Added results: none yet (use “Add to briefing” under a result in the other tabs)."
    text = "Added results: " + (", ".join(PART_LABELS[p.kind] for p in kept) or "none current")
    if left_out:
        text += ". Left out, computed for another version of the scenario: " + ", ".join(
            PART_LABELS[k] for k in left_out
        )
    return text + "."


def register(callback, settings: Settings) -> None:
    exports.use_parts_folder(settings.cache_dir / "briefing-parts")

    def handle(clicks, working, shown, side_choice, sweep_figure_json, message_ids, parts, stamps):
        return on_export(
            clicks,
            working,
            shown,
            side_choice,
            sweep_figure_json,
            message_ids,
            parts,
            stamps,
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
        State(PARTS_STORE, "data"),
        State(ids.result_stamp(ALL), "data"),
        prevent_initial_call=True,
    )(handle)

    def add(clicks, working, parts, button_ids):
        return on_add(clicks, working, parts, button_ids, trigger=ctx.triggered_id)

    callback(
        Output(PARTS_STORE, "data"),
        Output(briefing_add_message(ALL), "children"),
        Input(briefing_add(ALL), "n_clicks"),
        State(ids.WORKING, "data"),
        State(PARTS_STORE, "data"),
        State(briefing_add(ALL), "id"),
        prevent_initial_call=True,
    )(add)
    callback(
        Output(PARTS_STORE, "data", allow_duplicate=True),
        Input(BRIEFING_CLEAR, "n_clicks"),
        prevent_initial_call=True,
    )(lambda _clicks: {})
    callback(
        Output(BRIEFING_CONTENTS, "children"),
        Input(PARTS_STORE, "data"),
        Input(ids.WORKING, "data"),
    )(contents)
