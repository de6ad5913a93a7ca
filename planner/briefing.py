"""Self-contained HTML pages (figures, tables, caution) for the CLI and the web app exports."""

from __future__ import annotations

import html
from collections.abc import Sequence
from dataclasses import dataclass

import plotly.graph_objects as go

from planner.report import CAUTION

STYLE = """
body { font-family: Helvetica, Arial, sans-serif; margin: 2em auto; max-width: 1100px;
       color: #222; }
h1 { font-size: 1.5em; } h2 { font-size: 1.15em; margin-top: 1.6em; }
.caution { border-left: 4px solid #D55E00; background: #fff4ec; padding: 0.6em 1em; }
table { border-collapse: collapse; font-size: 0.9em; }
th, td { border: 1px solid #ccc; padding: 0.3em 0.6em; text-align: right; }
th:first-child, td:first-child { text-align: left; }
pre { background: #f6f6f6; padding: 0.8em; white-space: pre-wrap; }
"""


@dataclass(frozen=True)
class Section:
    """One block of a page: a heading and either a figure, a table, or preformatted text."""

    heading: str
    figure: go.Figure | None = None
    table: tuple[Sequence[str], Sequence[Sequence[object]]] | None = None
    text: str | None = None


def _table_html(header: Sequence[str], rows: Sequence[Sequence[object]]) -> str:
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in header)
    body = "".join(
        "<tr>" + "".join(f"<td>{html.escape(_cell(v))}</td>" for v in row) + "</tr>" for row in rows
    )
    return f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


def _cell(value: object) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:,.4g}" if abs(value) < 1e4 else f"{value:,.0f}"
    return str(value)


def page(title: str, sections: Sequence[Section], *, summary: str = "") -> str:
    """A complete HTML document; plotly.js is embedded once so the file works offline."""
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>{html.escape(title)}</title><style>{STYLE}</style></head><body>",
        f"<h1>{html.escape(title)}</h1>",
        f'<p class="caution">{html.escape(CAUTION)}</p>',
    ]
    if summary:
        parts.append(f"<p>{html.escape(summary)}</p>")
    first_figure = True
    for section in sections:
        parts.append(f"<h2>{html.escape(section.heading)}</h2>")
        if section.figure is not None:
            parts.append(
                section.figure.to_html(
                    full_html=False, include_plotlyjs="inline" if first_figure else False
                )
            )
            first_figure = False
        if section.table is not None:
            parts.append(_table_html(*section.table))
        if section.text is not None:
            parts.append(f"<pre>{html.escape(section.text)}</pre>")
    parts.append("</body></html>")
    return "\n".join(parts)


def comparison_briefing(comparison) -> str:
    """The one-page briefing: summary, diagram with trajectories, time series, table, caution."""
    from planner.equilibria import locate
    from planner.figures import hysteresis_figure, time_series_figure, trajectories_of
    from planner.report import comparison_rows, diagram_text

    scenario, diagram = comparison.scenario, comparison.diagram
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    header, rows = comparison_rows(comparison)
    currency = scenario.costs.currency if scenario.costs is not None else "no currency set"
    return page(
        f"Briefing: {scenario.name}",
        [
            Section(
                "Where the lake stands",
                text=diagram_text(scenario, diagram, standing, caution=False),
            ),
            Section(
                "Schedules on the equilibrium curve",
                figure=hysteresis_figure(
                    scenario, diagram, standing=standing, trajectories=trajectories_of(comparison)
                ),
            ),
            Section("Schedules over time", figure=time_series_figure(comparison)),
            Section(
                f"Comparison (costs in {currency})",
                table=(header, rows),
            ),
        ],
        summary=scenario.description,
    )
