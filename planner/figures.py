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
from planner.report import clipped_runs, stable_states_words

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


SCHEDULE_COLOURS = PALETTE[:6]  # Okabe-Ito without black (the equilibria, "now") and yellow
SCHEDULE_DASHES = ("solid", "longdash", "dashdot")  # "dash" marks unstable equilibria and
# "dot" infeasible schedules, so neither is used to tell schedules apart
SCHEDULE_SYMBOLS = (
    "circle",
    "square",
    "diamond",
    "triangle-up",
    "triangle-down",
    "cross",
    "x",
    "pentagon",
    "hexagon",
    "star-triangle-up",
    "hourglass",
    "bowtie",
)
DISTINCT_SCHEDULES = len(SCHEDULE_COLOURS) * len(SCHEDULE_DASHES)  # 18 before a style repeats


def schedule_line(index: int, *, feasible: bool = True, width: float = 2) -> dict:
    """The line of schedule ``index``: colour, then dash pattern, vary so that the first
    DISTINCT_SCHEDULES schedules all differ (and differ without colour vision, by dash); an
    infeasible schedule is dotted."""
    colour_ = SCHEDULE_COLOURS[index % len(SCHEDULE_COLOURS)]
    dash = SCHEDULE_DASHES[(index // len(SCHEDULE_COLOURS)) % len(SCHEDULE_DASHES)]
    return dict(color=colour_, width=width, dash=dash if feasible else "dot")


def schedule_marker(index: int, **extra) -> dict:
    """The marker of schedule ``index``: its line colour and a symbol of its own."""
    return dict(
        color=SCHEDULE_COLOURS[index % len(SCHEDULE_COLOURS)],
        symbol=SCHEDULE_SYMBOLS[index % len(SCHEDULE_SYMBOLS)],
        **extra,
    )


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
                annotation_text=stable_states_words(diagram),
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
                line=schedule_line(i),
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
                marker=dict(
                    symbol="arrow",
                    angleref="previous",
                    size=11,
                    color=schedule_line(i)["color"],
                ),
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
        style = schedule_line(i, feasible=outcome.feasible)
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
                line=schedule_line(index, width=3),
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


# ---------------------------------------------------------------------------------------------
# Recovery frontier and schedule search

RECOVERING_FILL = "rgba(0, 158, 115, 0.15)"


def frontier_figure(scenario, frontier) -> go.Figure:
    """Least hold (years) against overshoot depth below the recovery threshold (control unit),
    from ``planner.frontier.recovery_frontier``. Holds above the curve recover (shaded); depths
    where no hold within the horizon recovers are crossed at the top; the deepest achievable cut
    is a dotted line; the scenario's own overshoot schedules are marked with their verdicts
    (filled: recovers, open: does not), and the converse (least depth for a hold) as diamonds."""
    unit = f" ({frontier.unit})" if frontier.unit else ""
    found = [p for p in frontier.points if p.hold_years is not None]
    missing = [p for p in frontier.points if p.hold_years is None]
    own = list(frontier.own)
    holds = [p.hold_years for p in found] + [o.hold_years for o in own]
    holds += [c.hold_years for c in frontier.converse if c.depth is not None]
    top = 1.15 * max([*holds, 1.0])
    fig = go.Figure()
    if found:
        depths = [p.depth for p in found]
        fig.add_trace(
            go.Scatter(
                x=[*depths, *depths[::-1]],
                y=[p.hold_years for p in found] + [top] * len(found),
                fill="toself",
                fillcolor=RECOVERING_FILL,
                line=dict(width=0),
                name="recovers (hold at or above the curve)",
                hoverinfo="skip",
            )
        )
        fig.add_trace(
            go.Scatter(
                x=depths,
                y=[p.hold_years for p in found],
                mode="lines+markers",
                line=dict(color=PALETTE[2], width=3),
                marker=dict(size=7, color=PALETTE[2]),
                name="least hold that recovers",
                customdata=[[p.floor, p.time_below_threshold] for p in found],
                hovertemplate=f"depth %{{x:.4g}}{unit}<br>floor %{{customdata[0]:.4g}}<br>"
                "least hold_years %{y:.2f}<br>time_below_threshold %{customdata[1]:.2f} yr"
                "<extra></extra>",
            )
        )
    if missing:
        fig.add_trace(
            go.Scatter(
                x=[p.depth for p in missing],
                y=[top] * len(missing),
                mode="markers",
                marker=dict(symbol="x-thin-open", size=10, color=PALETTE[1], line_width=2),
                name="no hold within the horizon recovers",
                hovertemplate=f"depth %{{x:.4g}}{unit}: none<extra></extra>",
            )
        )
    answered = [c for c in frontier.converse if c.depth is not None]
    if answered:
        fig.add_trace(
            go.Scatter(
                x=[c.depth for c in answered],
                y=[c.hold_years for c in answered],
                mode="markers",
                marker=dict(symbol="diamond", size=10, color=PALETTE[0]),
                name="least depth for a given hold",
                hovertemplate=f"hold %{{y:.2f}} yr: least depth %{{x:.4g}}{unit}<extra></extra>",
            )
        )
    for i, schedule in enumerate(own):
        note = " (with in-lake actions)" if schedule.with_actions else ""
        fig.add_trace(
            go.Scatter(
                x=[schedule.depth],
                y=[schedule.hold_years],
                mode="markers+text",
                text=[schedule.name],
                textposition="top right",
                marker=dict(
                    symbol="circle" if schedule.recovered else "circle-open",
                    size=13,
                    color=colour(i + 3),
                    line=dict(color="#000000", width=1.5),
                ),
                name=f"{schedule.name}: {schedule.verdict}{note}",
                hovertemplate=f"{schedule.name}<br>depth %{{x:.4g}}{unit}, hold %{{y:.2f}} yr<br>"
                f"{schedule.verdict}{note}<extra></extra>",
            )
        )
    if frontier.deepest > 0:
        fig.add_vline(
            x=frontier.deepest,
            line=dict(color="#555", dash="dot", width=1.5),
            annotation_text="deepest achievable",
            annotation_position="top left",
        )
    family = frontier.family
    fig.update_layout(
        title=f"{frontier.scenario_name}: how deep and how long ({family.kind}, relaxing to "
        f"{family.relax_to:.3g}{unit})",
        xaxis_title=f"Depth below the recovery threshold {frontier.recovery_threshold:.3g}{unit}",
        yaxis_title="Hold at the floor (years)",
        **LAYOUT,
    )
    fig.update_yaxes(range=[0, top * 1.02])
    fig.update_xaxes(rangemode="tozero")
    return fig


def pareto_figure(scenario, result) -> go.Figure:
    """Present value against years to meet the target for every admissible schedule the search
    evaluated (``planner.search.search``), one marker shape per family, the Pareto front as a
    line, the cheapest starred and the required year (if any) as a dashed line."""
    symbols = {"overshoot": "circle", "staircase": "square"}
    currency = result.currency or "currency"
    fig = go.Figure()
    for i, family in enumerate(result.families):
        shown = [
            c
            for c in family.candidates
            if c.recovered and c.feasible and c.meets_target_at is not None
        ]
        if not shown:
            continue
        fig.add_trace(
            go.Scatter(
                x=[c.meets_target_at for c in shown],
                y=[c.present_value for c in shown],
                mode="markers",
                marker=dict(
                    symbol=symbols.get(family.kind, "circle"),
                    size=6,
                    color=colour(i),
                    opacity=0.45,
                ),
                name=f"{family.kind} schedules evaluated",
                customdata=[[c.floor, c.hold] for c in shown],
                hovertemplate="floor %{customdata[0]:.4g}, hold %{customdata[1]:.2f} yr<br>"
                f"target met at year %{{x:.2f}}<br>%{{y:,.0f}} {currency}<extra></extra>",
            )
        )
    if result.pareto:
        fig.add_trace(
            go.Scatter(
                x=[c.meets_target_at for c in result.pareto],
                y=[c.present_value for c in result.pareto],
                mode="lines+markers",
                line=dict(color="#000000", width=2, shape="hv"),
                marker=dict(size=8, color="#000000"),
                name="Pareto front (nothing is both cheaper and sooner)",
                text=[c.schedule.name for c in result.pareto],
                hovertemplate="%{text}<br>year %{x:.2f}: %{y:,.0f} " + currency + "<extra></extra>",
            )
        )
    best = result.cheapest
    if best is not None and best.meets_target_at is not None:
        fig.add_trace(
            go.Scatter(
                x=[best.meets_target_at],
                y=[best.present_value],
                mode="markers+text",
                text=["cheapest"],
                textposition="top right",
                marker=dict(
                    symbol="star", size=17, color="#E69F00", line=dict(color="#000", width=1)
                ),
                name=f"cheapest: {best.schedule.name}",
            )
        )
    if result.by_year is not None:
        fig.add_vline(
            x=result.by_year,
            line=dict(color="#555", dash="dash", width=1.5),
            annotation_text=f"required by year {result.by_year:g}",
            annotation_position="top right",
        )
    fig.update_layout(
        title=f"{result.scenario_name}: money against time to meet the target",
        xaxis_title="Years until the target is met for good",
        yaxis_title=f"Present value ({currency})",
        **LAYOUT,
    )
    return fig


# ---------------------------------------------------------------------------------------------
# Calibration to monitoring data and early-warning indicators

THRESHOLD_BAND_FILLS = {"recovery": "rgba(0, 114, 178, 0.18)", "collapse": "rgba(213, 94, 0, 0.18)"}
THRESHOLD_LINE_COLOURS = {"recovery": "#0072B2", "collapse": "#D55E00"}


def _record_years(fit, times: np.ndarray) -> np.ndarray:
    """Simulation times (years since the record's start) as the record's own times."""
    return np.asarray(times, dtype=float) + fit.observations.start


def fit_figure(fit) -> go.Figure:
    """A fitted record against time: the recorded load and the load path the model saw (top),
    and for each observed variable the observations with the fitted trajectory (below)."""
    from plotly.subplots import make_subplots

    scenario, observations = fit.scenario, fit.observations
    record = observations.record
    columns = observations.columns
    fig = make_subplots(rows=1 + len(columns), cols=1, shared_xaxes=True, vertical_spacing=0.07)
    years = _record_years(fit, fit.trajectory.times)
    loads = record.column(observations.control_column)
    fig.add_trace(
        go.Scatter(
            x=years,
            y=fit.trajectory.control,
            mode="lines",
            name="load path (linear between recorded years)",
            line=dict(color=PALETTE[5], width=1.5),
        ),
        row=1,
        col=1,
    )
    fig.add_trace(
        go.Scatter(
            x=record.times,
            y=loads,
            mode="markers",
            name="recorded load",
            marker=dict(symbol="square", size=6, color=PALETTE[5]),
        ),
        row=1,
        col=1,
    )
    variables = scenario.spec.variables
    for row, (variable, column) in enumerate(columns, start=2):
        k = variables.index(variable)
        mine = observations.variable_index == k
        fig.add_trace(
            go.Scatter(
                x=observations.times[observations.time_index[mine]] + observations.start,
                y=observations.values[mine],
                mode="markers",
                name=f"observed {column}",
                marker=dict(symbol="circle", size=7, color=PALETTE[0]),
                hovertemplate="%{x}: %{y:.4g}<extra>observed</extra>",
            ),
            row=row,
            col=1,
        )
        fig.add_trace(
            go.Scatter(
                x=years,
                y=fit.trajectory.states[k],
                mode="lines",
                name=f"fitted model {variable}",
                line=dict(color=PALETTE[1], width=2),
                hovertemplate="%{x:.1f}: %{y:.4g}<extra>fitted</extra>",
            ),
            row=row,
            col=1,
        )
        unit = record.unit(column) or scenario.state_units.get(variable, "")
        fig.update_yaxes(title_text=f"{column} ({unit})" if unit else column, row=row, col=1)
    fig.update_yaxes(title_text=scenario.control.axis_title, row=1, col=1)
    time_unit = record.time_unit or "year"
    fig.update_xaxes(title_text=f"{record.time_name} ({time_unit})", row=1 + len(columns), col=1)
    fitted = ", ".join(f"{e.name} = {e.value:.3g}" for e in fit.parameters)
    fig.update_layout(
        title=f"{scenario.name}: model fitted to the record ({fitted})",
        height=300 + 220 * len(columns),
        **LAYOUT,
    )
    return fig


def add_threshold_intervals(fig: go.Figure, thresholds, unit: str = "") -> go.Figure:
    """Shade each threshold's 95% interval on a figure whose x-axis is the control, with a
    dotted line at the estimate. ``thresholds`` maps kind -> ThresholdEstimate (as in a Fit)."""
    for kind, threshold in thresholds.items():
        interval, method = threshold.best
        colour_ = THRESHOLD_LINE_COLOURS.get(kind, "#555")
        if interval is not None and interval[1] > interval[0]:
            fig.add_vrect(
                x0=interval[0],
                x1=interval[1],
                fillcolor=THRESHOLD_BAND_FILLS.get(kind, "rgba(0,0,0,0.1)"),
                line_width=0,
                layer="below",
            )
        if threshold.value is not None:
            fig.add_vline(x=threshold.value, line=dict(color=colour_, dash="dot", width=2))
            spread = (
                ""
                if interval is None
                else f"; 95% {interval[0]:.3g} to {interval[1]:.3g} ({method}, shaded)"
            )
            fig.add_trace(
                go.Scatter(
                    x=[threshold.value],
                    y=[None],
                    mode="lines",
                    line=dict(color=colour_, dash="dot", width=2),
                    name=f"fitted {kind} threshold {threshold.value:.3g} {unit}{spread}",
                )
            )
    return fig


def fit_hysteresis_figure(fit, *, variable: str | None = None) -> go.Figure:
    """The fitted lake's equilibrium curve with the thresholds' intervals shaded, the observed
    (load, state) pairs and the fitted trajectory drawn through the diagram."""
    scenario = fit.fitted_scenario
    variable = variable or scenario.target.variable
    variables = scenario.spec.variables
    k = variables.index(variable)
    run = Trajectory(
        "fitted model through the record",
        fit.trajectory.times,
        fit.trajectory.control,
        fit.trajectory.states,
    )
    fig = hysteresis_figure(
        scenario,
        fit.diagram,
        trajectories=[run],
        variable=variable,
        title=f"{scenario.name}: fitted equilibria, thresholds with 95% intervals",
    )
    observations = fit.observations
    mine = observations.variable_index == k
    if np.any(mine):
        times = observations.times[observations.time_index[mine]]
        fig.add_trace(
            go.Scatter(
                x=observations.path(times),
                y=observations.values[mine],
                mode="markers",
                name=f"observed ({observations.column_of(variable)})",
                marker=dict(symbol="circle-open", size=7, color=PALETTE[0]),
                customdata=times + observations.start,
                hovertemplate="%{customdata}: load %{x:.3g}, %{y:.3g}<extra>observed</extra>",
            )
        )
    return add_threshold_intervals(fig, fit.thresholds, scenario.control.unit)


def signals_figure(signals) -> go.Figure:
    """The series with its kernel trend (top; interpolated values open), then each rolling
    indicator against the end time of its window with Kendall's tau in the panel title."""
    from plotly.subplots import make_subplots

    shown = [i for i in signals.indicators if i.name != "standard deviation"]
    titles = [f"{signals.variable} and its trend (bandwidth {signals.bandwidth:.3g})"] + [
        f"{i.name} (Kendall tau {i.kendall_tau:+.2f})" for i in shown
    ]
    fig = make_subplots(
        rows=1 + len(shown),
        cols=1,
        shared_xaxes=True,
        vertical_spacing=0.06,
        subplot_titles=titles,
    )
    filled = signals.filled
    fig.add_trace(
        go.Scatter(
            x=signals.times,
            y=signals.series,
            mode="lines+markers",
            name=signals.variable,
            line=dict(color=PALETTE[0], width=1),
            marker=dict(
                size=6,
                symbol=np.where(filled, "circle-open", "circle").tolist(),
                color=PALETTE[0],
            ),
        ),
        row=1,
        col=1,
    )
    fig.add_trace(
        go.Scatter(
            x=signals.times,
            y=signals.trend,
            mode="lines",
            name="trend (Gaussian kernel)",
            line=dict(color=PALETTE[1], width=2, dash="dash"),
        ),
        row=1,
        col=1,
    )
    first_window_end = signals.times[signals.window_points - 1]
    fig.add_vrect(
        x0=signals.times[0],
        x1=first_window_end,
        fillcolor="rgba(0, 0, 0, 0.06)",
        line_width=0,
        layer="below",
        annotation_text="first window",
        annotation_position="top left",
        row=1,
        col=1,
    )
    for row, indicator in enumerate(shown, start=2):
        fig.add_trace(
            go.Scatter(
                x=indicator.times,
                y=indicator.values,
                mode="lines",
                name=indicator.name,
                line=dict(color=colour(row), width=2),
                showlegend=False,
            ),
            row=row,
            col=1,
        )
    unit = f" ({signals.unit})" if signals.unit else ""
    fig.update_yaxes(title_text=f"{signals.variable}{unit}", row=1, col=1)
    fig.update_xaxes(title_text=f"{signals.time_name} (end of window)", row=1 + len(shown), col=1)
    fig.update_layout(
        title=f"Early-warning indicators of {signals.variable} "
        f"(window {signals.window_points} values)",
        height=260 + 200 * len(shown),
        **LAYOUT,
    )
    return fig


# ---------------------------------------------------------------------------------------------
# Ensembles (planner.ensemble)

FAN_FILLS = ("rgba(0, 114, 178, 0.15)", "rgba(0, 114, 178, 0.35)")


def recovery_by_year_figure(ensemble) -> go.Figure:
    """Per schedule, the share of members whose target holds from each year on to the horizon
    (a step line), and at the horizon the probability of recovery with its 95% interval."""
    scenario = ensemble.scenario
    horizon = scenario.simulation.horizon
    fig = go.Figure()
    for i, summary in enumerate(ensemble.schedules):
        style = schedule_line(i, feasible=summary.infeasible is None)
        if summary.meets_target_by is not None:
            fig.add_trace(
                go.Scatter(
                    x=summary.years,
                    y=summary.meets_target_by,
                    mode="lines",
                    line=dict(shape="hv", **style),
                    name=summary.name,
                    legendgroup=summary.name,
                    hovertemplate="by year %{x:g}: %{y:.1%}<extra>%{fullData.name}</extra>",
                )
            )
        low, high = summary.interval
        fig.add_trace(
            go.Scatter(
                x=[horizon],
                y=[summary.p_recovered],
                mode="markers",
                marker=schedule_marker(i, size=10),
                error_y=dict(
                    type="data",
                    symmetric=False,
                    array=[high - summary.p_recovered],
                    arrayminus=[summary.p_recovered - low],
                ),
                name=f"{summary.name}: recovers {summary.p_recovered:.1%} "
                f"({low:.1%} to {high:.1%})",
                legendgroup=summary.name,
                showlegend=summary.meets_target_by is None,
                hovertemplate=f"recovers: {summary.p_recovered:.1%} "
                f"(95% interval {low:.1%} to {high:.1%})<extra>{summary.name}</extra>",
            )
        )
    fig.update_layout(
        title=f"{scenario.name}: chance of meeting the target by each year<br><sup>"
        f"{ensemble.members} members; diamonds: chance of recovery with its 95% interval</sup>",
        xaxis_title="years from now",
        yaxis_title="share of members",
        **LAYOUT,
    )
    fig.update_yaxes(range=[-0.02, 1.02], tickformat=".0%")
    return fig


def ensemble_fan_figure(ensemble, name: str) -> go.Figure:
    """Quantile bands of the target variable over time for one schedule: 5-95% and 25-75%
    shaded, the median as a line, the target threshold dashed."""
    scenario = ensemble.scenario
    summary = next(s for s in ensemble.schedules if s.name == name)
    fan = summary.fan
    level = {q: row for q, row in zip(fan.levels, fan.values, strict=True)}
    fig = go.Figure()
    for (low, high), fill in zip(((0.05, 0.95), (0.25, 0.75)), FAN_FILLS, strict=True):
        fig.add_trace(
            go.Scatter(
                x=fan.times,
                y=level[high],
                mode="lines",
                line=dict(width=0),
                hoverinfo="skip",
                showlegend=False,
            )
        )
        fig.add_trace(
            go.Scatter(
                x=fan.times,
                y=level[low],
                mode="lines",
                line=dict(width=0),
                fill="tonexty",
                fillcolor=fill,
                name=f"{low:.0%} to {high:.0%} of members",
                hoverinfo="skip",
            )
        )
    fig.add_trace(
        go.Scatter(
            x=fan.times,
            y=level[0.5],
            mode="lines",
            line=dict(color=PALETTE[0], width=2),
            name="median",
            hovertemplate="year %{x:g}: %{y:.3g}<extra>median</extra>",
        )
    )
    if scenario.target.threshold is not None:
        fig.add_hline(
            y=scenario.target.threshold,
            line=dict(color="#009E73", dash="dash", width=2),
            annotation_text="target",
            annotation_position="top right",
        )
    fig.update_layout(
        title=f"{name}: spread of {scenario.target.variable} over {fan.members} members",
        xaxis_title="years from now",
        yaxis_title=scenario.axis_title(scenario.target.variable),
        **LAYOUT,
    )
    return fig
