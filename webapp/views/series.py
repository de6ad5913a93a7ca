"""Time series: the control and the target variable against time for each chosen schedule,
with the thresholds and the target line (``planner.figures.time_series_figure``)."""

from __future__ import annotations

from dash import Input, Output, html, no_update

from planner.figures import time_series_figure
from planner.outcomes import Comparison
from webapp import ids
from webapp.settings import Settings
from webapp.views.common import figure_panel, placeholder_figure, working_comparison


def layout() -> html.Div:
    return html.Div(figure_panel(ids.SERIES_GRAPH, "series", "Choose a scenario"))


def series_figure(comparison: Comparison, shown: list[str] | None):
    figure = time_series_figure(comparison, names=shown)
    figure.update_layout(uirevision=comparison.scenario.name)
    return figure


def draw(working, _ready, shown, tab):
    if tab != ids.TAB_SERIES:
        return no_update
    comparison = working_comparison(working)
    if comparison is None:
        return placeholder_figure("No results yet")
    return series_figure(comparison, shown)


def register(callback, settings: Settings) -> None:
    callback(
        Output(ids.SERIES_GRAPH, "figure"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        Input(ids.SHOWN, "value"),
        Input(ids.TABS, "value"),
    )(draw)
