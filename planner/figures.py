"""Plotly figure builders, used alike by the CLI reports, the briefing and the web app.

Styles. A schedule is told apart by three things at once, its colour, its dash pattern and its
marker symbol, so that no reading depends on colour vision alone (:func:`schedule_style`).
The colours are the members of Paul Tol's colour-blind-safe qualitative schemes (Tol 2021,
"Colour schemes", SRON technical note SRON/EPS/TN/09-002: "vibrant" blue, red and magenta,
"muted" green, purple and wine; hex values from memory) that keep a contrast of at least 3:1
against white and against the shaded bistable band, the WCAG 2.1 threshold for graphics
(success criterion 1.4.11, non-text contrast); the schemes' pale members (cyan, sand, grey...)
and the Okabe & Ito (2008) orange and sky blue fall below it. Reserved, never a schedule's:
black and grey lines (stable equilibria solid, unstable ones dashed), black triangles (folds),
the orange star ("now", the cheapest option), the plain "dash" and "dot" patterns (unstable
equilibria, schedules that break a limit).

Legends sit below the plot in the figure's own (container) coordinates, so plotly keeps their
room free of the plot, its tick labels and axis titles whatever the figure's size; long names
wrap, and each builder sizes the figure for its legend (:data:`PLOT_HEIGHT` of plot besides).

Text alternatives. Every builder stores a short plain-language description of what its figure
shows, with the key numbers and their units, in ``layout.meta``; :func:`description` reads it
back (from a figure or its JSON) for an accessible name or a caption. The wording of thresholds,
verdicts and standings is that of :mod:`planner.report`.
"""

from __future__ import annotations

import math
import textwrap
from collections.abc import Collection, Sequence
from dataclasses import dataclass
from pathlib import PurePath

import numpy as np
import plotly.graph_objects as go

from planner.equilibria import Diagram, Standing
from planner.report import (
    clipped_runs,
    lake_verdict_words,
    stable_states_words,
    standing_words,
    threshold_words,
    verdict_text,
)
from planner.units import significant

# ---------------------------------------------------------------------------------------------
# Styles

SCHEDULE_COLOURS = ("#0077BB", "#CC3311", "#117733", "#AA4499", "#EE3377", "#882255")
"""Schedule colours: Tol's vibrant blue and red, muted green and purple, vibrant magenta, muted
wine (every one at least 3:1 against white and the bistable band)."""
PALETTE = SCHEDULE_COLOURS  # the same colours for the series of figures without schedules
SCHEDULE_DASHES = ("solid", "longdash", "dashdot")  # "dash" marks unstable equilibria and
# "dot" infeasible schedules, so neither is used to tell schedules apart
SCHEDULE_SYMBOLS = (
    "circle",
    "square",
    "x",
    "cross",
    "pentagon",
    "hourglass",
    "hexagon",
    "bowtie",
    "octagon",
    "square-x",
    "circle-x",
    "square-cross",
)  # no star ("now"), triangle or diamond (folds, the frontier's converse)
DISTINCT_SCHEDULES = len(SCHEDULE_COLOURS) * len(SCHEDULE_DASHES)  # 18 (colour, dash) pairs
DISTINCT_STYLES = math.lcm(DISTINCT_SCHEDULES, len(SCHEDULE_SYMBOLS))  # 36 before a triple repeats

STABLE_COLOUR = "#1f1f1f"
UNSTABLE_COLOUR = "#7a7a7a"
STABLE_LINE = dict(color=STABLE_COLOUR, width=3, dash="solid")
UNSTABLE_LINE = dict(color=UNSTABLE_COLOUR, width=2, dash="dash")
NOW_COLOUR = "#E69F00"
NOW_MARKER = dict(symbol="star", size=16, color=NOW_COLOUR, line=dict(color="#000000", width=1))
FOLD_COLOUR = "#000000"
REFERENCE_LINE = dict(color="#555555", dash="dash", width=1.5)  # thresholds, target, by-year
WINDOW_FILL = "rgba(230, 159, 0, 0.15)"
FOLD_LABELS = {"collapse": "Collapse threshold", "recovery": "Recovery threshold", "fold": "Fold"}
FOLD_SYMBOLS = {"collapse": "triangle-up", "recovery": "triangle-down", "fold": "diamond"}
NAMED_PATHS = 4  # a diagram's description names up to this many paths, then counts them
MARKERS_PER_LINE = 8  # schedule symbols drawn along a line (plotly's marker.maxdisplayed)


@dataclass(frozen=True)
class ScheduleStyle:
    """How schedule number ``index`` is drawn: colour, dash pattern and marker symbol."""

    colour: str
    dash: str
    symbol: str

    def line(self, *, feasible: bool = True, width: float = 2) -> dict:
        """Plotly line properties; a schedule that breaks a limit is dotted."""
        return dict(color=self.colour, width=width, dash=self.dash if feasible else "dot")

    def marker(self, **extra) -> dict:
        """Plotly marker properties: the colour and the symbol of its own."""
        return dict(color=self.colour, symbol=self.symbol, **extra)


def schedule_style(index: int) -> ScheduleStyle:
    """The style of schedule ``index`` (0-based, in the scenario's order, so a schedule looks
    the same in every figure). The colour cycles fastest; the dash pattern shifts by one for
    each round of colours, so that neighbours differ in dash as well as colour and the first
    :data:`DISTINCT_SCHEDULES` (colour, dash) pairs all differ; the symbol cycles on its own,
    so the first :data:`DISTINCT_STYLES` triples all differ. Past that, styles repeat, but
    always from the same accessible colours, dashes and symbols."""
    colours, dashes = len(SCHEDULE_COLOURS), len(SCHEDULE_DASHES)
    return ScheduleStyle(
        colour=SCHEDULE_COLOURS[index % colours],
        dash=SCHEDULE_DASHES[(index + index // colours) % dashes],
        symbol=SCHEDULE_SYMBOLS[index % len(SCHEDULE_SYMBOLS)],
    )


def schedule_line(index: int, *, feasible: bool = True, width: float = 2) -> dict:
    """The line of schedule ``index`` (see :func:`schedule_style`)."""
    return schedule_style(index).line(feasible=feasible, width=width)


def schedule_marker(index: int, **extra) -> dict:
    """The marker of schedule ``index``: its line colour and a symbol of its own."""
    return schedule_style(index).marker(**extra)


def _schedule_trace_style(index: int, *, feasible: bool = True, width: float = 2) -> dict:
    """Line, and a few markers along it, of schedule ``index``: the legend then shows colour,
    dash and symbol together."""
    style = schedule_style(index)
    return dict(
        mode="lines+markers",
        line=style.line(feasible=feasible, width=width),
        marker=style.marker(size=8, maxdisplayed=MARKERS_PER_LINE),
    )


# ---------------------------------------------------------------------------------------------
# Layout: legends below the plot, each figure sized to hold its legend

FONT_SIZE = 13
LEGEND_LINE_CHARS = 44  # a legend entry wraps after this many characters (narrow screens)
NOMINAL_WIDTH = 700  # px: the width a figure's height is planned for (the app, the briefing)
LEGEND_ROW_HEIGHT = 21  # px per line of legend text (13 px font with plotly's spacing)
PLOT_HEIGHT = 400  # px: the plot area of a one-panel figure, title and legend besides
TITLE_ROOM = 60  # px above the plot for the title
AXIS_ROOM = 70  # px below the plot for tick labels and the x-axis title
LEGEND = dict(
    orientation="h",
    xref="container",
    yref="container",
    x=0.01,
    y=0.005,
    xanchor="left",
    yanchor="bottom",
    font=dict(size=FONT_SIZE - 1),
)
LAYOUT = dict(
    template="plotly_white",
    font=dict(family="Helvetica, Arial, sans-serif", size=FONT_SIZE),
    margin=dict(l=70, r=30, t=TITLE_ROOM, b=AXIS_ROOM),
    legend=LEGEND,
)


def legend_name(text: str) -> str:
    """A legend entry's text, wrapped onto lines of at most :data:`LEGEND_LINE_CHARS`
    characters so that a long schedule name fits a narrow screen."""
    if len(text) <= LEGEND_LINE_CHARS:
        return text
    return "<br>".join(textwrap.wrap(text, LEGEND_LINE_CHARS))


def _legend_entries(fig: go.Figure) -> list[str]:
    """The texts the legend shows: one per trace that shows in the legend."""
    return [t.name for t in fig.data if t.showlegend is not False and t.name]


def legend_height(fig: go.Figure, width: float = NOMINAL_WIDTH) -> float:
    """Estimated height (px) of the figure's horizontal legend at ``width``: entries packed
    into rows left to right as plotly does, each row as tall as its tallest entry."""
    char = 0.55 * (FONT_SIZE - 1)  # mean advance of a sans-serif character, in px
    rows, used, lines = [], width, 0
    for text in _legend_entries(fig):
        parts = text.split("<br>")
        wide = 40 + char * max(len(p) for p in parts)
        if used + wide > width and lines:
            rows.append(lines)
            used, lines = 0, 0
        used += wide
        lines = max(lines, len(parts))
    if lines:
        rows.append(lines)
    return LEGEND_ROW_HEIGHT * sum(rows) + (10 if rows else 0)


def _finish(fig: go.Figure, kind: str, words: str, plot_height: float = PLOT_HEIGHT) -> go.Figure:
    """Store the description and size the figure: plot, title and axes, then the legend."""
    top = fig.layout.margin.t or TITLE_ROOM
    fig.update_layout(
        meta={"figure": kind, "description": words},
        height=round(plot_height + top + AXIS_ROOM + legend_height(fig)),
        # the title hangs from the top edge, so a taller top margin never pushes it down
        title=dict(yref="container", y=1, yanchor="top", pad=dict(t=18)),
    )
    return fig


def description(figure: go.Figure | dict) -> str:
    """The figure's text alternative: the plain-language description its builder stored (what
    it shows, the key numbers with their units), else its title without markup, else ""."""
    layout = figure.get("layout", {}) if isinstance(figure, dict) else figure.layout
    meta = layout.get("meta") if isinstance(layout, dict) else layout.meta
    if isinstance(meta, dict) and meta.get("description"):
        return str(meta["description"])
    if isinstance(layout, dict):
        title = layout.get("title") or {}
        text = title.get("text", "") if isinstance(title, dict) else str(title)
    else:
        text = layout.title.text or ""
    return " ".join(text.replace("<br>", " ").replace("<sup>", "").replace("</sup>", "").split())


def _as_sentence(text: str) -> str:
    """A capital first letter and a full stop (the rest as written: units keep their case)."""
    return text[:1].upper() + text[1:] + ("" if text.endswith(".") else ".")


def _quoted(name: str) -> str:
    return f"“{name}”"


def _with_unit(value: float, unit: str) -> str:
    return f"{significant(value)} {unit}".strip()


def _thresholds_words(diagram: Diagram, unit: str) -> str:
    """The two thresholds as the diagram text says them."""
    return (
        f"Collapse threshold: {threshold_words(diagram.collapse, unit)}. "
        f"Recovery threshold: {threshold_words(diagram.recovery, unit)}."
    )


def _target_words(scenario) -> str:
    """The water-quality target in the model's unit, and how it was asked for when given as
    lake TP ("0.31 g P / m2, eutrophic or better (OECD 1982)")."""
    target = scenario.target
    words = _with_unit(target.threshold, scenario.state_units.get(target.variable, ""))
    asked = target.asked_words()
    return f"{words}, {asked}" if asked else words


def _schedule_index(scenario, name: str, fallback: int) -> int:
    """The position of the schedule called ``name`` in the scenario (its style everywhere)."""
    names = [s.name for s in getattr(scenario, "schedules", ())]
    return names.index(name) if name in names else fallback


# ---------------------------------------------------------------------------------------------
# Trophic state beside lake P: a second axis in ug/L and the OECD class boundaries

TROPHIC_LINE = dict(color="#9DBFAE", width=1, dash="solid")
"""OECD class boundaries: thin, light and solid (no schedule colour, not the black or grey of
the equilibria, not the reserved "dash" and "dot")."""
TROPHIC_NOTE = dict(size=FONT_SIZE - 2, color="#5C7F6E")
TP_AXIS_ROOM = 80  # px right of the plot for the ug/L tick labels and their title
TP_TICKS = 6  # about this many ug/L ticks on the second axis


def _lake_tp(scenario, variable: str):
    """The scenario's lake conversion when ``variable`` is its lake P and it has a ``[lake]``
    block that reads that variable as TP; else None (the figure stays as it was)."""
    from planner.units import scenario_lake_conversion

    if variable != scenario.target.variable:
        return None
    conversion = scenario_lake_conversion(scenario)
    if conversion is None or conversion.tp_per_state is None:
        return None
    return conversion


def _nice_steps(low: float, high: float, count: int = TP_TICKS) -> np.ndarray:
    """Round values (1, 2 or 5 times a power of ten apart) from ``low`` to ``high``."""
    span = high - low
    if not span > 0:
        return np.array([low])
    raw = span / count
    power = 10.0 ** math.floor(math.log10(raw))
    step = next(f * power for f in (1, 2, 2.5, 5, 10) if f * power >= raw)
    first = math.ceil(low / step) * step
    return np.arange(first, high + step * 1e-9, step)


def _axis_values(fig: go.Figure, axis: str) -> list[float]:
    """Every finite y value of the traces drawn against the y-axis ``axis`` ("y", "y2"...)."""
    values: list[float] = []
    for trace in fig.data:
        if (getattr(trace, "yaxis", None) or "y") != axis or trace.y is None:
            continue
        ys = np.asarray([v for v in trace.y if v is not None], dtype=float)
        values.extend(ys[np.isfinite(ys)].tolist())
    return values


def add_tp_axis(fig: go.Figure, scenario, variable: str, *, axis: str = "y") -> bool:
    """Beside the y-axis ``axis`` that shows lake P ``variable`` in the model's unit, a second
    axis in ug/L (each tick's label is :meth:`LakeConversion.tp` of its position) and the OECD
    (1982) class boundaries as thin labelled lines where they fall inside the drawn values.
    Nothing without a ``[lake]`` block (or when the variable is not read as TP); True when added.
    """
    from planner.limnology import OECD_CLASSES, OECD_UPPER_TP

    conversion = _lake_tp(scenario, variable)
    values = _axis_values(fig, axis)
    if conversion is None or not values:
        return False
    per_state = conversion.tp(1.0)  # ug/L per unit of the state: the conversions are linear
    low, high = min(values), max(values)  # boundaries only inside these: none widens the axis
    positions = _nice_steps(conversion.tp(min(low, 0.0)), conversion.tp(high)) / per_state
    name = "yaxis" + axis[1:]
    primary = fig.layout[name]
    used = [int(k[5:] or 1) for k in fig.layout.to_plotly_json() if k.startswith("yaxis")]
    number = max([*used, 1]) + 1
    fig.update_layout(
        {
            f"yaxis{number}": dict(
                overlaying=axis,
                matches=axis,
                anchor=primary.anchor or "x",
                side="right",
                showgrid=False,
                zeroline=False,
                tickmode="array",
                tickvals=positions.tolist(),
                ticktext=[significant(conversion.tp(p), 2) for p in positions],
                title_text="lake TP (ug/L)",
            )
        }
    )
    fig.add_trace(  # an axis is drawn only with a trace on it: this one shows nothing
        go.Scatter(
            x=[None],
            y=[None],
            yaxis=f"y{number}",
            xaxis=primary.anchor or "x",
            showlegend=False,
            hoverinfo="skip",
        )
    )
    for boundary, above in zip(OECD_UPPER_TP, OECD_CLASSES[1:], strict=True):
        at = boundary / per_state
        if low < at < high:
            fig.add_shape(
                type="line",
                xref=f"{primary.anchor or 'x'} domain",
                yref=axis,
                x0=0,
                x1=1,
                y0=at,
                y1=at,
                line=TROPHIC_LINE,
                layer="below",
            )
            fig.add_annotation(
                xref=f"{primary.anchor or 'x'} domain",
                yref=axis,
                x=0.005,
                y=at,
                xanchor="left",
                yanchor="bottom",
                showarrow=False,
                text=f"{above} above {significant(boundary)} ug/L (OECD)",
                font=TROPHIC_NOTE,
            )
    margin = fig.layout.margin.r or 0
    fig.update_layout(margin_r=max(margin, TP_AXIS_ROOM))
    return True


def _trophic_figure_words(scenario, variable: str) -> str:
    """The second axis and the trophic class of today's state and of the target in words
    ("" without a ``[lake]`` block)."""
    from planner.limnology import trophic_brief, trophic_state

    conversion = _lake_tp(scenario, variable)
    if conversion is None:
        return ""
    k = scenario.model_info.variables.index(variable)
    now = trophic_brief(trophic_state(conversion.tp(scenario.initial_state[k])))
    words = (
        f" Right axis: lake TP in ug/L ({conversion.tp_words(1.0)}), with the OECD (1982) class "
        f"boundaries at 10, 35 and 100 ug/L drawn where they fall in range. Today: {now}"
    )
    target = scenario.target.threshold
    if target is not None:
        goal = trophic_state(conversion.tp(target))
        words += f"; the target: TP {significant(goal.tp_ug_l)} ug/L, {goal.oecd_class}"
    return words + "."


# ---------------------------------------------------------------------------------------------
# The equilibrium curve, schedules over time, sweeps, side by side


@dataclass(frozen=True)
class Trajectory:
    """A schedule's run for plotting: times (years), control u(t) and state x(t) (n, k)."""

    name: str
    times: np.ndarray
    control: np.ndarray
    states: np.ndarray


def _shade_window(fig: go.Figure, diagram: Diagram, **where) -> None:
    """Shade the bistable window, clipped to the control range (nothing when it is empty
    there); ``where``: the subplot (row, col) and an annotation, as plotly's add_vrect takes."""
    window = diagram.window
    if window is None:
        return
    low, high = diagram.control_range
    left = low if window.recovery is None else max(window.recovery, low)
    right = high if window.collapse is None else min(window.collapse, high)
    if right > left:
        if "annotation_text" in where:
            where.setdefault("annotation_position", "top left")
        fig.add_vrect(
            x0=left, x1=right, fillcolor=WINDOW_FILL, line_width=0, layer="below", **where
        )


def _diagram_words(scenario, diagram: Diagram, variable: str) -> str:
    """What an equilibrium curve shows: axes with units, the lake's verdict, both thresholds."""
    low, high = diagram.control_range
    unit = scenario.control.unit
    name = scenario.control.label or scenario.control.parameter
    state_unit = scenario.state_units.get(variable, "")
    of = f" ({state_unit})" if state_unit else ""
    return (
        f"Equilibrium {variable}{of} against {name} from {_with_unit(low, '')} to "
        f"{_with_unit(high, unit)}: stable states as solid lines, unstable ones (the boundary "
        f"between basins) dashed. Lake verdict: {lake_verdict_words(scenario, diagram)}. "
        + _thresholds_words(diagram, unit)
    )


def hysteresis_figure(
    scenario,
    diagram: Diagram,
    *,
    standing: Standing | None = None,
    trajectories: Sequence[Trajectory] = (),
    variable: str | None = None,
    title: str | None = None,
    shown: Collection[str] | None = None,
) -> go.Figure:
    """Equilibrium curve against the control: stable solid, unstable dashed, folds marked,
    bistable window shaded, current state starred, and schedules' paths drawn in (u, x).
    ``trajectories`` are in the scenario's schedule order (their styles follow it); those not
    in ``shown`` (None: all) start hidden, a click on their legend entry away."""
    variable = variable or scenario.target.variable
    k = diagram.system.variables.index(variable)
    low, high = diagram.control_range
    unit = scenario.control.unit
    fig = go.Figure()
    _shade_window(fig, diagram, annotation_text=stable_states_words(diagram))
    labels = set()
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
                    showlegend=label not in labels,
                    line=STABLE_LINE if stable else UNSTABLE_LINE,
                    hovertemplate=f"{scenario.control.parameter} = %{{x:.4g}} {unit}<br>"
                    f"{variable} = %{{y:.4g}}<extra>{label}</extra>",
                )
            )
            labels.add(label)
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
                marker=dict(symbol=FOLD_SYMBOLS[fold.kind], size=13, color=FOLD_COLOUR),
                name=FOLD_LABELS[fold.kind],
                showlegend=False,
                hovertemplate=f"{FOLD_LABELS[fold.kind]}: %{{x:.6g}} {unit}<extra></extra>",
            )
        )
    for i, run in enumerate(trajectories):
        style = schedule_style(_schedule_index(scenario, run.name, i))
        visible = True if shown is None or run.name in shown else "legendonly"
        fig.add_trace(
            go.Scatter(
                x=run.control,
                y=run.states[k],
                mode="lines",
                name=legend_name(run.name),
                legendgroup=run.name,
                visible=visible,
                line=style.line(),
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
                marker=dict(symbol="arrow", angleref="previous", size=11, color=style.colour),
                legendgroup=run.name,
                visible=visible,
                showlegend=False,
                hoverinfo="skip",
            )
        )
        fig.add_trace(
            go.Scatter(  # where the path ends, in the schedule's own symbol
                x=run.control[-1:],
                y=run.states[k][-1:],
                mode="markers",
                marker=style.marker(size=10, line=dict(color="#ffffff", width=1)),
                legendgroup=run.name,
                visible=visible,
                showlegend=False,
                hovertemplate="end of the horizon: %{x:.3g}, %{y:.3g}<extra>"
                + run.name
                + "</extra>",
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
                marker=NOW_MARKER,
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
    words = _diagram_words(scenario, diagram, variable)
    if add_tp_axis(fig, scenario, variable):
        words += _trophic_figure_words(scenario, variable)
    if standing is not None:
        words += f" {standing_words(scenario, standing)}"
    drawn = [run.name for run in trajectories if shown is None or run.name in shown]
    if len(drawn) > NAMED_PATHS:
        words += f" The paths of {len(drawn)} schedules are drawn from today's state."
    elif drawn:
        words += f" Paths drawn from today's state: {', '.join(map(_quoted, drawn))}."
    return _finish(fig, "diagram", words)


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


def _outcomes_words(scenario, outcomes) -> str:
    """Each schedule's verdict (schedules with the same verdict together), and which break a
    limit."""
    groups: dict[str, list[str]] = {}
    for outcome in outcomes:
        groups.setdefault(verdict_text(scenario, outcome), []).append(_quoted(outcome.name))
    words = " ".join(
        f"{names[0]} {verdict}."
        if len(names) == 1
        else f"{verdict[:1].upper()}{verdict[1:]} ({len(names)} schedules): {', '.join(names)}."
        for verdict, names in groups.items()
    )
    breaking = [o.name for o in outcomes if not o.feasible]
    if breaking:
        words += f" Breaking a limit (dotted): {', '.join(map(_quoted, breaking))}."
    return words


def time_series_figure(comparison, *, names: Sequence[str] | None = None) -> go.Figure:
    """Control (top) and target variable (bottom) against time for each schedule, with the
    recovery and collapse thresholds on the control panel and the target line below."""
    from plotly.subplots import make_subplots

    scenario, diagram = comparison.scenario, comparison.diagram
    k = scenario.target_index
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08)
    drawn = []
    for i, outcome in enumerate(comparison.outcomes):
        if names is not None and outcome.name not in names:
            continue
        drawn.append(outcome)
        run = outcome.trajectory
        style = _schedule_trace_style(i, feasible=outcome.feasible)
        for row, values in ((1, run.control), (2, run.states[k])):
            fig.add_trace(
                go.Scatter(
                    x=run.times,
                    y=values,
                    name=legend_name(outcome.name),
                    legendgroup=outcome.name,
                    showlegend=row == 1,
                    hovertemplate=f"year %{{x:.1f}}: %{{y:.3g}}<extra>{outcome.name}</extra>",
                    **style,
                ),
                row=row,
                col=1,
            )
    for value, label in (
        (diagram.recovery_threshold, "recovery threshold"),
        (diagram.collapse_threshold, "collapse threshold"),
    ):
        if value is not None:
            fig.add_hline(
                y=value,
                line=REFERENCE_LINE,
                row=1,
                col=1,
                annotation_text=label,
                annotation_position="bottom right",
            )
    target = scenario.target.threshold
    if target is not None:
        fig.add_hline(
            y=target,
            line=REFERENCE_LINE,
            row=2,
            col=1,
            annotation_text="target",
            annotation_position="top right",
        )
    fig.update_yaxes(title_text=scenario.control.axis_title, row=1, col=1)
    fig.update_yaxes(title_text=scenario.axis_title(scenario.target.variable), row=2, col=1)
    fig.update_xaxes(title_text="years from now", row=2, col=1)
    fig.update_layout(title=f"{scenario.name}: schedules over time (dotted: infeasible)", **LAYOUT)
    variable = scenario.target.variable
    name = scenario.control.label or scenario.control.parameter
    unit = scenario.control.unit
    words = (
        f"Top: {name} ({unit}) over the {significant(scenario.simulation.horizon)}-year horizon "
        f"under each of the {len(drawn)} schedules shown, with the thresholds as dashed lines. "
        + _thresholds_words(diagram, unit)
        + f" Bottom: {scenario.axis_title(variable)} over the same years"
    )
    if target is not None:
        words += f", with the water-quality target at {_target_words(scenario)}"
    words += f". {_outcomes_words(scenario, drawn)}" if drawn else "."
    if add_tp_axis(fig, scenario, variable, axis="y2"):
        words += _trophic_figure_words(scenario, variable)
    return _finish(fig, "time series", words, plot_height=2 * PLOT_HEIGHT * 0.6)


def sweep_figure(scenario, sweep, diagram: Diagram | None = None) -> go.Figure:
    """The loop a slowly dialled control traces, over the equilibrium curve when given."""
    from planner.report import sweep_text

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
    lines = [line.strip() for line in sweep_text(scenario, sweep, caution=False).splitlines()]
    words = f"{variable} reached after settling at each step. " + " ".join(
        _as_sentence(line) for line in lines[1:] if line
    )
    if diagram is not None:
        words += " " + _thresholds_words(diagram, scenario.control.unit)
    if diagram is not None or add_tp_axis(fig, scenario, variable):  # the diagram has its own
        words += _trophic_figure_words(scenario, variable)
    return _finish(fig, "sweep", words)


def small_multiples_figure(comparison, names: Sequence[str]) -> go.Figure:
    """Two to four schedules side by side on the hysteresis diagram, with shared axes."""
    from plotly.subplots import make_subplots

    scenario, diagram = comparison.scenario, comparison.diagram
    chosen = [o for o in comparison.outcomes if o.name in names][:4]
    columns = max(len(chosen), 1)
    # a letter heads each column and leads its legend entry: a schedule's name does not fit
    # above a column a phone's width shares among four
    letters = "ABCD"[: len(chosen)]
    heads = [f"<b>{letter}</b>" for letter in letters]
    fig = make_subplots(
        rows=1,
        cols=columns,
        shared_yaxes=True,
        shared_xaxes=True,
        subplot_titles=heads,
        horizontal_spacing=0.03,
    )
    fig.update_annotations(font_size=FONT_SIZE + 2)
    base = hysteresis_figure(scenario, diagram)
    for c, (outcome, letter) in enumerate(zip(chosen, letters, strict=True), start=1):
        for trace in base.data:
            copy = go.Scatter(trace)
            copy.showlegend = c == 1 and trace.showlegend is not False
            if copy.mode == "markers+text":  # fold labels would spill over the next column
                copy.mode = "markers"
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
                name=legend_name(f"{letter}: {outcome.name}: {verdict}"),
                legendgroup=outcome.name,
                showlegend=True,
            ),
            row=1,
            col=c,
        )
        _shade_window(fig, diagram, row=1, col=c)
    # the axis titles once, under and beside the first column: a column is too narrow for
    # one each, and an annotation under the row would not move the legend down
    fig.update_xaxes(title_text=scenario.control.axis_title, row=1, col=1)
    fig.update_yaxes(title_text=scenario.axis_title(scenario.target.variable), row=1, col=1)
    fig.update_layout(title=f"{scenario.name}: side by side", **LAYOUT)
    fig.update_layout(margin_t=TITLE_ROOM + 30)
    columns_words = ", ".join(
        f"{x} {_quoted(o.name)}" for x, o in zip(letters, chosen, strict=True)
    )
    words = (
        f"{len(chosen)} schedules side by side, each on its own copy of the equilibrium curve "
        f"({columns_words}). "
        + _diagram_words(scenario, diagram, scenario.target.variable)
        + f" {_outcomes_words(scenario, chosen)}"
    )
    last = f"y{columns}" if columns > 1 else "y"  # the second axis right of the last column
    if add_tp_axis(fig, scenario, scenario.target.variable, axis=last):
        words += _trophic_figure_words(scenario, scenario.target.variable)
    return _finish(fig, "side by side", words, plot_height=PLOT_HEIGHT * 0.85)


# ---------------------------------------------------------------------------------------------
# Recovery frontier and schedule search

RECOVERING_FILL = "rgba(0, 158, 115, 0.15)"


def _frontier_words(frontier) -> str:
    """The frontier's reading: the threshold, the shallowest and deepest cuts that recover with
    their least holds, the depths no hold rescues, and the scenario's own schedules."""
    unit = frontier.unit
    found = [p for p in frontier.points if p.hold_years is not None]
    missing = [p for p in frontier.points if p.hold_years is None]
    words = (
        "Least hold at the floor (years) against the depth of the cut below the recovery "
        f"threshold of {_with_unit(frontier.recovery_threshold, unit)}; after the hold the load "
        f"relaxes to {_with_unit(frontier.family.relax_to, unit)}. "
    )
    if found:
        shallow, deep = found[0], found[-1]
        words += (
            f"A cut {_with_unit(shallow.depth, unit)} below the threshold recovers if held at "
            f"least {significant(shallow.hold_years)} years"
        )
        if deep is not shallow:
            words += (
                f"; {_with_unit(deep.depth, unit)} below needs {significant(deep.hold_years)} years"
            )
        words += "."
    else:
        words += "No depth tried recovers within the horizon."
    if missing and found:
        depths = ", ".join(_with_unit(p.depth, unit) for p in missing)
        words += f" No hold within the horizon recovers at a depth of {depths}."
    if frontier.deepest > 0:
        words += f" Deepest achievable cut: {_with_unit(frontier.deepest, unit)}."
    for schedule in frontier.own:
        side = "below" if schedule.depth >= 0 else "above"
        words += (
            f" {_quoted(schedule.name)}: a floor {_with_unit(abs(schedule.depth), unit)} {side} "
            f"the threshold, held {significant(schedule.hold_years)} years, {schedule.verdict}."
        )
    return words


def frontier_figure(scenario, frontier) -> go.Figure:
    """Least hold (years) against overshoot depth below the recovery threshold (control unit),
    from ``planner.frontier.recovery_frontier``. Holds above the curve recover (shaded); depths
    where no hold within the horizon recovers are crossed at the top; the deepest achievable cut
    is a dotted line; the scenario's own overshoot schedules are marked with their verdicts
    (filled: recovers, open: does not) in their own colours, and the converse (least depth for
    a hold) as diamonds."""
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
                mode="lines",
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
                line=dict(color=STABLE_COLOUR, width=3),
                marker=dict(size=7, color=STABLE_COLOUR),
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
                marker=dict(symbol="x-thin-open", size=10, color=STABLE_COLOUR, line_width=2),
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
                marker=dict(symbol="diamond", size=10, color=UNSTABLE_COLOUR),
                name="least depth for a given hold",
                hovertemplate=f"hold %{{y:.2f}} yr: least depth %{{x:.4g}}{unit}<extra></extra>",
            )
        )
    widest = max([frontier.deepest, *(p.depth for p in frontier.points), *(o.depth for o in own)])
    for i, schedule in enumerate(own):
        note = " (with in-lake actions)" if schedule.with_actions else ""
        style = schedule_style(_schedule_index(scenario, schedule.name, i))
        fig.add_trace(
            go.Scatter(
                x=[schedule.depth],
                y=[schedule.hold_years],
                mode="markers+text",
                text=[schedule.name],
                # labels in the right half lean left, so they stay inside the plot
                textposition="top left" if schedule.depth > widest / 2 else "top right",
                marker=dict(
                    symbol="circle" if schedule.recovered else "circle-open",
                    size=13,
                    color=style.colour,
                    line=dict(color=style.colour if not schedule.recovered else "#000000", width=2),
                ),
                name=legend_name(f"{schedule.name}: {schedule.verdict}{note}"),
                legendgroup=schedule.name,
                hovertemplate=f"{schedule.name}<br>depth %{{x:.4g}}{unit}, hold %{{y:.2f}} yr<br>"
                f"{schedule.verdict}{note}<extra></extra>",
            )
        )
    if frontier.deepest > 0:
        fig.add_vline(
            x=frontier.deepest,
            line=dict(color="#555555", dash="dot", width=1.5),
            annotation_text="deepest achievable",
            annotation_position="top left",
        )
    family = frontier.family
    fig.update_layout(
        title=f"{frontier.scenario_name}: how deep and how long ({family.kind}, relaxing to "
        f"{family.relax_to:.3g}{unit})",
        # the unit on a line of its own: the title is wider than a phone otherwise
        xaxis_title=f"Depth below the recovery threshold {frontier.recovery_threshold:.3g}"
        + (f"<br>{unit.strip()}" if unit else ""),
        yaxis_title="Hold at the floor (years)",
        **LAYOUT,
    )
    fig.update_yaxes(range=[0, top * 1.02])
    fig.update_xaxes(rangemode="tozero")
    return _finish(fig, "frontier", _frontier_words(frontier))


FAMILY_SYMBOLS = {"overshoot": "circle", "staircase": "square"}


def pareto_figure(scenario, result) -> go.Figure:
    """Present value against years to meet the target for every admissible schedule the search
    evaluated (``planner.search.search``), one marker shape per family, the Pareto front as a
    line, the cheapest starred and the required year (if any) as a dashed line."""
    from planner.search import search_words

    currency = result.currency or "currency"
    fig = go.Figure()
    evaluated = 0
    for i, family in enumerate(result.families):
        shown = [
            c
            for c in family.candidates
            if c.recovered and c.feasible and c.meets_target_at is not None
        ]
        if not shown:
            continue
        evaluated += len(shown)
        fig.add_trace(
            go.Scatter(
                x=[c.meets_target_at for c in shown],
                y=[c.present_value for c in shown],
                mode="markers",
                marker=dict(
                    symbol=FAMILY_SYMBOLS.get(family.kind, "circle"),
                    size=6,
                    color=PALETTE[i % len(PALETTE)],
                    opacity=0.55,
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
                line=dict(color=STABLE_COLOUR, width=2, shape="hv"),
                marker=dict(size=8, color=STABLE_COLOUR),
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
                marker=NOW_MARKER,
                name=legend_name(f"cheapest: {best.schedule.name}"),
            )
        )
    if result.by_year is not None:
        fig.add_vline(
            x=result.by_year,
            line=REFERENCE_LINE,
            annotation_text=f"required by year {result.by_year:g}",
            annotation_position="top right",
        )
    fig.update_layout(
        title=f"{result.scenario_name}: money against time to meet the target",
        xaxis_title="Years until the target is met for good",
        yaxis_title=f"Present value ({currency})",
        **LAYOUT,
    )
    words = (
        f"Present value ({currency}) against the years until the target is met for good, for "
        f"the {evaluated} schedules the search tried that recover within the limits; "
        f"{len(result.pareto)} of them form the Pareto front. " + _as_sentence(search_words(result))
    )
    if result.by_year is not None:
        words += f" The target is required by year {result.by_year:g}."
    return _finish(fig, "search", words)


# ---------------------------------------------------------------------------------------------
# Calibration to monitoring data and early-warning indicators

THRESHOLD_BAND_FILLS = {
    "recovery": "rgba(0, 119, 187, 0.18)",
    "collapse": "rgba(204, 51, 17, 0.18)",
}
THRESHOLD_LINE_COLOURS = {"recovery": SCHEDULE_COLOURS[0], "collapse": SCHEDULE_COLOURS[1]}


def _record_years(fit, times: np.ndarray) -> np.ndarray:
    """Simulation times (years since the record's start) as the record's own times."""
    return np.asarray(times, dtype=float) + fit.observations.start


def _fitted_words(fit) -> str:
    """The fit's headline, the fitted parameters and both thresholds with their intervals."""
    from planner.calibration import fit_headline

    unit = fit.scenario.control.unit
    parts = []
    for estimate in fit.parameters:
        best, _ = estimate.best
        spread = "" if best is None else f" (95% {significant(best[0])} to {significant(best[1])})"
        parts.append(f"{estimate.name} = {significant(estimate.value)}{spread}")
    words = f"{fit_headline(fit)} Fitted: {', '.join(parts)}."
    for kind, threshold in fit.thresholds.items():
        if threshold.value is None:
            continue
        best, method = threshold.best
        spread = (
            ""
            if best is None
            else f" (95% interval {_with_unit(best[0], '')} to {_with_unit(best[1], unit)}, "
            f"{method})"
        )
        words += f" Fitted {kind} threshold: {_with_unit(threshold.value, unit)}{spread}."
    return words


def fit_figure(fit) -> go.Figure:
    """A fitted record against time: the recorded load and the load path the model saw (top),
    and for each observed variable the observations with the fitted trajectory (below)."""
    from plotly.subplots import make_subplots

    scenario, observations = fit.scenario, fit.observations
    record = observations.record
    columns = observations.columns
    fig = make_subplots(rows=1 + len(columns), cols=1, shared_xaxes=True, vertical_spacing=0.07)
    years = _record_years(fit, fit.trajectory.times)
    trophic = ""
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
        if add_tp_axis(fig, scenario, variable, axis="y" if row == 1 else f"y{row}"):
            trophic = _trophic_figure_words(scenario, variable)
    fig.update_yaxes(title_text=scenario.control.axis_title, row=1, col=1)
    time_unit = record.time_unit or "year"
    fig.update_xaxes(title_text=f"{record.time_name} ({time_unit})", row=1 + len(columns), col=1)
    fitted = ", ".join(f"{e.name} = {e.value:.3g}" for e in fit.parameters)
    fig.update_layout(
        title=f"{scenario.name}: model fitted to the record ({fitted})",
        **LAYOUT,
    )
    observed = ", ".join(column for _, column in columns)
    words = (
        f"The monitoring record {PurePath(record.source).name} from {record.times[0]:g} to "
        f"{record.times[-1]:g}: the recorded load ({scenario.control.unit}, top) and the "
        f"observed {observed} (points) against the fitted model (lines). "
        + _fitted_words(fit)
        + trophic
    )
    return _finish(fig, "fit", words, plot_height=240 + 200 * len(columns))


def add_threshold_intervals(fig: go.Figure, thresholds, unit: str = "") -> go.Figure:
    """Shade each threshold's 95% interval on a figure whose x-axis is the control, with a
    dotted line at the estimate. ``thresholds`` maps kind -> ThresholdEstimate (as in a Fit)."""
    for kind, threshold in thresholds.items():
        interval, method = threshold.best
        colour_ = THRESHOLD_LINE_COLOURS.get(kind, "#555555")
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
                    name=legend_name(
                        f"fitted {kind} threshold {threshold.value:.3g} {unit}{spread}"
                    ),
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
                marker=dict(symbol="circle-open", size=7, color=PALETTE[2]),
                customdata=times + observations.start,
                hovertemplate="%{customdata}: load %{x:.3g}, %{y:.3g}<extra>observed</extra>",
            )
        )
    add_threshold_intervals(fig, fit.thresholds, scenario.control.unit)
    words = (
        "The fitted lake's equilibria, with the observed (load, state) pairs and the fitted "
        "model's path through them. "
        + _diagram_words(scenario, fit.diagram, variable)
        + " "
        + _fitted_words(fit)
        + _trophic_figure_words(scenario, variable)
    )
    return _finish(fig, "fit diagram", words)


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
                line=dict(color=PALETTE[row % len(PALETTE)], width=2),
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
        **LAYOUT,
    )
    taus = ", ".join(f"{i.name} {i.kendall_tau:+.2f}" for i in signals.indicators)
    words = (
        f"{signals.variable}{unit} against {signals.time_name} with its Gaussian-kernel trend, "
        f"then each indicator over rolling windows of {signals.window_points} values. "
        f"Kendall tau of each against time: {taus}."
    )
    return _finish(fig, "indicators", words, plot_height=200 + 180 * len(shown))


# ---------------------------------------------------------------------------------------------
# Ensembles (planner.ensemble)

FAN_FILLS = ("rgba(0, 119, 187, 0.15)", "rgba(0, 119, 187, 0.35)")


def recovery_by_year_figure(ensemble) -> go.Figure:
    """Per schedule, the share of members whose target holds from each year on to the horizon
    (a step line), and at the horizon the probability of recovery with its 95% interval."""
    from planner.ensemble_report import chance_words

    scenario = ensemble.scenario
    horizon = scenario.simulation.horizon
    fig = go.Figure()
    for i, summary in enumerate(ensemble.schedules):
        index = _schedule_index(scenario, summary.name, i)
        feasible = summary.infeasible is None
        if summary.meets_target_by is not None:
            style = _schedule_trace_style(index, feasible=feasible)
            style["line"]["shape"] = "hv"
            fig.add_trace(
                go.Scatter(
                    x=summary.years,
                    y=summary.meets_target_by,
                    name=legend_name(summary.name),
                    legendgroup=summary.name,
                    hovertemplate=f"by year %{{x:g}}: %{{y:.1%}}<extra>{summary.name}</extra>",
                    **style,
                )
            )
        low, high = summary.interval
        fig.add_trace(
            go.Scatter(
                x=[horizon],
                y=[summary.p_recovered],
                mode="markers",
                marker=schedule_marker(index, size=11),
                error_y=dict(
                    type="data",
                    symmetric=False,
                    array=[high - summary.p_recovered],
                    arrayminus=[summary.p_recovered - low],
                    color=schedule_style(index).colour,
                ),
                name=legend_name(
                    f"{summary.name}: recovers {summary.p_recovered:.1%} ({low:.1%} to {high:.1%})"
                ),
                legendgroup=summary.name,
                showlegend=summary.meets_target_by is None,
                hovertemplate=f"recovers: {summary.p_recovered:.1%} "
                f"(95% interval {low:.1%} to {high:.1%})<extra>{summary.name}</extra>",
            )
        )
    fig.update_layout(
        title=f"{scenario.name}: chance of meeting the target by each year<br><sup>"
        f"{ensemble.members} members; at the horizon: chance of recovery with its 95% "
        "interval</sup>",
        xaxis_title="years from now",
        yaxis_title="share of members",
        **LAYOUT,
    )
    fig.update_yaxes(range=[-0.02, 1.02], tickformat=".0%")
    fig.update_layout(margin_t=TITLE_ROOM + 20)
    chances = " ".join(_as_sentence(chance_words(ensemble, s)) for s in ensemble.schedules)
    words = (
        f"Share of the {ensemble.members:,} members whose target holds from each year on, per "
        f"schedule, over the {significant(horizon)}-year horizon. {chances}"
    )
    return _finish(fig, "ensemble", words, plot_height=PLOT_HEIGHT + 20)


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
    target = scenario.target.threshold
    if target is not None:
        fig.add_hline(
            y=target,
            line=REFERENCE_LINE,
            annotation_text="target",
            annotation_position="top right",
        )
    variable = scenario.target.variable
    fig.update_layout(
        title=f"{name}: spread of {variable} over {fan.members} members",
        xaxis_title="years from now",
        yaxis_title=scenario.axis_title(variable),
        **LAYOUT,
    )
    unit = scenario.state_units.get(variable, "")
    end = f"year {significant(float(fan.times[-1]))}"
    words = (
        f"Spread of {variable} over {fan.members:,} members under {_quoted(name)}: the median "
        f"as a line, the middle half and 90% of members shaded. At {end} the median is "
        f"{_with_unit(float(level[0.5][-1]), unit)}, 90% of members between "
        f"{_with_unit(float(level[0.05][-1]), '')} and {_with_unit(float(level[0.95][-1]), unit)}"
    )
    words += "." if target is None else f"; the target is {_target_words(scenario)}."
    if add_tp_axis(fig, scenario, variable):
        words += _trophic_figure_words(scenario, variable)
    return _finish(fig, "ensemble spread", words)
