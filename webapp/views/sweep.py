"""Quasi-static sweep: the loop a slowly dialled control traces (``planner.sweep.sweep_for``),
run as a long job (``webapp.jobs``: a worker process with a progress bar, Cancel and a budget)."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.errors import InputError
from planner.figures import sweep_figure
from planner.report import sweep_text
from planner.sweep import checked_step
from webapp import compute, exports, ids
from webapp.jobs import JobIds, job_progress, progress_reporter, register_job
from webapp.settings import Settings
from webapp.views import export
from webapp.views.captions import captioned_graph, with_captions
from webapp.views.common import export_buttons, stopped_figure

JOB = JobIds(
    run=ids.SWEEP_RUN,
    box=ids.SWEEP_PROGRESS_BOX,
    bar=ids.SWEEP_PROGRESS,
    text=ids.SWEEP_PROGRESS_TEXT,
    cancel=ids.SWEEP_CANCEL,
)


def layout() -> html.Div:
    return html.Div(
        [
            html.P(
                "Dial the control slowly up across its range and back down, letting the lake "
                "settle at each step: the jumps show where the thresholds lie.",
                className="hint",
            ),
            html.Div(
                [
                    html.Label(
                        "Step (blank: range / 200)", htmlFor=ids.SWEEP_STEP, className="field-label"
                    ),
                    dcc.Input(
                        id=ids.SWEEP_STEP,
                        type="text",
                        value="",
                        className="text-input short",
                        debounce=False,
                    ),
                    html.Button("Run the sweep", id=ids.SWEEP_RUN, className="button primary"),
                ],
                className="inline-row",
            ),
            job_progress(JOB, "Sweep progress"),
            html.Div(id=ids.SWEEP_MESSAGE, className="message-area", role="alert"),
            captioned_graph(ids.SWEEP_GRAPH, "Run the sweep to see the loop"),
            export_buttons("sweep", "this figure"),
            html.Pre(id=ids.SWEEP_SUMMARY, className="sweep-summary"),
            export.briefing_row("sweep"),
        ]
    )


def sweep_step(text: str | None, scenario) -> float | None:
    """The step typed by the user (None: the planner's default); InputError naming the field."""
    text = (text or "").strip()
    if not text:
        return None
    try:
        step = float(text)
    except ValueError:
        step = float("nan")
    return checked_step(step, scenario, "sweep")


def run_sweep(set_progress, _clicks, working, step_text):
    """The job, in its worker process -> (figure, summary text, message). The result is filed
    for "Add to briefing"."""
    if not working or not working.get("data"):
        return no_update, no_update, "Choose a scenario first."
    scenario = compute.scenario_of(working["data"])
    try:
        step = sweep_step(step_text, scenario)
    except InputError as error:
        return no_update, no_update, "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
    from planner.sweep import sweep_for

    try:
        sweep = sweep_for(scenario, step=step, progress=progress_reporter(set_progress))
    except InputError as error:
        return no_update, no_update, "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
    diagram, _ = compute.diagram_of(scenario)
    from planner.briefing import sweep_part

    exports.keep_part(working, sweep_part(scenario, sweep, diagram))
    figure = sweep_figure(scenario, sweep, diagram)
    return figure, sweep_text(scenario, sweep, caution=False), ""  # the page shows it once


def stopped(text: str) -> tuple:
    """The outputs of a sweep stopped before it finished: a blank figure and why."""
    return stopped_figure(), "", text


def register(callback, settings: Settings) -> None:
    register_job(
        callback,
        settings,
        with_captions(run_sweep),
        JOB,
        name="sweep",
        what="sweep",
        outputs=[
            Output(ids.SWEEP_GRAPH, "figure"),
            Output(ids.figure_caption(ids.SWEEP_GRAPH), "children"),
            Output(ids.SWEEP_SUMMARY, "children"),
            Output(ids.SWEEP_MESSAGE, "children"),
        ],
        inputs=[
            Input(ids.SWEEP_RUN, "n_clicks"),
            State(ids.WORKING, "data"),
            State(ids.SWEEP_STEP, "value"),
        ],
        stopped=with_captions(stopped),
    )
