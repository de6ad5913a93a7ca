"""Uncertainty: every schedule run for many members drawn from the scenario's ``[uncertainty]``
block (``planner.ensemble.run_ensemble``) as a long job (``webapp.jobs``: a worker process with a
progress bar, Cancel and a budget); the chance of recovery by year, a fan chart per schedule and
the ensemble table."""

from __future__ import annotations

import plotly.graph_objects as go
from dash import Input, Output, State, dcc, html, no_update

from planner.errors import InputError, Problem
from planner.figures import ensemble_fan_figure, recovery_by_year_figure
from planner.scenario import Scenario
from webapp import compute, exports, ids
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
    run=ids.ENSEMBLE_RUN,
    box=ids.ENSEMBLE_PROGRESS_BOX,
    bar=ids.ENSEMBLE_PROGRESS,
    text=ids.ENSEMBLE_PROGRESS_TEXT,
    cancel=ids.ENSEMBLE_CANCEL,
)
DEFAULT_MEMBERS = 500  # without an [uncertainty] block giving the number
MOST_MEMBERS = 20_000  # the app's cap (the command line allows more)
NO_UNCERTAINTY = (
    "This scenario has no [uncertainty] block: every member is the same lake under the same "
    "loads, so the chances shown are 0 or 1 (the deterministic case). Add priors to the "
    "scenario file to see the spread."
)
RECOVERY_PLACEHOLDER = "Run the ensemble to see the chance of recovery"
FAN_PLACEHOLDER = "Run the ensemble to see the spread over time"


def layout() -> html.Div:
    return html.Div(
        [
            html.P(
                "Run every schedule for many lakes drawn from the scenario's uncertainty: the "
                "chance of recovery, by year, and the spread of the target variable over time.",
                className="hint",
            ),
            html.Div(
                [
                    html.Label(
                        f"Members (blank: the scenario's number or {DEFAULT_MEMBERS})",
                        htmlFor=ids.ENSEMBLE_MEMBERS,
                        className="field-label",
                    ),
                    dcc.Input(
                        id=ids.ENSEMBLE_MEMBERS,
                        type="text",
                        value="",
                        className="text-input short",
                        debounce=False,
                    ),
                    html.Button("Run", id=ids.ENSEMBLE_RUN, className="button primary"),
                ],
                className="inline-row",
            ),
            job_progress(JOB, "Ensemble progress"),
            html.Div(id=ids.ENSEMBLE_MESSAGE, className="message-area", role="alert"),
            captioned_graph(ids.ENSEMBLE_GRAPH, RECOVERY_PLACEHOLDER),
            html.Div(id=ids.ENSEMBLE_TABLE),
            export_buttons("ensemble", "this result", formats=("png", "csv")),
            export.briefing_row("ensemble"),
            html.Div(
                [
                    html.Label("Schedule", htmlFor=ids.ENSEMBLE_CHOICE, className="field-label"),
                    dcc.Dropdown(id=ids.ENSEMBLE_CHOICE, options=[], clearable=False),
                ],
                className="inline-row",
            ),
            captioned_graph(ids.ENSEMBLE_FAN_GRAPH, FAN_PLACEHOLDER),
            dcc.Store(id=ids.ENSEMBLE_FANS),
        ]
    )


def members_of(text: str | None, scenario: Scenario) -> int:
    """The number typed (blank: the scenario's, else DEFAULT_MEMBERS); InputError naming it."""
    text = (text or "").strip()
    if not text:
        if scenario.uncertainty is not None:
            return min(scenario.uncertainty.members, MOST_MEMBERS)
        return DEFAULT_MEMBERS
    try:
        members = int(text)
    except ValueError:
        members = 0
    if not 1 <= members <= MOST_MEMBERS:
        raise InputError(
            [Problem("ensemble", "members", f"must be a whole number from 1 to {MOST_MEMBERS}")]
        )
    return members


def table_of(header, rows) -> html.Table:
    return html.Table(
        [
            html.Thead(html.Tr([html.Th(h) for h in header])),
            html.Tbody([html.Tr([html.Td(str(cell)) for cell in row]) for row in rows]),
        ],
        className="comparison-table",
    )


def run(set_progress, _clicks, working, members_text):
    """The job, in its worker process -> (recovery figure, fan figures, choices, choice, table,
    message). The result is filed for "Add to briefing" and the CSV download."""
    scenario = working_scenario(working)
    if scenario is None:
        return (no_update,) * 5 + ("Choose a scenario first.",)
    from planner.ensemble import run_ensemble
    from planner.ensemble_report import ensemble_part, ensemble_rows

    try:
        members = members_of(members_text, scenario)
        diagram, _ = compute.diagram_of(scenario)
        ensemble = run_ensemble(
            scenario, members=members, diagram=diagram, progress=progress_reporter(set_progress)
        )
    except InputError as error:
        message = "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
        return (no_update,) * 5 + (message,)
    exports.keep_part(working, ensemble_part(ensemble))
    figure = recovery_by_year_figure(ensemble)
    exports.keep_result(working, "ensemble", figure, ensemble.to_frame())
    names = [s.name for s in ensemble.schedules]
    fans = {name: ensemble_fan_figure(ensemble, name).to_dict() for name in names}
    message = "" if scenario.uncertainty is not None else NO_UNCERTAINTY
    table = table_of(*ensemble_rows(ensemble))
    return figure, fans, names, (names[0] if names else None), table, message


def fan(choice, fans):
    """The fan chart of the chosen schedule from the last run."""
    if not fans or choice not in fans:
        return placeholder_figure(FAN_PLACEHOLDER)
    return go.Figure(fans[choice])


def stopped(text: str) -> tuple:
    """The outputs of an ensemble stopped before it finished: blank figures and why."""
    return stopped_figure(), None, [], None, "", text


def register(callback, settings: Settings) -> None:
    register_job(
        callback,
        settings,
        with_captions(run),
        JOB,
        name="ensemble",
        what="ensemble",
        outputs=[
            Output(ids.ENSEMBLE_GRAPH, "figure"),
            Output(ids.figure_caption(ids.ENSEMBLE_GRAPH), "children"),
            Output(ids.ENSEMBLE_FANS, "data"),
            Output(ids.ENSEMBLE_CHOICE, "options"),
            Output(ids.ENSEMBLE_CHOICE, "value"),
            Output(ids.ENSEMBLE_TABLE, "children"),
            Output(ids.ENSEMBLE_MESSAGE, "children"),
        ],
        inputs=[
            Input(ids.ENSEMBLE_RUN, "n_clicks"),
            State(ids.WORKING, "data"),
            State(ids.ENSEMBLE_MEMBERS, "value"),
        ],
        stopped=with_captions(stopped),
    )
    callback(
        Output(ids.ENSEMBLE_FAN_GRAPH, "figure"),
        Output(ids.figure_caption(ids.ENSEMBLE_FAN_GRAPH), "children"),
        Input(ids.ENSEMBLE_CHOICE, "value"),
        Input(ids.ENSEMBLE_FANS, "data"),
    )(with_captions(fan))
