"""Monitoring data: upload a CSV record of loads and lake measurements (checked by
``planner.monitoring.parse_record``), fit the working scenario's model to it
(``planner.calibration.fit_record``, without the bootstrap so it stays quick) as a long job
(``webapp.jobs``: a worker process with a progress bar, Cancel and a budget), and show the fit
over time and the fitted lake's diagram with the thresholds' intervals."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.errors import InputError
from planner.figures import fit_figure, fit_hysteresis_figure
from planner.monitoring import MAX_RECORD_BYTES, Record, parse_record
from planner.scenario.io import MAX_SCENARIO_BYTES
from webapp import drafts, exports, ids
from webapp.files import upload_text
from webapp.jobs import JobIds, job_progress, progress_reporter, register_job
from webapp.settings import Settings
from webapp.views import export
from webapp.views.captions import captioned_graph, with_captions
from webapp.views.common import (
    export_buttons,
    placeholder_figure,
    stopped_figure,
    working_scenario,
)

JOB = JobIds(
    run=None,  # the upload starts the fit
    box=ids.DATA_PROGRESS_BOX,
    bar=ids.DATA_PROGRESS,
    text=ids.DATA_PROGRESS_TEXT,
    cancel=ids.DATA_CANCEL,
)
# The app refuses requests above 8 x MAX_SCENARIO_BYTES (create_app); a record's base64 text
# (4/3 of the file) must fit inside that with room to spare.
MAX_UPLOAD_BYTES = min(MAX_RECORD_BYTES, 4 * MAX_SCENARIO_BYTES)


def layout() -> html.Div:
    megabytes = MAX_UPLOAD_BYTES / 1e6
    return html.Div(
        [
            html.P(
                "Fit the scenario's model to a monitoring record (CSV: a year column, the load "
                "and the measured lake variables, with units in brackets in the header).",
                className="hint",
            ),
            dcc.Upload(
                id=ids.DATA_UPLOAD,
                children=html.Div(
                    [
                        "Upload a monitoring record: drop it here or ",
                        html.Span("choose a file", className="link-like"),
                        f" (CSV, up to {megabytes:g} MB)",
                    ]
                ),
                accept=".csv,text/csv,text/plain",
                max_size=MAX_UPLOAD_BYTES,
                multiple=False,
                className="upload-box",
            ),
            job_progress(JOB, "Fit progress"),
            html.Div(id=ids.DATA_MESSAGE, className="message-area", role="alert"),
            captioned_graph(ids.DATA_FIT_GRAPH, "Upload a record to see the fit"),
            captioned_graph(ids.DATA_DIAGRAM_GRAPH, "Upload a record to see the fitted thresholds"),
            html.Pre(id=ids.DATA_SUMMARY, className="sweep-summary"),
            export_buttons("fit", "the fit", formats=("png", "csv")),
            export.briefing_row("fit"),
        ]
    )


def read_record_upload(contents: str, filename: str | None) -> Record:
    """An uploaded CSV (a base64 data URL), size-capped, checked by the planner."""
    source = filename or "uploaded record"
    text = upload_text(contents, source, MAX_UPLOAD_BYTES, encoding="utf-8-sig")
    return parse_record(text, source)


def problem_lines(error: InputError) -> html.Ul:
    """One line per problem: file, row and column, reason."""
    problems = [drafts.problem_in_app_words(p) for p in error.problems]  # no CLI options
    return html.Ul(
        [html.Li(f"{p.source}: {p.field}: {p.reason}") for p in problems],
        className="problem-list",
    )


def run_fit(set_progress, contents, filename, working):
    """The job, in its worker process -> (fit figure, diagram figure, summary, message). The
    result is filed for "Add to briefing" and the CSV download."""
    if not contents:
        return no_update, no_update, no_update, ""
    scenario = working_scenario(working)
    if scenario is None:
        return no_update, no_update, no_update, "Choose a scenario first."
    from planner.briefing import fit_part
    from planner.calibration import fit_record, fit_text, observations_for

    try:
        record = read_record_upload(contents, filename)
        observations = observations_for(record, scenario)
        fit = fit_record(
            scenario, observations, bootstrap=0, progress=progress_reporter(set_progress)
        )
    except InputError as error:
        blank = placeholder_figure("No fit: see the message above")
        return blank, blank, "", problem_lines(error)
    exports.keep_part(working, fit_part(fit))
    figure = fit_figure(fit)
    exports.keep_result(working, "fit", figure, fit.to_frame())
    diagram = fit_hysteresis_figure(fit)
    return figure, diagram, fit_text(fit, caution=False), ""


def stopped(text: str) -> tuple:
    """The outputs of a fit stopped before it finished: blank figures and why."""
    return stopped_figure(), stopped_figure(), "", text


def register(callback, settings: Settings) -> None:
    register_job(
        callback,
        settings,
        with_captions(run_fit, (0, 1)),
        JOB,
        name="fit",
        what="fit",
        outputs=[
            Output(ids.DATA_FIT_GRAPH, "figure"),
            Output(ids.figure_caption(ids.DATA_FIT_GRAPH), "children"),
            Output(ids.DATA_DIAGRAM_GRAPH, "figure"),
            Output(ids.figure_caption(ids.DATA_DIAGRAM_GRAPH), "children"),
            Output(ids.DATA_SUMMARY, "children"),
            Output(ids.DATA_MESSAGE, "children"),
        ],
        inputs=[
            Input(ids.DATA_UPLOAD, "contents"),
            State(ids.DATA_UPLOAD, "filename"),
            State(ids.WORKING, "data"),
        ],
        stopped=with_captions(stopped, (0, 1)),
    )
