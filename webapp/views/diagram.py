"""The hysteresis diagram: the equilibrium curve (stable solid, unstable dashed), folds with
their thresholds, the shaded bistable window, where the lake is now, and each chosen schedule's
path in (control, state) with arrows for the direction of time. Drawn by
``planner.figures.hysteresis_figure``; this view only chooses which paths are shown."""

from __future__ import annotations

from dash import Input, Output, State, dcc, html, no_update

from planner.figures import hysteresis_figure, trajectories_of
from planner.outcomes import Comparison
from planner.report import diagram_text, lake_verdict_words, threshold_words
from planner.scenario import Scenario
from webapp import compute, ids
from webapp.settings import Settings
from webapp.views.captions import captioned_graph, with_captions
from webapp.views.common import (
    amount,
    export_buttons,
    placeholder_figure,
    working_comparison,
    working_scenario,
)


def summary_layout() -> html.Div:
    """Above the tabs: where the lake stands, and which schedules the figures show."""
    return html.Div(
        [
            html.Div(id=ids.SUMMARY, className="summary", **{"aria-live": "polite"}),
            html.Div(
                [
                    html.Span("Show schedules:", className="field-label"),
                    dcc.Checklist(
                        id=ids.SHOWN, options=[], value=[], inline=True, className="checklist"
                    ),
                ],
                className="shown-row",
            ),
        ]
    )


def layout() -> html.Div:
    return html.Div(
        [
            captioned_graph(ids.DIAGRAM_GRAPH, "Choose a scenario"),
            export_buttons("diagram", "this diagram"),
        ]
    )


def diagram_figure(scenario: Scenario, comparison: Comparison | None, shown: list[str] | None):
    """The diagram with every schedule's path; those not chosen start hidden (legend toggles
    them), so each schedule keeps its colour in every view."""
    diagram, standing = compute.diagram_of(scenario)
    trajectories = trajectories_of(comparison) if comparison is not None else []
    figure = hysteresis_figure(
        scenario, diagram, standing=standing, trajectories=trajectories, shown=shown
    )
    figure.update_layout(uirevision=scenario.name)
    return figure


def _sentence(text: str) -> str:
    """A capital first letter and a full stop; the rest as written (units keep their case)."""
    return text[:1].upper() + text[1:] + "."


def summary(scenario: Scenario) -> html.Div:
    """Where the lake stands, in a few lines; the planner's full text in a fold-out."""
    diagram, standing = compute.diagram_of(scenario)
    unit = scenario.control.unit
    name = scenario.control.label or scenario.control.parameter
    lines = [html.P(html.Strong(_sentence(lake_verdict_words(scenario, diagram))))]
    lines.append(
        html.P(
            f"Recovery threshold {threshold_words(diagram.recovery, unit)}; "
            f"collapse threshold {threshold_words(diagram.collapse, unit)}; "
            f"{name} now {amount(standing.control, unit)}."
        )
    )
    if standing.desired is not None:
        regime = "the desired regime" if standing.desired else "the undesired regime"
        lines.append(html.P(f"Held at today's value, the lake settles in {regime}."))
    lines.append(
        html.Details(
            [
                html.Summary("Full summary"),
                html.Pre(diagram_text(scenario, diagram, standing, caution=False)),
            ],
            className="details",
        )
    )
    return html.Div(lines)


def shown_choices(working, current, options):
    """Checklist options follow the schedules; new schedules start ticked, unticked stay so."""
    scenario = working_scenario(working)
    if scenario is None:
        return [], []
    names = [s.name for s in scenario.schedules]
    old_names = [o["value"] for o in options or []]
    if names == old_names:
        return no_update, no_update
    current = current or []
    value = [n for n in names if n in current or n not in old_names]
    return [{"label": n, "value": n} for n in names], value


def describe(working):
    scenario = working_scenario(working)
    return "" if scenario is None else summary(scenario)


def draw(working, _ready, shown, tab):
    """The diagram for the tab (its caption is added where the callback is registered)."""
    if tab not in (None, ids.TAB_DIAGRAM):
        return no_update
    scenario = working_scenario(working)
    if scenario is None:
        return placeholder_figure("Choose a scenario")
    return diagram_figure(scenario, working_comparison(working), shown)


def register(callback, settings: Settings) -> None:
    callback(
        Output(ids.SHOWN, "options"),
        Output(ids.SHOWN, "value"),
        Input(ids.WORKING, "data"),
        State(ids.SHOWN, "value"),
        State(ids.SHOWN, "options"),
    )(shown_choices)
    callback(Output(ids.SUMMARY, "children"), Input(ids.WORKING, "data"))(describe)
    callback(
        Output(ids.DIAGRAM_GRAPH, "figure"),
        Output(ids.figure_caption(ids.DIAGRAM_GRAPH), "children"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        Input(ids.SHOWN, "value"),
        Input(ids.TABS, "value"),
    )(with_captions(draw))
