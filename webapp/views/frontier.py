"""Recovery frontier and cheapest schedule: the least hold for each overshoot depth
(``planner.frontier.recovery_frontier``) and the search for the cheapest recovering schedule
(``planner.search.search``), each a long job (``webapp.jobs``: a worker process with a progress
bar, Cancel and a budget); the schedule found can be appended to the scenario so the editor and
the table show it."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.errors import InputError, Problem
from planner.figures import frontier_figure, pareto_figure
from webapp import compute, exports, ids
from webapp.jobs import JobIds, job_progress, progress_reporter, register_job
from webapp.settings import Settings
from webapp.views import export, staleness
from webapp.views.captions import captioned_graph, with_captions
from webapp.views.common import (
    export_buttons,
    money,
    placeholder_figure,
    stopped_figure,
    working_scenario,
)

FRONTIER_JOB = JobIds(
    run=ids.FRONTIER_RUN,
    box=ids.FRONTIER_PROGRESS_BOX,
    bar=ids.FRONTIER_PROGRESS,
    text=ids.FRONTIER_PROGRESS_TEXT,
    cancel=ids.FRONTIER_CANCEL,
)
SEARCH_JOB = JobIds(
    run=ids.SEARCH_RUN,
    box=ids.SEARCH_PROGRESS_BOX,
    bar=ids.SEARCH_PROGRESS,
    text=ids.SEARCH_PROGRESS_TEXT,
    cancel=ids.SEARCH_CANCEL,
)


def _problems(error: InputError) -> str:
    return "; ".join(f"{p.field}: {p.reason}" for p in error.problems)


def _number_field(field_id: str, label: str) -> html.Span:
    return html.Span(
        [
            html.Label(label, htmlFor=field_id, className="field-label"),
            dcc.Input(id=field_id, type="text", value="", className="text-input short"),
        ]
    )


def _optional_number(text: str | None, field: str) -> float | None:
    """A typed number, None when blank; InputError naming the field when not a number."""
    text = (text or "").strip()
    if not text:
        return None
    try:
        return float(text)
    except ValueError:
        raise InputError([Problem("frontier", field, f"{text[:40]!r} is not a number")]) from None


def layout() -> html.Div:
    return html.Div(
        [
            html.P(
                "How far below the recovery threshold, and for how long, must the load go for "
                "the lake to recover once it relaxes again? And which such schedule is cheapest?",
                className="hint",
            ),
            html.Div(
                [
                    _number_field(ids.FRONTIER_START_YEAR, "Descent starts in year (blank: 0)"),
                    _number_field(
                        ids.FRONTIER_RAMP_YEARS,
                        "Ramp years (blank: the rate limit, else 2; 0: instant)",
                    ),
                    html.Button(
                        "Draw the frontier", id=ids.FRONTIER_RUN, className="button primary"
                    ),
                    html.Button(
                        "Find cheapest schedule", id=ids.SEARCH_RUN, className="button primary"
                    ),
                ],
                className="inline-row",
            ),
            job_progress(FRONTIER_JOB, "Frontier progress"),
            html.Div(id=ids.FRONTIER_MESSAGE, className="message-area", role="alert"),
            captioned_graph(
                ids.FRONTIER_GRAPH, "Draw the frontier to see the least hold for each depth"
            ),
            export_buttons("frontier", "the frontier", formats=("png", "csv")),
            export.briefing_row("frontier"),
            job_progress(SEARCH_JOB, "Search progress"),
            html.Div(id=ids.SEARCH_MESSAGE, className="message-area", role="alert"),
            captioned_graph(
                ids.SEARCH_GRAPH, "Find the cheapest schedule to see cost against time"
            ),
            html.P(id=ids.SEARCH_SUMMARY, className="hint"),
            export_buttons("search", "the schedules searched", formats=("png", "csv")),
            export.briefing_row("search"),
            html.Div(
                [
                    html.Button(
                        "Add to comparison", id=ids.SEARCH_ADD, className="button", disabled=True
                    ),
                    html.Span(id=ids.SEARCH_ADD_MESSAGE, className="export-message", role="status"),
                ],
                className="inline-row",
            ),
            dcc.Store(id=ids.SEARCH_FOUND),
        ]
    )


def run_frontier(set_progress, _clicks, working, start_text=None, ramp_text=None, depths=None):
    """The job, in its worker process -> (figure, message). ``depths`` (control units) only for
    tests; the start year and ramp years as typed (blank: the planner's defaults). The
    result is filed for "Add to briefing" and the CSV download."""
    scenario = working_scenario(working)
    if scenario is None:
        return no_update, "Choose a scenario first."
    from planner.briefing import frontier_part
    from planner.frontier import ramp_words, recovery_frontier

    diagram, _ = compute.diagram_of(scenario)
    try:
        options = {}
        start_year = _optional_number(start_text, "start year")
        ramp_years = _optional_number(ramp_text, "ramp years")
        if start_year is not None:
            options["start_year"] = start_year
        if ramp_years is not None:
            options["ramp_years"] = ramp_years
        frontier = recovery_frontier(
            scenario,
            diagram=diagram,
            depths=depths,
            progress=progress_reporter(set_progress),
            **options,
        )
    except InputError as error:
        blank = placeholder_figure("No frontier for this scenario")
        return blank, _problems(error)
    exports.keep_part(working, frontier_part(scenario, frontier))
    figure = frontier_figure(scenario, frontier)
    # The ramps change the least hold, so the figure says which ones it used.
    used = ramp_words(frontier.family, frontier.unit).replace("; ", "<br>")
    figure.update_layout(margin_t=110, title_subtitle_text=used, title_subtitle_font_size=12)
    exports.keep_result(working, "frontier", figure, frontier.to_frame())
    return figure, ""


def found_text(result, candidate, currency: str) -> str:
    """One line about the cheapest schedule found (every number from the search)."""
    meets = candidate.meets_target_at
    when = "does not meet the target" if meets is None else f"meets the target at {meets:.3g} yr"
    return (
        f"Cheapest found: {candidate.schedule.name} ({candidate.family}, floor "
        f"{candidate.floor:.3g} {result.unit}, hold {candidate.hold:.3g} yr): present value "
        f"{money(candidate.present_value, currency)}, {when}."
    )


def run_search(set_progress, _clicks, working):
    """The job, in its worker process -> (figure, summary, found schedule data, add disabled,
    message). The result is filed for "Add to briefing" and the CSV download."""
    scenario = working_scenario(working)
    if scenario is None:
        return (no_update,) * 4 + ("Choose a scenario first.",)
    from planner.api import ScenarioSearch
    from planner.briefing import search_part
    from planner.search import found_schedule, search

    diagram, _ = compute.diagram_of(scenario)
    try:
        result = search(scenario, diagram=diagram, progress=progress_reporter(set_progress))
    except InputError as error:
        blank = placeholder_figure("No search for this scenario")
        return blank, "", None, True, _problems(error)
    exports.keep_part(working, search_part(scenario, result))
    figure = pareto_figure(scenario, result)
    exports.keep_result(working, "search", figure, ScenarioSearch(scenario, result).to_frame())
    if result.cheapest is None:
        return figure, "No admissible schedule was found.", None, True, ""
    schedule = found_schedule(scenario, result.cheapest)
    summary = found_text(result, result.cheapest, result.currency)
    return figure, summary, schedule.model_dump(mode="json"), False, ""


def add_found(_clicks, working, loaded, found, stamps=None):
    """Append the found schedule to the working scenario -> (loaded store, message); refused
    when the search was run for another version of the scenario (``stamps``: the result
    stamps, webapp.views.staleness)."""
    scenario = working_scenario(working)
    if scenario is None or not found:
        return no_update, "Find the cheapest schedule first."
    why = staleness.refusal("search", working, stamps)
    if why:
        return no_update, f"Not added: {why}."
    from planner.search import unique_name, with_schedule

    named = {**found, "name": unique_name(scenario, found["name"])}
    data = compute.dump(scenario)
    try:
        schedule = compute.scenario_of({**data, "schedules": [named]}).schedules[0]
        new = with_schedule(scenario, schedule, "<editor>")
    except InputError as error:
        return no_update, _problems(error)
    serial = (loaded or {}).get("serial", 0) + 1
    source = (loaded or {}).get("source", working.get("source", "<editor>"))
    store = {"source": source, "data": compute.dump(new), "serial": serial}
    return store, f"Added “{named['name']}” to the comparison (not saved yet)."


def stopped_frontier(text: str) -> tuple:
    """The outputs of a frontier stopped before it finished: a blank figure and why."""
    return stopped_figure(), text


def stopped_search(text: str) -> tuple:
    """The outputs of a search stopped before it finished: nothing found to add, and why."""
    return stopped_figure(), "", None, True, text


def register(callback, settings: Settings) -> None:
    register_job(
        callback,
        settings,
        with_captions(run_frontier),
        FRONTIER_JOB,
        name="frontier",
        what="frontier",
        outputs=[
            Output(ids.FRONTIER_GRAPH, "figure"),
            Output(ids.figure_caption(ids.FRONTIER_GRAPH), "children"),
            Output(ids.FRONTIER_MESSAGE, "children"),
        ],
        inputs=[
            Input(ids.FRONTIER_RUN, "n_clicks"),
            State(ids.WORKING, "data"),
            State(ids.FRONTIER_START_YEAR, "value"),
            State(ids.FRONTIER_RAMP_YEARS, "value"),
        ],
        stopped=with_captions(stopped_frontier),
    )
    register_job(
        callback,
        settings,
        with_captions(run_search),
        SEARCH_JOB,
        name="search",
        what="search for the cheapest schedule",
        outputs=[
            Output(ids.SEARCH_GRAPH, "figure"),
            Output(ids.figure_caption(ids.SEARCH_GRAPH), "children"),
            Output(ids.SEARCH_SUMMARY, "children"),
            Output(ids.SEARCH_FOUND, "data"),
            Output(ids.SEARCH_ADD, "disabled"),
            Output(ids.SEARCH_MESSAGE, "children"),
        ],
        inputs=[Input(ids.SEARCH_RUN, "n_clicks"), State(ids.WORKING, "data")],
        stopped=with_captions(stopped_search),
    )
    callback(
        Output(ids.LOADED, "data", allow_duplicate=True),
        Output(ids.SEARCH_ADD_MESSAGE, "children"),
        Input(ids.SEARCH_ADD, "n_clicks"),
        State(ids.WORKING, "data"),
        State(ids.LOADED, "data"),
        State(ids.SEARCH_FOUND, "data"),
        State(ids.ALL_RESULT_STAMPS, "data"),
        prevent_initial_call=True,
    )(add_found)
