"""Two scenarios side by side: the open scenario and a second file chosen from the listed folders
(the scenario picker's own listing: the browser sends a picker value, never a path), each with
its equilibrium diagram (``planner.figures.hysteresis_figure``, captioned by its description),
the lake's verdict and thresholds in words, and a compact table of its schedules.

Every number comes from the planner through ``webapp.compute``'s caches; the words and the
figure are the diagram view's, the table's rows the comparison table's. A second file that
does not load says why (file, field, reason) and leaves the open scenario as it is.
"""

from __future__ import annotations

from dash import Input, Output, dcc, html, no_update

from planner.errors import InputError
from planner.outcomes import Comparison
from planner.scenario import Scenario
from webapp import compute, files, ids
from webapp.settings import Settings
from webapp.views.captions import captioned_graph, with_captions
from webapp.views.common import placeholder_figure, working_comparison, working_scenario
from webapp.views.diagram import diagram_figure, summary
from webapp.views.scenario_panel import problem_list
from webapp.views.table import RECOVERED, TEXT_COLUMNS, cell_text, table_rows

# The table's columns kept side by side (matched by the start of the heading: units follow).
COMPACT_COLUMNS = ("Schedule", "Verdict", RECOVERED, "Meets target at", "Present value")
CHOOSE = "Choose a second scenario"
NOT_LOADED = "{name} was not loaded; the open scenario is unchanged."
OUTPUTS = 9  # title, figure, words, table for each side, and the message (captions added)


def layout(options: list[dict]) -> html.Div:
    """The chooser and two columns: the open scenario on the left, the chosen one on the right."""

    def column(title: str, graph: str, words: str, table: str, placeholder: str) -> html.Section:
        return html.Section(
            [
                html.H3(id=title, className="two-title"),
                captioned_graph(graph, placeholder),
                html.Div(id=words, className="two-words", **{"aria-live": "polite"}),
                html.Div(html.Table(id=table, className="comparison"), className="table-scroll"),
            ],
            className="two-column",
        )

    return html.Div(
        [
            html.Label(
                "Second scenario to set beside the open one",
                htmlFor=ids.TWO_CHOICE,
                className="field-label",
            ),
            dcc.Dropdown(id=ids.TWO_CHOICE, options=options, value=None, clearable=True),
            html.Div(id=ids.TWO_MESSAGE, className="message-area", role="alert"),
            html.Div(
                [
                    column(
                        ids.TWO_OPEN_TITLE,
                        ids.TWO_OPEN_GRAPH,
                        ids.TWO_OPEN_WORDS,
                        ids.TWO_OPEN_TABLE,
                        "Choose a scenario",
                    ),
                    column(
                        ids.TWO_OTHER_TITLE,
                        ids.TWO_OTHER_GRAPH,
                        ids.TWO_OTHER_WORDS,
                        ids.TWO_OTHER_TABLE,
                        CHOOSE,
                    ),
                ],
                className="two-scenarios",
            ),
        ]
    )


def compact_table(comparison: Comparison | None) -> list:
    """Schedule, verdict, recovered, when the target is met and the present value of each
    schedule: the comparison table's own rows (``webapp.views.table.table_rows``), fewer columns."""
    if comparison is None:
        return [html.Caption("No results yet.")]
    header, rows = table_rows(comparison)
    kept = [i for i, name in enumerate(header) if name.startswith(COMPACT_COLUMNS)]

    def cell(tag, i, value):
        name = header[i]
        return tag(value, className="text" if name in TEXT_COLUMNS else "number")

    head = html.Tr([cell(html.Th, i, header[i]) for i in kept])
    body = [html.Tr([cell(html.Td, i, cell_text(header[i], row[i])) for i in kept]) for row in rows]
    return [html.Thead(head), html.Tbody(body)]


def second_scenario(settings: Settings, choice: str) -> tuple[str, Scenario]:
    """The listed file ``choice`` names, validated: (file name, scenario); InputError naming the
    file, the field and the reason when it is not listed or not valid."""
    return files.read_choice(list(settings.folders), choice)


def side(scenario: Scenario, comparison: Comparison | None) -> tuple:
    """(figure, words, table) of one scenario: every schedule's path on its diagram."""
    return diagram_figure(scenario, comparison, None), summary(scenario), compact_table(comparison)


def empty_side(note: str) -> tuple:
    return placeholder_figure(note), "", []


def draw(working, _ready, choice, tab, *, settings: Settings) -> tuple:
    """-> (open title, figure, words, table, other title, figure, words, table, message)."""
    if tab != ids.TAB_TWO:
        return (no_update,) * OUTPUTS
    scenario = working_scenario(working)
    if scenario is None:
        left = ("", *empty_side("Choose a scenario"))
    else:
        left = (scenario.name, *side(scenario, working_comparison(working)))
    if not choice:
        return (*left, "", *empty_side(CHOOSE), "")
    try:
        name, other = second_scenario(settings, choice)
    except InputError as error:
        shown = str(choice).partition("/")[2] or "That file"
        message = problem_list(error, NOT_LOADED.format(name=shown))
        return (*left, "", *empty_side("Not loaded: see the message above"), message)
    right = (f"{other.name} ({name})", *side(other, compute.comparison_of(other)))
    return (*left, *right, "")


def register(callback, settings: Settings) -> None:
    def on_change(working, ready, choice, tab):
        return draw(working, ready, choice, tab, settings=settings)

    callback(
        Output(ids.TWO_OPEN_TITLE, "children"),
        Output(ids.TWO_OPEN_GRAPH, "figure"),
        Output(ids.figure_caption(ids.TWO_OPEN_GRAPH), "children"),
        Output(ids.TWO_OPEN_WORDS, "children"),
        Output(ids.TWO_OPEN_TABLE, "children"),
        Output(ids.TWO_OTHER_TITLE, "children"),
        Output(ids.TWO_OTHER_GRAPH, "figure"),
        Output(ids.figure_caption(ids.TWO_OTHER_GRAPH), "children"),
        Output(ids.TWO_OTHER_WORDS, "children"),
        Output(ids.TWO_OTHER_TABLE, "children"),
        Output(ids.TWO_MESSAGE, "children"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        Input(ids.TWO_CHOICE, "value"),
        Input(ids.TABS, "value"),
    )(with_captions(on_change, figures=(1, 5)))
