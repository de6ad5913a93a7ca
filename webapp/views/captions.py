"""Text alternatives of the result figures: each result graph sits in an ``html.Figure`` whose
caption says in words what the figure shows (``planner.figures.description``: the key numbers
with their units), and the callback that draws the figure also writes the caption."""

from __future__ import annotations

import functools
from collections.abc import Callable, Sequence

import plotly.graph_objects as go
from dash import dcc, html, no_update

from planner.figures import description
from webapp import ids
from webapp.views.common import placeholder_figure


def caption(figure: go.Figure | dict | None) -> str:
    """The words under ``figure``: its description, else (a placeholder, a stopped job) the
    note it carries, else ""."""
    if figure is None:
        return ""
    words = description(figure)
    if words:
        return words
    layout = (
        figure.get("layout", {}) if isinstance(figure, dict) else figure.layout.to_plotly_json()
    )
    notes = [note.get("text", "") for note in layout.get("annotations", ()) or ()]
    return " ".join(note for note in notes if note)


def captioned_graph(graph_id: str, placeholder: str) -> html.Figure:
    """A result graph with its caption, grouped so a screen reader names the graph by it."""
    caption_id = ids.figure_caption(graph_id)
    figure = placeholder_figure(placeholder)
    return html.Figure(
        [
            dcc.Graph(id=graph_id, figure=figure, config={"displaylogo": False}),
            html.Figcaption(caption(figure), id=caption_id, className="figure-caption"),
        ],
        role="group",
        className="result-figure",
        **{"aria-labelledby": caption_id},
    )


def with_captions(function: Callable, figures: Sequence[int] = (0,)) -> Callable:
    """``function`` (a callback or a job returning a figure or a tuple of outputs) with each
    figure at the positions ``figures`` followed by its caption; a figure left as it was
    (``no_update``) leaves its caption as it was too."""

    @functools.wraps(function)
    def captioned(*args, **kwargs):
        result = function(*args, **kwargs)
        outputs = list(result) if isinstance(result, (tuple, list)) else [result]
        for position in sorted(figures, reverse=True):
            figure = outputs[position]
            words = no_update if figure is no_update else caption(figure)
            outputs.insert(position + 1, words)
        return tuple(outputs)

    return captioned
