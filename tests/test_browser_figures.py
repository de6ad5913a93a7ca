"""Every figure of planner/figures.py drawn by a real headless Chromium, for a lake with twelve
schedules, seven of them with long names: the legend never overlaps an axis title, a tick label,
an annotation or the figure title, its entries never overlap each other, it stays inside the
figure, and axis titles clear the tick labels. Screenshots go to PLANNER_SCREENSHOTS (or a
temporary folder) for a person to look at."""

from __future__ import annotations

import plotly.graph_objects as go
import pytest

from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS
from tests.figure_cases import SCHEDULES, every_figure

pytestmark = BROWSER_MARKS

WIDTHS = (900, 420)  # px: a desktop column and a phone held upright

BOXES = """
() => {
  const box = (e) => {
    const r = e.getBoundingClientRect();
    return [r.left, r.top, r.right, r.bottom];
  };
  const shown = (e) => { const r = e.getBoundingClientRect(); return r.width > 0 && r.height > 0; };
  const named = (selector, name) => Array.from(document.querySelectorAll(selector))
    .filter(shown).map((e) => [name(e), box(e)]);
  const cls = (e) => e.getAttribute('class');
  return {
    legend: named('.legend .bg', () => 'legend'),
    entries: Array.from(document.querySelectorAll('.legend .traces')).map((t, i) =>
      Array.from(t.querySelectorAll('.legendtext, .legendsymbols')).filter(shown)
        .map((e) => ['entry ' + i + ' ' + cls(e), box(e)])),
    titles: named('text[class^="x"][class$="title"], text[class^="y"][class$="title"]', cls),
    figureTitle: named('.gtitle', () => 'figure title'),
    ticks: named('.xtick text, .ytick text', (e) => 'tick ' + e.textContent),
    notes: named('.annotation', (e) => 'annotation ' + e.textContent),
    svg: box(document.querySelector('.main-svg')),
  };
}
"""


def _overlap(a, b, slack: float = 0.5) -> bool:
    """Two boxes (left, top, right, bottom) share more than ``slack`` px each way."""
    return (
        a[0] < b[2] - slack and b[0] < a[2] - slack and a[1] < b[3] - slack and b[1] < a[3] - slack
    )


def collisions(found: dict) -> list[str]:
    """Every pair that must not overlap and does, named (the legend and everything outside the
    plot, its entries, axis titles and tick labels, annotations such as panel titles and the
    figure title); and a legend outside the figure."""
    legend = [box for _, box in found["legend"]]
    assert len(legend) == 1, "one legend per figure"
    legend = legend[0]
    bad = []
    for name, box in found["titles"] + found["figureTitle"] + found["ticks"] + found["notes"]:
        if _overlap(legend, box):
            bad.append(f"legend over {name}")
    for i, entry in enumerate(found["entries"]):
        for other in found["entries"][i + 1 :]:
            for name_a, box_a in entry:
                for name_b, box_b in other:
                    if _overlap(box_a, box_b):
                        bad.append(f"{name_a} over {name_b}")
    titles = found["titles"] + found["figureTitle"]
    for i, (name_a, box_a) in enumerate(titles):
        for name_b, box_b in titles[i + 1 :] + found["ticks"]:
            if _overlap(box_a, box_b):
                bad.append(f"{name_a} over {name_b}")
    notes = found["notes"]
    for i, (name, box) in enumerate(notes):
        for other, other_box in notes[i + 1 :] + found["figureTitle"]:
            if _overlap(box, other_box):
                bad.append(f"{name} over {other}")
    svg = found["svg"]
    if not (svg[0] - 1 <= legend[0] and legend[2] <= svg[2] + 1 and legend[3] <= svg[3] + 1):
        bad.append(f"legend {legend} outside the figure {svg}")
    return bad


@pytest.fixture(scope="module")
def drawn():
    return every_figure()


@pytest.fixture(scope="module")
def pages(tmp_path_factory, drawn):
    """Each figure as a page of its own beside one shared copy of plotly.js."""
    folder = tmp_path_factory.mktemp("figures")
    paths = {}
    for kind, figure in drawn.items():
        path = folder / f"{kind.replace(' ', '-')}.html"
        figure.write_html(path, include_plotlyjs="directory", config={"responsive": True})
        paths[kind] = path
    return paths


def _draw(page, path, width: int) -> dict:
    page.set_viewport_size({"width": width, "height": 900})
    page.goto(path.as_uri())
    page.wait_for_selector(".main-svg .legend", timeout=TIMEOUT_MS, state="attached")
    page.wait_for_timeout(200)  # plotly's second layout pass (automargin) settles
    return page.evaluate(BOXES)


@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize(
    "kind",
    [
        "diagram",
        "time series",
        "sweep",
        "side by side",
        "frontier",
        "search",
        "ensemble",
        "ensemble spread",
        "fit",
        "fit diagram",
        "indicators",
    ],
)
def test_legend_clears_axes_titles_and_other_entries(page, pages, shots, kind, width):
    """Bounding boxes read from the SVG that Chromium laid out: no legend over axis titles,
    tick labels, annotations or the title; no legend entry over another; no axis title over
    another or over tick labels."""
    found = _draw(page, pages[kind], width)
    page.screenshot(
        path=str(shots / f"figure-{kind.replace(' ', '-')}-{width}.png"), full_page=True
    )
    assert found["ticks"] and found["titles"], "the figure has axes to check against"
    assert collisions(found) == []


def test_the_diagram_lists_twelve_schedules_in_its_legend(page, pages):
    """The legend holds every schedule (long names wrapped), the equilibria and "now"."""
    _draw(page, pages["diagram"], WIDTHS[0])
    texts = page.locator(".legend .legendtext").all_text_contents()
    assert len(texts) == SCHEDULES + 3
    assert any(text.startswith("Schedule 12: cut the external load") for text in texts)


def test_the_check_finds_a_legend_placed_over_the_axis_title(page, pages, drawn):
    """The same check on the diagram with its legend put back where plotly's paper coordinates
    put it before (just under the plot): the legend then covers the tick labels or the axis
    title, and the check says so."""
    figure = go.Figure(drawn["diagram"])  # a copy
    figure.update_layout(
        legend=dict(xref="paper", yref="paper", x=0, y=-0.05, xanchor="left", yanchor="top")
    )
    path = pages["diagram"].with_name("diagram-old-legend.html")
    figure.write_html(path, include_plotlyjs="directory")
    found = _draw(page, path, WIDTHS[0])
    assert any(problem.startswith("legend over") for problem in collisions(found))
