"""Helpers shared by the views: the scenario and comparison behind the working store, number
formatting for display, an empty figure to show before there are results, and the rows of
download buttons under each figure and table (handled by the export view)."""

from __future__ import annotations

import plotly.graph_objects as go
from dash import dcc, html

from planner.outcomes import Comparison
from planner.scenario import Scenario
from webapp import compute, ids

FORMAT_LABELS = {"png": "PNG image", "html": "HTML page", "csv": "CSV table"}


def working_scenario(working: dict | None) -> Scenario | None:
    """The last valid scenario the editor produced (None before the first one)."""
    if not working or not working.get("data"):
        return None
    return compute.scenario_of(working["data"])


def working_comparison(working: dict | None) -> Comparison | None:
    """The comparison of the working scenario.

    When the editor's recompute finished it (``complete``), any result this process lacks is
    computed here (another worker may have served the recompute); otherwise the background
    worker is on it and only cached results are used.
    """
    scenario = working_scenario(working)
    if scenario is None:
        return None
    if working.get("complete"):
        return compute.comparison_of(scenario)
    return compute.cached_comparison(scenario)


def placeholder_figure(text: str) -> go.Figure:
    """A blank figure carrying a short note (no axes, so no units are missing)."""
    figure = go.Figure()
    figure.add_annotation(
        text=text, showarrow=False, x=0.5, y=0.5, xref="paper", yref="paper", font=dict(size=15)
    )
    figure.update_layout(
        template="plotly_white",
        xaxis=dict(visible=False),
        yaxis=dict(visible=False),
        height=360,
        margin=dict(l=20, r=20, t=20, b=20),
    )
    return figure


def stopped_figure() -> go.Figure:
    """The blank figure of a job that was stopped before it finished (its message says why)."""
    return placeholder_figure("Stopped before it finished: see the message above")


def money(value: float | None, currency: str = "") -> str:
    if value is None:
        return "-"
    return f"{value:,.0f} {currency}".strip()


def amount(value: float | None, unit: str = "") -> str:
    if value is None:
        return "none found"
    return f"{value:.3g} {unit}".strip()


def export_buttons(what: str, label: str, formats=("png", "html")) -> html.Div:
    """A row of download buttons for one figure or table, with its own message line."""
    return html.Div(
        [
            html.Span(f"Download {label}:", className="field-label"),
            *(
                html.Button(
                    FORMAT_LABELS[f], id=ids.export_button(what, f), className="button small"
                )
                for f in formats
            ),
            html.Span(id=ids.export_message(what), className="export-message", role="status"),
        ],
        className="export-row",
    )


def figure_panel(graph_id: str, what: str, placeholder: str, label: str = "this figure") -> list:
    """A figure and its row of download buttons."""
    graph = dcc.Graph(
        id=graph_id, figure=placeholder_figure(placeholder), config={"displaylogo": False}
    )
    return [graph, export_buttons(what, label)]
