"""Plotly figure builders, used alike by the CLI reports and the web app.

Colours follow the Okabe & Ito (2008) palette, which stays distinguishable for the common
forms of colour blindness; line style (solid / dashed) and marker shape carry meaning too, so
no information depends on colour alone.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import plotly.graph_objects as go

from planner.equilibria import Diagram, Standing
from planner.report import clipped_runs

PALETTE = ("#0072B2", "#D55E00", "#009E73", "#CC79A7", "#56B4E9", "#E69F00", "#000000", "#F0E442")
STABLE_COLOUR = "#1f1f1f"
UNSTABLE_COLOUR = "#7a7a7a"
WINDOW_FILL = "rgba(230, 159, 0, 0.15)"
FOLD_LABELS = {"collapse": "Collapse threshold", "recovery": "Recovery threshold", "fold": "Fold"}
FOLD_SYMBOLS = {"collapse": "triangle-up", "recovery": "triangle-down", "fold": "diamond"}
LAYOUT = dict(
    template="plotly_white",
    font=dict(family="Helvetica, Arial, sans-serif", size=13),
    margin=dict(l=70, r=30, t=60, b=60),
    legend=dict(orientation="h", yanchor="top", y=-0.15, xanchor="left", x=0),
)


@dataclass(frozen=True)
class Trajectory:
    """A schedule's run for plotting: times (years), control u(t) and state x(t) (n, k)."""

    name: str
    times: np.ndarray
    control: np.ndarray
    states: np.ndarray


def colour(index: int) -> str:
    return PALETTE[index % len(PALETTE)]


def hysteresis_figure(
    scenario,
    diagram: Diagram,
    *,
    standing: Standing | None = None,
    trajectories: Sequence[Trajectory] = (),
    variable: str | None = None,
    title: str | None = None,
) -> go.Figure:
    """Equilibrium curve against the control: stable solid, unstable dashed, folds marked,
    bistable window shaded, current state starred, and schedules' paths drawn in (u, x)."""
    variable = variable or scenario.target.variable
    k = diagram.system.variables.index(variable)
    low, high = diagram.control_range
    unit = scenario.control.unit
    fig = go.Figure()
    window = diagram.window
    if window is not None:
        left = low if window.recovery is None else max(window.recovery, low)
        right = high if window.collapse is None else min(window.collapse, high)
        if right > left:
            fig.add_vrect(
                x0=left,
                x1=right,
                fillcolor=WINDOW_FILL,
                line_width=0,
                layer="below",
                annotation_text="two stable states",
                annotation_position="top left",
            )
    shown = set()
    for branch in diagram.branches:
        for stable, controls, states in clipped_runs(branch, low, high):
            label = "stable equilibrium" if stable else "unstable equilibrium (basin boundary)"
            fig.add_trace(
                go.Scatter(
                    x=controls,
                    y=states[:, k],
                    mode="lines",
                    name=label,
                    legendgroup=label,
                    showlegend=label not in shown,
                    line=dict(
                        color=STABLE_COLOUR if stable else UNSTABLE_COLOUR,
                        width=3 if stable else 2,
                        dash="solid" if stable else "dash",
                    ),
                    hovertemplate=f"{scenario.control.parameter} = %{{x:.4g}} {unit}<br>"
                    f"{variable} = %{{y:.4g}}<extra>{label}</extra>",
                )
            )
            shown.add(label)
    for fold in diagram.folds:
        if not fold.in_range:
            continue
        text = f"{FOLD_LABELS[fold.kind]}<br>{fold.control:.3g} {unit}"
        fig.add_trace(
            go.Scatter(
                x=[fold.control],
                y=[fold.state[k]],
                mode="markers+text",
                text=[text],
                textposition="middle right" if fold.kind == "recovery" else "middle left",
                marker=dict(symbol=FOLD_SYMBOLS[fold.kind], size=13, color="#000000"),
                name=FOLD_LABELS[fold.kind],
                showlegend=False,
                hovertemplate=f"{FOLD_LABELS[fold.kind]}: %{{x:.6g}} {unit}<extra></extra>",
            )
        )
    for i, run in enumerate(trajectories):
        fig.add_trace(
            go.Scatter(
                x=run.control,
                y=run.states[k],
                mode="lines",
                name=run.name,
                legendgroup=run.name,
                line=dict(color=colour(i), width=2),
                customdata=run.times,
                hovertemplate="year %{customdata:.1f}<br>%{x:.3g}, %{y:.3g}<extra>"
                + run.name
                + "</extra>",
            )
        )
        marks = _direction_marks(run)
        fig.add_trace(
            go.Scatter(
                x=run.control[marks],
                y=run.states[k][marks],
                mode="markers",
                marker=dict(symbol="arrow", angleref="previous", size=11, color=colour(i)),
                legendgroup=run.name,
                showlegend=False,
                hoverinfo="skip",
            )
        )
    if standing is not None:
        fig.add_trace(
            go.Scatter(
                x=[standing.control],
                y=[standing.state[k]],
                mode="markers+text",
                text=["now"],
                textposition="top center",
                marker=dict(
                    symbol="star", size=16, color="#E69F00", line=dict(color="#000", width=1)
                ),
                name="current state",
            )
        )
    fig.update_layout(
        title=title
        or f"{scenario.name}: equilibria against "
        f"{scenario.control.label or scenario.control.parameter}",
        xaxis_title=scenario.control.axis_title,
        yaxis_title=scenario.axis_title(variable),
        **LAYOUT,
    )
    fig.update_xaxes(range=[low - 0.02 * (high - low), high + 0.02 * (high - low)])
    return fig


def _direction_marks(run: Trajectory, count: int = 8) -> np.ndarray:
    """Indices spread evenly in time (skipping the first point) where arrows show the direction."""
    if len(run.times) < 3:
        return np.arange(len(run.times))
    targets = np.linspace(run.times[0], run.times[-1], count + 2)[1:-1]
    return np.unique(np.clip(np.searchsorted(run.times, targets), 1, len(run.times) - 1))


def trajectories_of(comparison) -> list[Trajectory]:
    """The plotted runs of a comparison's schedules."""
    return [
        Trajectory(o.name, o.trajectory.times, o.trajectory.control, o.trajectory.states)
        for o in comparison.outcomes
    ]


def time_series_figure(comparison, *, names: Sequence[str] | None = None) -> go.Figure:
    """Control (top) and target variable (bottom) against time for each schedule, with the
    recovery and collapse thresholds on the control panel and the target line below."""
    from plotly.subplots import make_subplots

    scenario, diagram = comparison.scenario, comparison.diagram
    k = scenario.target_index
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    for i, outcome in enumerate(comparison.outcomes):
        if names is not None and outcome.name not in names:
            continue
        run = outcome.trajectory
        style = dict(color=colour(i), width=2, dash="solid" if outcome.feasible else "dot")
        fig.add_trace(
            go.Scatter(
                x=run.times,
                y=run.control,
                name=outcome.name,
                legendgroup=outcome.name,
                line=style,
                hovertemplate="year %{x:.1f}: %{y:.3g}<extra>%{fullData.name}</extra>",
            ),
            row=1,
            col=1,
        )
        fig.add_trace(
            go.Scatter(
                x=run.times,
                y=run.states[k],
                name=outcome.name,
                legendgroup=outcome.name,
                showlegend=False,
                line=style,
                hovertemplate="year %{x:.1f}: %{y:.3g}<extra>%{fullData.name}</extra>",
            ),
            row=2,
            col=1,
        )
    for value, label in (
        (diagram.recovery_threshold, "recovery threshold"),
        (diagram.collapse_threshold, "collapse threshold"),
    ):
        if value is not None:
            fig.add_hline(
                y=value,
                line=dict(color="#555", dash="dash", width=1),
                row=1,
                col=1,
                annotation_text=label,
                annotation_position="bottom right",
            )
    if scenario.target.threshold is not None:
        fig.add_hline(
            y=scenario.target.threshold,
            line=dict(color="#009E73", dash="dash", width=2),
            row=2,
            col=1,
            annotation_text="target",
            annotation_position="top right",
        )
    fig.update_yaxes(title_text=scenario.control.axis_title, row=1, col=1)
    fig.update_yaxes(title_text=scenario.axis_title(scenario.target.variable), row=2, col=1)
    fig.update_xaxes(title_text="years from now", row=2, col=1)
    fig.update_layout(
        title=f"{scenario.name}: schedules over time (dotted: infeasible)", height=620, **LAYOUT
    )
    return fig


def sweep_figure(scenario, sweep, diagram: Diagram | None = None) -> go.Figure:
    """The loop a slowly dialled control traces, over the equilibrium curve when given."""
    variable = scenario.target.variable
    k = scenario.spec.variables.index(variable)
    fig = (
        go.Figure() if diagram is None else hysteresis_figure(scenario, diagram, variable=variable)
    )
    legs = (
        ("dialled up", sweep.controls_up, sweep.states_up, "triangle-right", PALETTE[1]),
        ("dialled down", sweep.controls_down, sweep.states_down, "triangle-left", PALETTE[0]),
    )
    for name, controls, states, symbol, hue in legs:
        fig.add_trace(
            go.Scatter(
                x=controls,
                y=states[k],
                mode="lines+markers",
                name=name,
                marker=dict(symbol=symbol, size=6, color=hue),
                line=dict(color=hue, width=1),
            )
        )
    fig.update_layout(
        title=f"{scenario.name}: quasi-static sweep (step {sweep.step:.3g})",
        xaxis_title=scenario.control.axis_title,
        yaxis_title=scenario.axis_title(variable),
        **LAYOUT,
    )
    return fig


def small_multiples_figure(comparison, names: Sequence[str]) -> go.Figure:
    """Two to four schedules side by side on the hysteresis diagram, with shared axes."""
    from plotly.subplots import make_subplots

    scenario, diagram = comparison.scenario, comparison.diagram
    chosen = [o for o in comparison.outcomes if o.name in names][:4]
    columns = max(len(chosen), 1)
    fig = make_subplots(
        rows=1,
        cols=columns,
        shared_yaxes=True,
        shared_xaxes=True,
        subplot_titles=[o.name for o in chosen],
        horizontal_spacing=0.03,
    )
    base = hysteresis_figure(scenario, diagram)
    for c, outcome in enumerate(chosen, start=1):
        for trace in base.data:
            copy = go.Scatter(trace)
            copy.showlegend = c == 1 and trace.showlegend is not False
            fig.add_trace(copy, row=1, col=c)
        index = comparison.outcomes.index(outcome)
        run = trajectories_of(comparison)[index]
        k = scenario.target_index
        verdict = "recovers" if outcome.recovered else outcome.verdict.value
        fig.add_trace(
            go.Scatter(
                x=run.control,
                y=run.states[k],
                mode="lines",
                line=dict(color=colour(index), width=3),
                name=f"{outcome.name}: {verdict}",
                showlegend=True,
            ),
            row=1,
            col=c,
        )
        if diagram.window is not None:
            low, high = diagram.control_range
            left = low if diagram.window.recovery is None else max(diagram.window.recovery, low)
            right = high if diagram.window.collapse is None else min(diagram.window.collapse, high)
            if right > left:
                fig.add_vrect(
                    x0=left,
                    x1=right,
                    fillcolor=WINDOW_FILL,
                    line_width=0,
                    layer="below",
                    row=1,
                    col=c,
                )
        fig.update_xaxes(title_text=scenario.control.axis_title, row=1, col=c)
    fig.update_yaxes(title_text=scenario.axis_title(scenario.target.variable), row=1, col=1)
    fig.update_layout(title=f"{scenario.name}: side by side", height=480, **LAYOUT)
    return fig
