"""Lake P in every figure also read as lake TP (ug/L) with the OECD (1982) trophic classes, on
the Alder Mere demo (an invented lake, scenarios/alder-mere.toml): mean depth 3.1 m."""

from __future__ import annotations

import re
import tomllib

import pytest

import planner
from planner import figures
from planner.units import parse_quantity
from tests.figure_cases import ALDER, every_figure

LAKE_P_FIGURES = ("diagram", "time series", "sweep", "side by side", "ensemble spread", "fit")
LAKE_P_FIGURES += ("fit diagram",)


@pytest.fixture(scope="module")
def drawn():
    return every_figure()


def _second_axes(figure) -> list[dict]:
    layout = figure.layout.to_plotly_json()
    return [a for k, a in layout.items() if k.startswith("yaxis") and a.get("overlaying")]


def _ticks(axis: dict) -> list[tuple[float, float]]:
    return [
        (float(v), float(t.replace(",", "")))
        for v, t in zip(axis["tickvals"], axis["ticktext"], strict=True)
    ]


@pytest.mark.parametrize("kind", LAKE_P_FIGURES)
def test_second_axis_reads_the_store_over_the_mean_depth(drawn, kind):
    """Each tick label of the ug/L axis is its position (g P / m2) over the mean depth:
    C = store / z (a well-mixed water column, Vollenweider 1976; OECD 1982), checked by hand,
    1 g/m2 / 3.1 m = 1 g/m3 = 1000/3.1 ug/L, and by pint (the label to 2 significant figures)."""
    axes = _second_axes(drawn[kind])
    assert len(axes) == 1, kind
    ticks = _ticks(axes[0])
    assert len(ticks) >= 3
    depth = tomllib.loads(ALDER.read_text(encoding="utf-8"))["lake"]["mean_depth"]
    assert depth == "3.1 m"
    ureg_depth = parse_quantity(depth)
    for store, label in ticks:
        by_hand = store * 1000.0 / 3.1
        by_pint = (ureg_depth._REGISTRY.Quantity(store, "g/m**2") / ureg_depth).to("ug/L")
        assert label == pytest.approx(by_hand, rel=0.05, abs=1e-9)
        assert label == pytest.approx(by_pint.magnitude, rel=0.05, abs=1e-9)
        assert float(f"{by_hand:.2g}") == pytest.approx(label)


def _boundary_lines(figure) -> list[float]:
    return [s.y0 for s in figure.layout.shapes if s.type == "line" and s.line.color == "#9DBFAE"]


@pytest.mark.parametrize("kind", ("diagram", "time series", "sweep", "ensemble spread"))
def test_class_boundaries_at_10_35_and_100_ug_per_litre(drawn, kind):
    """The OECD (1982) fixed boundaries on annual mean TP, 10, 35 and 100 ug/L (Vollenweider &
    Kerekes 1982, Eutrophication of Waters: Monitoring, Assessment and Control, OECD, Paris),
    drawn at store = C z (z = 3.1 m) where they fall inside the drawn values, each labelled."""
    figure = drawn[kind]
    lines = _boundary_lines(figure)
    assert lines, kind
    expected = {c: c * 3.1 / 1000.0 for c in (10.0, 35.0, 100.0)}
    for y in lines:
        assert any(y == pytest.approx(v, rel=1e-9) for v in expected.values())
    notes = [a.text for a in figure.layout.annotations if "(OECD)" in (a.text or "")]
    assert len(notes) == len(lines)
    # the drawn values reach from clear to turbid water: the 35 and 100 ug/L lines are in range
    assert expected[35.0] in [pytest.approx(y) for y in lines]
    assert expected[100.0] in [pytest.approx(y) for y in lines]


@pytest.mark.parametrize("kind", LAKE_P_FIGURES)
def test_description_names_the_class_of_today_and_of_the_target(drawn, kind):
    """Today 0.71 g P / m2 over 3.1 m = 229 ug/L: hypertrophic (above 100 ug/L, OECD 1982); the
    target 0.3 g P / m2 = 96.8 ug/L: eutrophic (35-100 ug/L). Hand calculation. The fitted
    lake's figure starts from its fitted state, so its TP is read from the words and classed."""
    words = figures.description(drawn[kind])
    today = re.search(r"Today: TP ([\d.,]+) ug/L, (\w+)", words)
    assert today is not None
    if kind != "fit diagram":
        assert today[1] == "229"
    assert float(today[1].replace(",", "")) > 100.0
    assert today[2] == "hypertrophic"
    assert "the target: TP 96.8 ug/L, eutrophic" in words


def test_without_a_lake_block_no_second_axis_and_no_boundaries():
    """The same demo without [lake] is drawn as before: one y-axis, no class lines, no TP
    words."""
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    del data["lake"]
    scenario = planner.load(data)
    comparison = planner.compare(scenario)
    built = [
        figures.hysteresis_figure(scenario, comparison.diagram),
        figures.time_series_figure(comparison),
    ]
    for figure in built:
        assert _second_axes(figure) == []
        assert _boundary_lines(figure) == []
        assert "ug/L" not in figures.description(figure)
