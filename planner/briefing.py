"""Briefings for a board or the public: self-contained HTML pages, and PDF printed from them by
the system Chromium, for the CLI (``--html``, ``--pdf``) and the web app's exports.

A briefing is filled from one :class:`BriefingParts`: the scenario, the comparison of its
schedules (which gives the verdict and the recommendation at the top), the schedules to show,
and one :class:`BriefingPart` for each other result that was run (ensemble, search, frontier,
fit, sweep). A part is plain data (text, tables with units in their headings, plotly figures as
JSON) with :meth:`BriefingPart.to_json` and :meth:`BriefingPart.from_json`, so the web app can
keep it in the browser between a tab's run and the export. Every number and phrase comes from the
planner's results and its report wording (``planner.report``); the page carries the caution once.

The page embeds one copy of plotly.js in its head and draws every figure with it, so it works
offline (no CDN) and stays one library's size however many figures it holds.
"""

from __future__ import annotations

import html
import json
import re
import shutil
import subprocess
import tempfile
from collections.abc import Collection, Sequence
from dataclasses import dataclass, replace
from datetime import date
from pathlib import Path
from typing import Any

import plotly.graph_objects as go

from planner.errors import InputError, Problem
from planner.report import CAUTION

PART_KINDS = ("ensemble", "search", "frontier", "fit", "sweep")
"""The results a briefing can hold besides the comparison, in the order the page shows them."""

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_FLAGS = (
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-dev-shm-usage",
    "--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE localhost, EXCLUDE 127.0.0.1",
)
"""Chromium without a display and off the network (a briefing needs nothing from outside)."""
PDF_WINDOW = "--window-size=760,1100"  # figures are drawn this wide: an A4 page's text width
PDF_SECONDS = 120.0  # a print that takes longer is stopped (a wedged browser, not a big page)
PDF_MISSING = (
    "a PDF is printed by Chromium, which is not installed here: install Debian's 'chromium' "
    "package (apt-get install chromium), or write --html and print that page from a browser"
)

STYLE = """
body { font-family: "Helvetica Neue", Helvetica, Arial, sans-serif; font-size: 16px;
       line-height: 1.5; color: #1d1d1f; margin: 0; background: #fff; }
main { max-width: 60rem; margin: 0 auto; padding: 1.5rem 1.5rem 3rem; }
.masthead { border-bottom: 3px solid #0072B2; padding-bottom: 0.7rem; margin-bottom: 1.2rem; }
.eyebrow { text-transform: uppercase; letter-spacing: 0.08em; font-size: 0.8rem; color: #005a8c;
           margin: 0; font-weight: 700; }
h1 { font-size: 1.9rem; line-height: 1.2; margin: 0.2rem 0 0.4rem; }
.meta { color: #4a4a4a; margin: 0; font-size: 0.9rem; }
h2 { font-size: 1.35rem; margin: 2.2rem 0 0.6rem; padding-bottom: 0.2rem;
     border-bottom: 1px solid #d8d8d8; }
h3 { font-size: 1.1rem; margin: 1.4rem 0 0.4rem; }
.in-short { background: #f1f6fa; border: 1px solid #c9dcea; border-radius: 6px;
            padding: 0.9rem 1.3rem; }
.in-short h2 { margin-top: 0.2rem; border: none; }
.in-short ul { padding-left: 1.2rem; margin: 0.4rem 0; }
.in-short li { margin: 0.25rem 0; }
.recommendation { font-size: 1.08rem; margin: 0.2rem 0 0.6rem; }
.caution { border-left: 4px solid #D55E00; background: #fff4ec; padding: 0.6rem 1rem;
           font-size: 0.92rem; margin: 1.2rem 0; }
.description { color: #333; }
dl.thresholds dt { font-weight: 700; margin-top: 0.7rem; }
dl.thresholds dd { margin: 0.1rem 0 0 1.2rem; }
.note, .method { color: #4a4a4a; font-size: 0.9rem; }
ul.findings li { margin: 0.2rem 0; }
table { border-collapse: collapse; width: 100%; font-size: 0.88rem; margin: 0.6rem 0 1rem; }
caption { caption-side: bottom; text-align: left; color: #4a4a4a; font-size: 0.85rem;
          padding-top: 0.3rem; }
th, td { border-bottom: 1px solid #dcdcdc; padding: 0.35rem 0.5rem; vertical-align: top;
         text-align: left; }
th { background: #f3f3f3; font-weight: 700; border-bottom: 2px solid #b8b8b8; }
th.number { text-align: right; }
td.number { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tbody td:first-child { min-width: 8.5em; }
figure.chart { margin: 1rem 0 1.6rem; }
figcaption { color: #3a3a3a; font-size: 0.9rem; margin-top: 0.3rem; }
pre.text { background: #f6f6f6; padding: 0.8em; white-space: pre-wrap; font-size: 0.85rem; }
@page { size: A4; margin: 14mm 12mm; }
@media print {
  body { font-size: 10.5pt; }
  main { max-width: none; padding: 0; }
  .modebar-container { display: none !important; }
  h2, h3 { break-after: avoid; }
  figure.chart, table, .in-short, dl.thresholds { break-inside: avoid; }
}
"""


# ---------------------------------------------------------------------------------------------
# What a briefing holds


@dataclass(frozen=True)
class BriefingTable:
    """A table: headings (each with its unit), rows of plain values (numbers, text or None for
    "-"), and per row the scenario schedule it is about (None: not one of the scenario's), so
    the rows of hidden schedules can be left out."""

    header: tuple[str, ...]
    rows: tuple[tuple[Any, ...], ...]
    schedules: tuple[str | None, ...] = ()
    caption: str = ""


@dataclass(frozen=True)
class BriefingFigure:
    """A plotly figure as JSON (``go.Figure.to_plotly_json`` made plain), the sentence that says
    what it shows (its text alternative), and the one schedule it is about, if any. Traces of a
    schedule carry its name as their ``legendgroup``."""

    figure: dict
    caption: str
    schedule: str | None = None


@dataclass(frozen=True)
class ScheduleNote:
    """One sentence about one schedule (e.g. its chance of recovery), listed in the part's
    section while the schedule is shown. "In short" quotes the recommended schedule's note, or
    when none is recommended the shown one that ranks highest; ``quote`` False keeps a note
    (such as why a schedule breaks a limit) out of "In short"."""

    schedule: str
    words: str
    rank: float = 0.0
    quote: bool = True


@dataclass(frozen=True)
class BriefingPart:
    """One result for the briefing: its section heading, the sentence lifted into "In short",
    findings in plain words, tables, figures, a sentence per schedule, and how it was made."""

    kind: str
    heading: str
    headline: str
    findings: tuple[str, ...] = ()
    tables: tuple[BriefingTable, ...] = ()
    figures: tuple[BriefingFigure, ...] = ()
    notes: tuple[ScheduleNote, ...] = ()
    method: str = ""

    def __post_init__(self):
        if self.kind not in PART_KINDS:
            raise ValueError(f"unknown briefing part {self.kind!r}; one of {PART_KINDS}")

    def to_json(self) -> dict[str, Any]:
        """Plain JSON data (the web app keeps it in a browser store)."""
        return {
            "kind": self.kind,
            "heading": self.heading,
            "headline": self.headline,
            "findings": list(self.findings),
            "tables": [
                {
                    "header": list(t.header),
                    "rows": [list(row) for row in t.rows],
                    "schedules": list(t.schedules),
                    "caption": t.caption,
                }
                for t in self.tables
            ],
            "figures": [
                {"figure": f.figure, "caption": f.caption, "schedule": f.schedule}
                for f in self.figures
            ],
            "notes": [
                {"schedule": n.schedule, "words": n.words, "rank": n.rank, "quote": n.quote}
                for n in self.notes
            ],
            "method": self.method,
        }

    @classmethod
    def from_json(cls, data: dict[str, Any]) -> BriefingPart:
        return cls(
            kind=data["kind"],
            heading=data["heading"],
            headline=data["headline"],
            findings=tuple(data.get("findings", ())),
            tables=tuple(
                BriefingTable(
                    header=tuple(t["header"]),
                    rows=tuple(tuple(row) for row in t["rows"]),
                    schedules=tuple(t.get("schedules", ())),
                    caption=t.get("caption", ""),
                )
                for t in data.get("tables", ())
            ),
            figures=tuple(
                BriefingFigure(f["figure"], f["caption"], f.get("schedule"))
                for f in data.get("figures", ())
            ),
            notes=tuple(
                ScheduleNote(n["schedule"], n["words"], n.get("rank", 0.0), n.get("quote", True))
                for n in data.get("notes", ())
            ),
            method=data.get("method", ""),
        )


@dataclass(frozen=True)
class BriefingParts:
    """Everything one briefing shows, filled alike by every caller (the CLI commands, the web
    app's export). ``comparison`` gives the verdict and the recommendation; without it the page
    still says where the lake stands (from ``diagram``, else the comparison's). ``shown``: the
    schedules to show (None: all). ``parts``: the other results run, one per kind at most."""

    scenario: Any
    comparison: Any = None
    diagram: Any = None
    shown: tuple[str, ...] | None = None
    parts: tuple[BriefingPart, ...] = ()
    source: str = ""

    def __post_init__(self):
        kinds = [part.kind for part in self.parts]
        if len(set(kinds)) != len(kinds):
            raise ValueError(f"one briefing part of each kind, not {kinds}")

    def part(self, kind: str) -> BriefingPart | None:
        return next((p for p in self.parts if p.kind == kind), None)

    def with_part(self, part: BriefingPart) -> BriefingParts:
        """The same briefing with ``part`` (replacing one of the same kind)."""
        kept = tuple(p for p in self.parts if p.kind != part.kind)
        return replace(self, parts=(*kept, part))


def figure_data(figure: go.Figure) -> dict:
    """A figure as plain JSON data (lists, not numpy arrays)."""
    return json.loads(figure.to_json())


# ---------------------------------------------------------------------------------------------
# HTML pieces


def _e(text: object) -> str:
    return html.escape(str(text))


NUMBER_TEXT = re.compile(r"^-?[\d.,]+%?( to -?[\d.,]+%?)?$")  # "62.5%", "55.6% to 68.9%"


def _cell(value: object) -> tuple[str, bool]:
    """A cell's text and whether it is a number (right-aligned, digits aligned)."""
    if value is None or value == "":
        return "-", False
    if isinstance(value, str):
        return value, bool(NUMBER_TEXT.match(value))
    if isinstance(value, bool):
        return ("yes" if value else "no"), False
    if isinstance(value, int):
        return f"{value:,}", True
    if isinstance(value, float):
        from planner.units import significant

        return (f"{value:,.0f}" if abs(value) >= 1e4 else significant(value)), True
    return str(value), False


def _table_html(table: BriefingTable, hidden: Collection[str] = ()) -> str:
    rows = [
        row
        for i, row in enumerate(table.rows)
        if not (i < len(table.schedules) and table.schedules[i] in hidden)
    ]
    cells = [[_cell(value) for value in row] for row in rows]
    columns = list(zip(*cells, strict=True)) or [() for _ in table.header]
    numeric = [
        bool(column) and all(number or text == "-" for text, number in column) for column in columns
    ]
    head = "".join(
        f'<th scope="col" class="number">{_e(h)}</th>'
        if numeric[i]
        else f'<th scope="col">{_e(h)}</th>'
        for i, h in enumerate(table.header)
    )
    body = []
    for row in cells:
        tds = [
            f'<td class="number">{_e(text)}</td>' if number else f"<td>{_e(text)}</td>"
            for text, number in row
        ]
        body.append("<tr>" + "".join(tds) + "</tr>")
    caption = f"<caption>{_e(table.caption)}</caption>" if table.caption else ""
    return f"<table>{caption}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


def _without_schedules(figure: dict, hidden: Collection[str]) -> dict:
    """The figure without the traces of hidden schedules (their ``legendgroup``)."""
    if not hidden:
        return figure
    data = [t for t in figure.get("data", []) if t.get("legendgroup") not in hidden]
    return {**figure, "data": data}


class _Figures:
    """Numbers the figures of one page and turns each into a div drawn by the page's one copy
    of plotly.js (``include_plotlyjs=False``)."""

    def __init__(self, scenario_name: str = ""):
        self.count = 0
        self.prefix = f"{scenario_name}: " if scenario_name else ""

    def html(
        self,
        figure: go.Figure | dict,
        caption: str,
        *,
        title: bool = True,
        hidden: Collection[str] = (),
    ) -> str:
        """The figure's title moves into its caption (a page column is too narrow for long
        plotly titles, which do not wrap), without the scenario's name the page states;
        ``title`` False drops it (the caption says it all)."""
        self.count += 1
        figure = go.Figure(figure)  # a copy: the caller's figure keeps its title
        title_text = _plain(figure.layout.title.text or "")
        # The legend keeps the place its figure gave it (below the plot, clear of the axes).
        figure.update_layout(title_text=None, margin_t=30)
        if title_text and title:
            title = title_text
            title = title.removeprefix(self.prefix)
            caption = f"{title[:1].upper()}{title[1:]}. {caption}"
        # The accessible name is the figure's own description (what it shows, the key numbers
        # with units; planner.figures.description), the caption what the page adds.
        from planner.figures import description

        label = description(figure)
        if not label or any(name in label for name in hidden):
            label = caption  # a description naming a hidden schedule is not used, nor kept
            figure.update_layout(meta=None)
        div = figure.to_html(
            full_html=False,
            include_plotlyjs=False,
            div_id=f"figure-{self.count}",
            config={"displaylogo": False, "responsive": True},
        )
        return (
            f'<figure class="chart" role="group" aria-label="{_e(label)}">{div}'
            f"<figcaption>{_e(caption)}</figcaption></figure>"
        )


def _plain(markup: str) -> str:
    """Text of a plotly title: line breaks as dashes, other tags dropped."""
    text = re.sub(r"<br\s*/?>", " — ", markup)
    return " ".join(re.sub(r"<[^>]+>", "", text).split())


def _paragraphs(texts: Sequence[str], css: str = "") -> str:
    klass = f' class="{css}"' if css else ""
    return "".join(f"<p{klass}>{_e(t)}</p>" for t in texts if t)


def _list(items: Sequence[str], css: str = "") -> str:
    klass = f' class="{css}"' if css else ""
    return f"<ul{klass}>" + "".join(f"<li>{_e(t)}</li>" for t in items if t) + "</ul>"


def _document(title: str, eyebrow: str, body: Sequence[str], *, made: date, source: str) -> str:
    """The page around ``body``: head with the style and (when there are figures) the one copy
    of plotly.js, the masthead with the date and the planner's version, the caution once."""
    from planner import __version__

    body_html = "\n".join(body)
    script = ""
    if "Plotly.newPlot" in body_html:
        from plotly.offline import get_plotlyjs

        script = f'<script type="text/javascript">{get_plotlyjs()}</script>'
    where = f" · scenario file {_e(source)}" if source else ""
    return "\n".join(
        [
            "<!DOCTYPE html>",
            '<html lang="en"><head><meta charset="utf-8">',
            '<meta name="viewport" content="width=device-width, initial-scale=1">',
            f'<meta name="generator" content="planner {_e(__version__)}">',
            f"<title>{_e(title)}</title><style>{STYLE}</style>{script}</head>",
            "<body><main>",
            '<header class="masthead">',
            f'<p class="eyebrow">{_e(eyebrow)}</p><h1>{_e(title)}</h1>',
            f'<p class="meta">Prepared <time datetime="{made.isoformat()}">{made.isoformat()}'
            f"</time> with planner {_e(__version__)}{where}</p>",
            "</header>",
            body_html,
            "</main></body></html>",
        ]
    )


def _caution() -> str:
    return f'<p class="caution" role="note">{_e(CAUTION)}</p>'


# ---------------------------------------------------------------------------------------------
# The briefing


def _hidden(parts: BriefingParts) -> set[str]:
    if parts.shown is None:
        return set()
    return {s.name for s in parts.scenario.schedules} - set(parts.shown)


def _sentence(text: str) -> str:
    """A capital first letter and a full stop; the rest as written (units keep their case)."""
    text = text.strip()
    if not text:
        return text
    text = text[:1].upper() + text[1:]
    return text if text.endswith((".", "!", "?")) else text + "."


def _quoted_note(part: BriefingPart, schedule: str | None, hidden: Collection[str]) -> str:
    """The part's sentence about ``schedule`` (the recommended one), else about the shown
    schedule that ranks highest, else its headline."""
    notes = [n for n in part.notes if n.quote and n.schedule not in hidden]
    chosen = next((n for n in notes if n.schedule == schedule), None)
    if chosen is None and notes:
        chosen = max(notes, key=lambda n: n.rank)
    return part.headline if chosen is None else chosen.words


def _in_short(parts: BriefingParts, diagram, standing, hidden: set[str]) -> str:
    from planner.report import lake_verdict_words, recommendation_words, recommended, standing_words

    scenario, comparison = parts.scenario, parts.comparison
    lead = ""
    best = None
    if comparison is not None:
        names = None if parts.shown is None else set(parts.shown)
        words = recommendation_words(comparison, names)
        lead = f'<p class="recommendation"><strong>{_e(words)}</strong></p>'
        best = recommended(comparison, names)
    items = [
        f"The lake is {lake_verdict_words(scenario, diagram)}.",
        standing_words(scenario, standing),
    ]
    for kind in PART_KINDS:
        part = parts.part(kind)
        if part is not None:
            items.append(_sentence(_quoted_note(part, None if best is None else best.name, hidden)))
    return (
        '<section class="in-short" aria-labelledby="in-short"><h2 id="in-short">In short</h2>'
        f"{lead}{_list(items)}</section>"
    )


def _thresholds(scenario, diagram, standing) -> str:
    """The thresholds in words with units, what each means, and (with a [lake] block) the load
    in kg or t per year with lake TP and its trophic class; then the lake's other lines."""
    from planner.report import (
        lake_lines,
        threshold_lake_words,
        threshold_meaning,
        threshold_words,
    )

    unit = scenario.control.unit
    entries = []
    lake_said = set()
    for kind, threshold in (("recovery", diagram.recovery), ("collapse", diagram.collapse)):
        lake = threshold_lake_words(scenario, diagram, kind)
        lake_said.add(lake)
        entries.append(
            f"<dt>{_e(kind.capitalize())} threshold: {_e(threshold_words(threshold, unit))}</dt>"
            f"<dd>{_e(_sentence(threshold_meaning(scenario, kind)))}</dd>"
            + (f"<dd>{_e(_sentence(lake))}</dd>" if lake else "")
        )
    out = [
        "<section><h2>The lake and its thresholds</h2>",
        f'<dl class="thresholds">{"".join(entries)}</dl>',
    ]
    lines = [line.strip() for line in lake_lines(scenario, diagram, standing)]
    lines = [line for line in lines if line and line not in lake_said]
    if lines:
        title, *rest = lines
        out.append(f"<h3>{_e(title)}</h3>{_list([_sentence(line) for line in rest], 'note')}")
    out.append("</section>")
    return "".join(out)


def _comparison_table(comparison, hidden: Collection[str]) -> tuple[BriefingTable, list[str]]:
    """The comparison for a board: the planner's columns with units in their headings (and lake
    TP at the horizon with its trophic class when the scenario has a [lake] block); why a
    schedule breaks a limit goes below the table."""
    from planner.report import comparison_rows, comparison_units, with_units

    scenario = comparison.scenario
    header, rows = comparison_rows(comparison)
    keep = [h for h in header if h not in ("Why infeasible", "Relapsed")]
    if any(o.relapsed for o in comparison.outcomes):
        keep.insert(keep.index("Feasible") + 1, "Relapsed")
    index = [header.index(h) for h in keep]
    out_header = list(with_units(keep, comparison_units(scenario)))
    out_rows = [[row[i] for i in index] for row in rows]
    conversion = None
    if getattr(scenario, "lake", None) is not None:
        from planner.units import TP_UNIT, scenario_lake_conversion

        conversion = scenario_lake_conversion(scenario)
        if conversion is not None and conversion.tp_per_state is not None:
            from planner.report import outcome_lake_json

            out_header += [f"Lake TP at the horizon ({TP_UNIT})", "Trophic class (OECD 1982)"]
            for row, outcome in zip(out_rows, comparison.outcomes, strict=True):
                tp = outcome_lake_json(scenario, conversion, outcome)["at_horizon"]
                row += [tp.get("tp_ug_l"), tp.get("oecd_class")]
    names = tuple(o.name for o in comparison.outcomes)
    notes = [
        f"{o.name} breaks a limit: {o.infeasible.message}"
        for o in comparison.outcomes
        if o.infeasible is not None and o.name not in hidden
    ]
    horizon = scenario.simulation.horizon
    table = BriefingTable(
        tuple(out_header),
        tuple(tuple(r) for r in out_rows),
        names,
        caption=f"Years from now; '-': the target is not met for good within the {horizon:g}-year "
        "horizon. Present value: costs discounted to today.",
    )
    return table, notes


def _comparison_section(parts: BriefingParts, standing, figures: _Figures, hidden) -> str:
    from planner.figures import hysteresis_figure, time_series_figure, trajectories_of
    from planner.report import stable_states_words

    comparison, scenario = parts.comparison, parts.scenario
    diagram = comparison.diagram
    label = scenario.control.label or scenario.control.parameter
    variable = scenario.target.variable
    shown = None if parts.shown is None else list(parts.shown)
    curve = hysteresis_figure(
        scenario,
        diagram,
        standing=standing,
        trajectories=trajectories_of(comparison),
        shown=shown,
    )
    curve = _without_schedules(figure_data(curve), hidden)
    table, notes = _comparison_table(comparison, hidden)
    return "".join(
        [
            "<section><h2>The schedules compared</h2>",
            _table_html(table, hidden),
            _list(notes, "note") if notes else "",
            figures.html(
                curve,
                f"Equilibria of {variable} against {label}: stable states solid, unstable ones "
                f"dashed (the boundary between the basins); the shaded band is where "
                f"{stable_states_words(diagram)} coexist; each schedule shown is drawn as its "
                "path from today's state (the star).",
                title=False,
                hidden=hidden,
            ),
            figures.html(
                time_series_figure(comparison, names=shown),
                f"Top: {label} under each schedule shown, with the recovery and collapse "
                f"thresholds. Bottom: {variable} over the same years, with the water-quality "
                "target. A dotted line marks a schedule that breaks a limit.",
                title=False,
                hidden=hidden,
            ),
            "</section>",
        ]
    )


def _part_section(part: BriefingPart, figures: _Figures, hidden: Collection[str]) -> str:
    notes = [_sentence(n.words) for n in part.notes if n.schedule not in hidden]
    out = [
        f"<section><h2>{_e(part.heading)}</h2>",
        _list([*part.findings, *notes], "findings"),
    ]
    for table in part.tables:
        out.append(_table_html(table, hidden))
    for figure in part.figures:
        if figure.schedule in hidden:
            continue
        out.append(
            figures.html(_without_schedules(figure.figure, hidden), figure.caption, hidden=hidden)
        )
    if part.method:
        out.append(_paragraphs([part.method], "method"))
    out.append("</section>")
    return "".join(out)


def briefing_html(parts: BriefingParts, *, made: date | None = None) -> str:
    """The briefing page: "In short" (the recommendation, the lake's verdict and where it
    stands, a line from each result run), the caution, the thresholds in words with units, the
    schedules compared (table and figures), then each result's section. Only the schedules in
    ``parts.shown`` appear. ``made``: the date in the header (default: today)."""
    from planner.equilibria import locate

    scenario = parts.scenario
    diagram = parts.comparison.diagram if parts.comparison is not None else parts.diagram
    if diagram is None:
        from planner.equilibria import diagram_for

        diagram = diagram_for(scenario)
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    hidden = _hidden(parts)
    figures = _Figures(scenario.name)
    body = [_in_short(parts, diagram, standing, hidden), _caution()]
    if scenario.description:
        body.append(_paragraphs([scenario.description], "description"))
    body.append(_thresholds(scenario, diagram, standing))
    if parts.comparison is not None:
        body.append(_comparison_section(parts, standing, figures, hidden))
    for kind in PART_KINDS:
        part = parts.part(kind)
        if part is not None:
            body.append(_part_section(part, figures, hidden))
    return _document(
        scenario.name, "Briefing", body, made=made or date.today(), source=parts.source
    )


# ---------------------------------------------------------------------------------------------
# Plain figure pages (a figure exported from the app, early-warning indicators)


@dataclass(frozen=True)
class Section:
    """One block of a plain page: a heading and a figure, a table and/or text."""

    heading: str
    figure: go.Figure | None = None
    table: tuple[Sequence[str], Sequence[Sequence[object]]] | None = None
    text: str | None = None


def page(
    title: str, sections: Sequence[Section], *, summary: str = "", made: date | None = None
) -> str:
    """A complete page with the same header, caution and single plotly.js as a briefing."""
    figures = _Figures()
    body = [_caution(), _paragraphs([summary], "description")]
    for section in sections:
        body.append(f"<section><h2>{_e(section.heading)}</h2>")
        if section.figure is not None:
            body.append(figures.html(section.figure, section.heading))
        if section.table is not None:
            header, rows = section.table
            body.append(_table_html(BriefingTable(tuple(header), tuple(map(tuple, rows)))))
        if section.text is not None:
            body.append(f'<pre class="text">{_e(section.text)}</pre>')
        body.append("</section>")
    return _document(title, "Planner results", body, made=made or date.today(), source="")


# ---------------------------------------------------------------------------------------------
# Briefings of each command's result (the CLI's --html and --pdf)


def comparison_briefing(comparison, *, source: str = "") -> str:
    """The briefing of a comparison: every schedule."""
    return briefing_html(BriefingParts(comparison.scenario, comparison, source=source))


def result_briefing(scenario, part: BriefingPart, source: str = "", diagram=None) -> str:
    """The briefing of one result, with the comparison of the scenario's schedules (run here:
    the verdict and the recommendation come from it)."""
    from planner.outcomes import compare

    comparison = compare(scenario, diagram=diagram)
    return briefing_html(BriefingParts(scenario, comparison, parts=(part,), source=source))


def diagram_briefing(scenario, diagram, standing=None, *, source: str = "") -> str:
    """The lake's verdict, where it stands and its thresholds, with the equilibrium curve."""
    from planner.equilibria import locate
    from planner.figures import hysteresis_figure

    if standing is None:
        standing = locate(diagram, scenario.initial_state, scenario.current_control)
    figures = _Figures(scenario.name)
    body = [
        _in_short(BriefingParts(scenario, diagram=diagram), diagram, standing, set()),
        _caution(),
        _paragraphs([scenario.description], "description"),
        _thresholds(scenario, diagram, standing),
        "<section><h2>Equilibria and thresholds</h2>",
        figures.html(
            hysteresis_figure(scenario, diagram, standing=standing),
            f"Equilibria of {scenario.target.variable} against "
            f"{scenario.control.label or scenario.control.parameter}: stable states solid, "
            "unstable ones dashed; today's state is the star.",
        ),
        "</section>",
    ]
    return _document(scenario.name, "Briefing", body, made=date.today(), source=source)


def frontier_briefing(scenario, frontier, *, source: str = "") -> str:
    return result_briefing(scenario, frontier_part(scenario, frontier), source)


def search_briefing(scenario, result, frontier=None, *, source: str = "") -> str:
    """The search's briefing, with the frontier's part when one was drawn."""
    from planner.outcomes import compare

    parts = (search_part(scenario, result),)
    if frontier is not None:
        parts += (frontier_part(scenario, frontier),)
    briefing = BriefingParts(scenario, compare(scenario), parts=parts, source=source)
    return briefing_html(briefing)


def fit_briefing(fit, *, source: str = "") -> str:
    """The fitted lake's briefing: its schedules compared under the fitted model."""
    return result_briefing(fit.fitted_scenario, fit_part(fit), source, diagram=fit.diagram)


def sweep_briefing(scenario, sweep, diagram=None, *, source: str = "") -> str:
    if diagram is None:
        from planner.equilibria import diagram_for

        diagram = diagram_for(scenario)
    return result_briefing(scenario, sweep_part(scenario, sweep, diagram), source, diagram)


# ---------------------------------------------------------------------------------------------
# Parts of each result


def _unit(unit: str) -> str:
    return f" ({unit})" if unit else ""


def search_part(scenario, result) -> BriefingPart:
    """The cheapest recovering schedule of each family and the money-against-time figure."""
    from planner.figures import pareto_figure
    from planner.search import search_words

    currency = result.currency or "no currency set"
    unit = _unit(result.unit)
    rows, names = [], []
    for family in result.families:
        c = family.cheapest
        names.append(None)
        if c is None:
            rows.append((family.kind, None, None, None, None, "none within the limits"))
        else:
            rows.append(
                (family.kind, c.floor, c.hold, c.present_value, c.meets_target_at, c.schedule.name)
            )
    table = BriefingTable(
        (
            "Family",
            f"Floor{unit}",
            "Hold at the floor (yr)",
            f"Present value ({currency})",
            "Meets target from (yr)",
            "Schedule",
        ),
        tuple(rows),
        tuple(names),
        caption="The cheapest schedule of each family that recovers within the limits"
        + ("" if result.by_year is None else f" and meets the target by year {result.by_year:g}")
        + ".",
    )
    figures = [
        BriefingFigure(
            figure_data(pareto_figure(scenario, result)),
            "Present value against the year the target is met for good, for every schedule "
            "the search tried that recovers; the line joins those that nothing beats on both "
            "money and time; the star is the cheapest.",
        )
    ]
    from planner.units import significant

    findings = [
        _sentence(search_words(result)),
        f"Every schedule tried cuts the load to a floor below the recovery threshold "
        f"({significant(result.recovery_threshold)}{' ' + result.unit if result.unit else ''}), "
        f"holds it, then lets it rise to {significant(result.relax_to)}"
        f"{' ' + result.unit if result.unit else ''}.",
    ]
    return BriefingPart(
        kind="search",
        heading="The cheapest option",
        headline=search_words(result),
        findings=tuple(findings),
        tables=(table,),
        figures=tuple(figures),
    )


def _frontier_figure(scenario, frontier) -> BriefingFigure:
    from planner.figures import frontier_figure

    figure = figure_data(frontier_figure(scenario, frontier))
    own = {o.name for o in frontier.own}
    for trace in figure.get("data", []):
        text = trace.get("text")
        if isinstance(text, list) and len(text) == 1 and text[0] in own:
            trace["legendgroup"] = text[0]  # so a hidden schedule's mark goes with it
    return BriefingFigure(
        figure,
        "Least hold at the floor (years) against how far the load goes below the recovery "
        "threshold: holds on or above the line recover once the load relaxes; the scenario's "
        "own overshoot schedules are marked (filled: recovers).",
    )


FRONTIER_HEADINGS = {
    "least hold_years": "Least hold at the floor (yr)",
    "time_below_threshold (yr)": "Time below the recovery threshold (yr)",
    "ramp down (yr)": "Ramp down (yr)",
    "ramp up (yr)": "Ramp up (yr)",
    "achievable": "Achievable",
}
"""The frontier table's headings for a board (the CLI's name the options and JSON keys)."""


def frontier_part(scenario, frontier) -> BriefingPart:
    """How deep and how long the load must go below the recovery threshold, for each depth."""
    from planner.frontier import frontier_rows, ramp_words
    from planner.units import significant

    unit = frontier.unit
    header, rows = frontier_rows(frontier)
    header = tuple(
        FRONTIER_HEADINGS.get(h, h[:1].upper() + h[1:].replace("depth", "depth below threshold", 1))
        for h in header
    )
    found = [p for p in frontier.points if p.hold_years is not None and p.achievable]
    with_unit = lambda v: f"{significant(v)} {unit}".strip()  # noqa: E731
    findings = [
        f"Recovery threshold {with_unit(frontier.recovery_threshold)}; after the hold the "
        f"load relaxes to {with_unit(frontier.relax_to)}; {ramp_words(frontier.family, unit)}."
    ]
    if found:
        shallow, deep = found[0], found[-1]
        headline = (
            f"Recovery frontier: a cut of {with_unit(shallow.depth)} below the recovery "
            f"threshold recovers if held at least {significant(shallow.hold_years)} yr"
        )
        if deep is not shallow:
            headline += (
                f"; the deepest achievable cut tried, {with_unit(deep.depth)} below, needs "
                f"{significant(deep.hold_years)} yr"
            )
        findings.append(_sentence(headline))
    else:
        headline = "Recovery frontier: no achievable cut of this family recovers within the horizon"
        findings.append(_sentence(headline))
    tables = [
        BriefingTable(
            header,
            tuple(tuple(r) for r in rows),
            caption="'-': no hold that ends within the horizon recovers at that depth.",
        )
    ]
    if frontier.own:
        tables.append(
            BriefingTable(
                (
                    "Schedule",
                    f"Depth below threshold{_unit(unit)}",
                    "Hold at the floor (yr)",
                    "Time below the recovery threshold (yr)",
                    "Verdict",
                ),
                tuple(
                    (o.name, o.depth, o.hold_years, o.time_below_threshold, o.verdict)
                    for o in frontier.own
                ),
                tuple(o.name for o in frontier.own),
                caption="The scenario's own overshoot schedules on the same axes.",
            )
        )
    return BriefingPart(
        kind="frontier",
        heading="How deep and how long",
        headline=headline,
        findings=tuple(findings),
        tables=tuple(tables),
        figures=(_frontier_figure(scenario, frontier),),
        method=f"Each least hold found by bisection on the recovery verdict ({frontier.verdicts} "
        "runs).",
    )


def fit_part(fit) -> BriefingPart:
    """The model fitted to monitoring data: the headline (or the warning that the record does
    not pin the parameters down), estimates and thresholds with their 95% intervals."""
    from planner.calibration import CONFIDENCE, fit_headline
    from planner.figures import fit_figure, fit_hysteresis_figure
    from planner.report import NOT_REACHABLE

    scenario = fit.scenario
    record = fit.observations.record
    unit = scenario.control.unit
    level = f"{CONFIDENCE:.0%}"
    units = {p.name: "" for p in fit.parameters}
    units[scenario.control.parameter] = unit
    for variable, estimate in zip(scenario.spec.variables, fit.initial_state, strict=True):
        units[estimate.name] = scenario.state_units.get(variable, "")
    estimates = []
    for estimate in (*fit.parameters, *fit.initial_state):
        best, method = estimate.best
        estimates.append(
            (
                estimate.name,
                units.get(estimate.name) or None,
                estimate.value,
                None if best is None else best[0],
                None if best is None else best[1],
                method,
            )
        )
    thresholds = []
    for kind, threshold in fit.thresholds.items():
        best, method = threshold.best
        if threshold.unreachable is not None:
            lost = "undesired" if kind == "recovery" else "desired"
            thresholds.append(
                (f"{kind.capitalize()} threshold", NOT_REACHABLE[lost], None, None, method)
            )
        else:
            thresholds.append(
                (
                    f"{kind.capitalize()} threshold",
                    threshold.value,
                    None if best is None else best[0],
                    None if best is None else best[1],
                    method,
                )
            )
    findings = [fit_headline(fit)]
    if not fit.identifiable:
        findings += [_sentence(f"Why: {reason}") for reason in fit.unidentified]
    findings.append(
        f"Fitted to {record.source}: {record.times[0]:g} to {record.times[-1]:g}, "
        f"{fit.residuals.size} observed values."
    )
    findings += [_sentence(f"Warning: {w}") for w in fit.warnings if w not in fit.unidentified]
    return BriefingPart(
        kind="fit",
        heading="Fit to monitoring data",
        headline=f"Monitoring record {record.source}: {fit_headline(fit)}",
        findings=tuple(findings),
        tables=(
            BriefingTable(
                (
                    "Quantity",
                    "Unit",
                    "Estimate",
                    f"{level} interval: low",
                    f"{level} interval: high",
                    "Method",
                ),
                tuple(estimates),
                caption="Fitted parameters and starting state; a parameter without a unit here "
                "is in the model's own units (see the scenario file).",
            ),
            BriefingTable(
                (
                    "Threshold",
                    f"Fitted value ({unit})",
                    f"{level} interval: low ({unit})",
                    f"{level} interval: high ({unit})",
                    "Method",
                ),
                tuple(thresholds),
            ),
        ),
        figures=(
            BriefingFigure(
                figure_data(fit_figure(fit)),
                "The monitoring record (points) and the fitted model (lines) over the record's "
                "years, with the load path.",
            ),
            BriefingFigure(
                figure_data(fit_hysteresis_figure(fit)),
                "Equilibria of the fitted lake, with the fitted thresholds and their intervals "
                "as bands.",
            ),
        ),
        method=f"Least-squares fit; residual standard deviation {fit.sigma:.3g} "
        f"({fit.dof} degrees of freedom).",
    )


def sweep_part(scenario, sweep, diagram=None) -> BriefingPart:
    """The loop a slowly dialled control traces: where the lake jumps, up and down."""
    from planner.figures import sweep_figure
    from planner.report import sweep_text

    if diagram is None:
        from planner.equilibria import diagram_for

        diagram = diagram_for(scenario)
    lines = [line.strip() for line in sweep_text(scenario, sweep, caution=False).splitlines()]
    findings = [_sentence(line) for line in lines[1:] if line]
    return BriefingPart(
        kind="sweep",
        heading="A slow sweep of the load",
        headline="Slow sweep: " + " ".join(findings[1:] or findings[:1]),
        findings=tuple(findings),
        figures=(
            BriefingFigure(
                figure_data(sweep_figure(scenario, sweep, diagram)),
                "The state reached after settling at each step as the control is dialled up "
                "across its range and back down, over the equilibrium curve; the jumps are the "
                "thresholds.",
            ),
        ),
    )


# ---------------------------------------------------------------------------------------------
# PDF


def chromium() -> Path | None:
    """The system Chromium, or None when it is not installed."""
    if CHROMIUM.exists():
        return CHROMIUM
    found = shutil.which("chromium") or shutil.which("chromium-browser")
    return None if found is None else Path(found)


def pdf_printer_missing() -> str | None:
    """Why no PDF can be printed here (no Chromium), or None: checked before any work."""
    return PDF_MISSING if chromium() is None else None


class PdfError(RuntimeError):
    """Chromium ran but made no PDF (a bug or a broken browser, not the user's input)."""


def print_pdf(page_html: str) -> bytes:
    """The page printed to PDF (A4) by the system Chromium, without header or footer lines.
    InputError (field "pdf") when Chromium is missing; PdfError when it fails."""
    browser = chromium()
    if browser is None:
        raise InputError([Problem("pdf", "pdf", PDF_MISSING)])
    with tempfile.TemporaryDirectory(prefix="planner-pdf-") as folder:
        source = Path(folder) / "briefing.html"
        target = Path(folder) / "briefing.pdf"
        source.write_text(page_html, encoding="utf-8")
        command = [
            str(browser),
            *CHROMIUM_FLAGS,
            f"--user-data-dir={Path(folder) / 'profile'}",
            PDF_WINDOW,
            "--no-pdf-header-footer",
            f"--print-to-pdf={target}",
            source.as_uri(),
        ]
        try:
            done = subprocess.run(
                command, capture_output=True, text=True, timeout=PDF_SECONDS, check=False
            )
        except subprocess.TimeoutExpired:
            raise PdfError(f"Chromium did not finish printing within {PDF_SECONDS:g} s") from None
        if not target.exists() or target.stat().st_size == 0:
            tail = "\n".join(done.stderr.strip().splitlines()[-5:])
            raise PdfError(f"Chromium made no PDF (exit code {done.returncode}): {tail}")
        return target.read_bytes()
