"""Quasi-static sweep: the loop a slowly dialled control traces (``planner.sweep.sweep_for``),
run by a background worker with a progress bar and a cancel button."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.errors import InputError
from planner.figures import sweep_figure
from planner.report import sweep_text
from planner.sweep import checked_step
from webapp import compute, ids
from webapp.settings import Settings
from webapp.views.common import figure_panel

SHOWN = {"display": "flex"}
HIDDEN = {"display": "none"}


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
                    html.Button("Cancel", id=ids.SWEEP_CANCEL, className="button", disabled=True),
                ],
                className="inline-row",
            ),
            html.Div(
                [
                    html.Label(
                        "Sweep progress", htmlFor=ids.SWEEP_PROGRESS, className="progress-label"
                    ),
                    html.Progress(id=ids.SWEEP_PROGRESS, value="0", max="100"),
                    html.Span(id=ids.SWEEP_PROGRESS_TEXT, className="progress-text"),
                ],
                id=ids.SWEEP_PROGRESS_BOX,
                className="progress-box",
                style=HIDDEN,
            ),
            html.Div(id=ids.SWEEP_MESSAGE, className="message-area", role="alert"),
            *figure_panel(ids.SWEEP_GRAPH, "sweep", "Run the sweep to see the loop"),
            html.Pre(id=ids.SWEEP_SUMMARY, className="sweep-summary"),
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
    """Background worker -> (figure, summary text, message)."""
    if not working or not working.get("data"):
        return no_update, no_update, "Choose a scenario first."
    scenario = compute.scenario_of(working["data"])
    try:
        step = sweep_step(step_text, scenario)
    except InputError as error:
        return no_update, no_update, "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
    from planner.sweep import sweep_for

    report = compute.throttled(lambda f, m: set_progress((str(round(100 * f)), f"{f:.0%}: {m}")))
    try:
        sweep = sweep_for(scenario, step=step, progress=report)
    except InputError as error:
        return no_update, no_update, "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
    diagram, _ = compute.diagram_of(scenario)
    figure = sweep_figure(scenario, sweep, diagram)
    figure.update_layout(height=560)
    return figure, sweep_text(scenario, sweep), ""


def register(callback, settings: Settings) -> None:
    callback(
        Output(ids.SWEEP_GRAPH, "figure"),
        Output(ids.SWEEP_SUMMARY, "children"),
        Output(ids.SWEEP_MESSAGE, "children"),
        Input(ids.SWEEP_RUN, "n_clicks"),
        State(ids.WORKING, "data"),
        State(ids.SWEEP_STEP, "value"),
        background=True,
        interval=400,
        progress=[Output(ids.SWEEP_PROGRESS, "value"), Output(ids.SWEEP_PROGRESS_TEXT, "children")],
        progress_default=["0", ""],
        running=[
            (Output(ids.SWEEP_RUN, "disabled"), True, False),
            (Output(ids.SWEEP_CANCEL, "disabled"), False, True),
            (Output(ids.SWEEP_PROGRESS_BOX, "style"), SHOWN, HIDDEN),
        ],
        cancel=[Input(ids.SWEEP_CANCEL, "n_clicks")],
        prevent_initial_call=True,
    )(run_sweep)
