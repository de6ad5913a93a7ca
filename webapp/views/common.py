"""Helpers shared by the views: the scenario and comparison behind the working store, number
formatting for display, and an empty figure to show before there are results."""

from __future__ import annotations

import plotly.graph_objects as go

from planner.outcomes import Comparison
from planner.scenario import Scenario
from webapp import compute


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


def money(value: float | None, currency: str = "") -> str:
    if value is None:
        return "-"
    return f"{value:,.0f} {currency}".strip()


def years(value: float | None) -> str:
    return "-" if value is None else f"year {value:.1f}"


def amount(value: float | None, unit: str = "") -> str:
    if value is None:
        return "none"
    return f"{value:.3g} {unit}".strip()
