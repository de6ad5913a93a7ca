"""Side by side: two to four chosen schedules in small multiples with shared axes, each on the
equilibrium curve (``planner.figures.small_multiples_figure``), ready to present. While the
schedule editor has values to fix, the figure is said to be for the last valid values."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.figures import small_multiples_figure
from planner.outcomes import Comparison
from webapp import ids
from webapp.settings import Settings
from webapp.views.common import (
    figure_panel,
    placeholder_figure,
    working_comparison,
    working_scenario,
)

FEWEST, MOST = 2, 4
LAST_VALID = (
    "This figure is for the last valid values: fix the values marked in the schedule editor."
)


def layout() -> html.Div:
    return html.Div(
        [
            html.Label(
                "Schedules to set side by side (two to four)",
                htmlFor=ids.SIDE_CHOICE,
                className="field-label",
            ),
            dcc.Dropdown(id=ids.SIDE_CHOICE, options=[], value=[], multi=True),
            html.Div(id=ids.SIDE_MESSAGE, className="message-area", role="alert"),
            *figure_panel(ids.SIDE_GRAPH, "side", "Choose two to four schedules"),
        ]
    )


def choice_problem(chosen: list[str] | None) -> str | None:
    count = len(chosen or [])
    if count < FEWEST or count > MOST:
        return f"Choose two to four schedules ({count} chosen)."
    return None


def side_figure(comparison: Comparison, chosen: list[str]):
    figure = small_multiples_figure(comparison, chosen)
    figure.update_layout(uirevision=comparison.scenario.name)
    return figure


def choices(working, current, options):
    scenario = working_scenario(working)
    if scenario is None:
        return [], []
    names = [s.name for s in scenario.schedules]
    if names == [o["value"] for o in options or []]:
        return no_update, no_update
    kept = [n for n in current or [] if n in names]
    if len(kept) < FEWEST:
        kept = (kept + [n for n in names if n not in kept])[:FEWEST]
    return [{"label": n, "value": n} for n in names], kept


def draw(working, _ready, chosen, tab):
    if tab != ids.TAB_SIDE:
        return no_update, no_update
    problem = choice_problem(chosen)
    if problem:
        return no_update, problem
    comparison = working_comparison(working)
    if comparison is None:
        return placeholder_figure("No results yet"), ""
    note = LAST_VALID if working.get("stale") else ""
    return side_figure(comparison, chosen), note


def register(callback, settings: Settings) -> None:
    callback(
        Output(ids.SIDE_CHOICE, "options"),
        Output(ids.SIDE_CHOICE, "value"),
        Input(ids.WORKING, "data"),
        State(ids.SIDE_CHOICE, "value"),
        State(ids.SIDE_CHOICE, "options"),
    )(choices)
    callback(
        Output(ids.SIDE_GRAPH, "figure"),
        Output(ids.SIDE_MESSAGE, "children"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        Input(ids.SIDE_CHOICE, "value"),
        Input(ids.TABS, "value"),
    )(draw)
