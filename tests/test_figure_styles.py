"""Figure styles and text alternatives (planner/figures.py): twelve and more schedules stay
distinct, none looks like the equilibrium curve or the "now" marker, every schedule colour keeps
the WCAG 2.1 non-text contrast on white and on the bistable band and stays apart from the others
under simulated colour-vision deficiency, and every figure carries a plain-language description
whose thresholds agree with an independent computation."""

from __future__ import annotations

import itertools
import re

import numpy as np
import plotly.graph_objects as go
import pytest
from scipy.optimize import brentq

from planner import figures
from planner.figures import (
    DISTINCT_SCHEDULES,
    DISTINCT_STYLES,
    FOLD_SYMBOLS,
    NOW_COLOUR,
    NOW_MARKER,
    SCHEDULE_COLOURS,
    STABLE_COLOUR,
    STABLE_LINE,
    UNSTABLE_COLOUR,
    UNSTABLE_LINE,
    WINDOW_FILL,
    description,
    schedule_style,
)
from tests.figure_cases import SCHEDULES, every_figure, results

# ---------------------------------------------------------------------------------------------
# Colour arithmetic from published definitions


def _rgb(colour: str) -> np.ndarray:
    """'#RRGGBB' or 'rgba(r, g, b, a)' -> (r, g, b, alpha), channels in 0..1."""
    if colour.startswith("#"):
        return np.array([int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)] + [1.0])
    r, g, b, a = (float(v) for v in re.findall(r"[\d.]+", colour))
    return np.array([r / 255, g / 255, b / 255, a])


def _over_white(colour: str) -> np.ndarray:
    """A translucent fill as it shows on the white page (simple alpha compositing)."""
    r, g, b, a = _rgb(colour)
    return a * np.array([r, g, b]) + (1 - a) * np.ones(3)


def _wcag_luminance(rgb: np.ndarray) -> float:
    """Relative luminance as WCAG 2.1 defines it (W3C 2018, Web Content Accessibility
    Guidelines 2.1, definition of "relative luminance"): each sRGB channel linearised with the
    0.03928 knee, then 0.2126 R + 0.7152 G + 0.0722 B."""
    linear = np.where(rgb <= 0.03928, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)
    return float(0.2126 * linear[0] + 0.7152 * linear[1] + 0.0722 * linear[2])


def _contrast(a: np.ndarray, b: np.ndarray) -> float:
    """WCAG 2.1 contrast ratio (L1 + 0.05) / (L2 + 0.05), L1 the lighter."""
    high, low = sorted((_wcag_luminance(a), _wcag_luminance(b)), reverse=True)
    return (high + 0.05) / (low + 0.05)


WHITE = np.ones(3)

# Machado, Oliveira & Fernandes 2009, "A physiologically-based model for simulation of color
# vision deficiency", IEEE Transactions on Visualization and Computer Graphics 15(6):1291-1298,
# their table of simulation matrices at severity 1.0 (dichromacy), applied to linear RGB.
DICHROMACY = {
    "protanopia": np.array(
        [
            [0.152286, 1.052583, -0.204868],
            [0.114503, 0.786281, 0.099216],
            [-0.003882, -0.048116, 1.051998],
        ]
    ),
    "deuteranopia": np.array(
        [
            [0.367322, 0.860646, -0.227968],
            [0.280085, 0.672501, 0.047413],
            [-0.011820, 0.042940, 0.968881],
        ]
    ),
    "tritanopia": np.array(
        [
            [1.255528, -0.076749, -0.178779],
            [-0.078411, 0.930809, 0.147602],
            [0.004733, 0.691367, 0.303900],
        ]
    ),
}
# sRGB (IEC 61966-2-1:1999) linear RGB -> CIE XYZ, D65 white
SRGB_TO_XYZ = np.array(
    [
        [0.4124564, 0.3575761, 0.1804375],
        [0.2126729, 0.7151522, 0.0721750],
        [0.0193339, 0.1191920, 0.9503041],
    ]
)


def _linear_srgb(rgb: np.ndarray) -> np.ndarray:
    """The sRGB decoding of IEC 61966-2-1 (knee 0.04045)."""
    return np.where(rgb <= 0.04045, rgb / 12.92, ((rgb + 0.055) / 1.055) ** 2.4)


def _lab(linear: np.ndarray) -> np.ndarray:
    """CIE 1976 L*a*b* of a linear sRGB colour, D65 white (CIE 15:2004, Colorimetry, 8.2.1)."""
    xyz = SRGB_TO_XYZ @ linear / (SRGB_TO_XYZ @ np.ones(3))
    eps, kappa = 216 / 24389, 24389 / 27
    f = np.where(xyz > eps, np.cbrt(xyz), (kappa * xyz + 16) / 116)
    return np.array([116 * f[1] - 16, 500 * (f[0] - f[1]), 200 * (f[1] - f[2])])


def _seen(colour: str) -> dict[str, np.ndarray]:
    """L*a*b* of the colour as seen with normal vision and with each dichromacy."""
    linear = _linear_srgb(_rgb(colour)[:3])
    seen = {"normal vision": _lab(linear)}
    for kind, matrix in DICHROMACY.items():
        seen[kind] = _lab(np.clip(matrix @ linear, 0.0, 1.0))
    return seen


# ---------------------------------------------------------------------------------------------
# Styles


def _triple(index: int) -> tuple[str, str, str]:
    style = schedule_style(index)
    return style.colour.lower(), style.dash, style.symbol


RESERVED_COLOURS = {STABLE_COLOUR.lower(), UNSTABLE_COLOUR.lower(), NOW_COLOUR.lower(), "#000000"}
RESERVED_DASHES = {UNSTABLE_LINE["dash"], "dot"}  # unstable equilibria; schedules off limits
RESERVED_SYMBOLS = {NOW_MARKER["symbol"], *FOLD_SYMBOLS.values()}


def test_twelve_and_more_schedules_get_distinct_triples_unlike_equilibria_and_now():
    """Colour, dash and symbol together differ for the first DISTINCT_STYLES schedules (at
    least 12), and the (colour, dash) pair alone for the first DISTINCT_SCHEDULES; neighbours
    differ in dash as well as colour, so the first three differ without colour vision (common
    practice, no source). No schedule borrows the stable curve's black solid line, the
    unstable curve's grey dashes, the dotted "breaks a limit", the orange star of "now" or a
    fold's triangle."""
    assert DISTINCT_STYLES >= DISTINCT_SCHEDULES >= SCHEDULES == 12
    triples = [_triple(i) for i in range(DISTINCT_STYLES)]
    assert len(set(triples)) == DISTINCT_STYLES
    assert len({t[:2] for t in triples[:DISTINCT_SCHEDULES]}) == DISTINCT_SCHEDULES
    assert len({t[1] for t in triples[:3]}) == 3
    for i in range(DISTINCT_STYLES - 1):
        assert triples[i][0] != triples[i + 1][0] and triples[i][1] != triples[i + 1][1]
    stable = (STABLE_LINE["color"].lower(), STABLE_LINE["dash"])
    unstable = (UNSTABLE_LINE["color"].lower(), UNSTABLE_LINE["dash"])
    for colour, dash, symbol in triples:
        assert (colour, dash) not in {stable, unstable}
        assert colour not in RESERVED_COLOURS
        assert dash not in RESERVED_DASHES
        assert symbol not in RESERVED_SYMBOLS
    assert schedule_style(3).line(feasible=False)["dash"] == "dot"
    # the helpers the figures call give the same style
    assert figures.schedule_line(7)["color"] == schedule_style(7).colour
    assert figures.schedule_marker(7)["symbol"] == schedule_style(7).symbol


def test_past_the_distinct_styles_schedules_repeat_but_never_turn_black_or_pale():
    """Beyond DISTINCT_STYLES a style repeats (no new colours are invented), and every one is
    still a palette colour, never a reserved one."""
    for i in range(DISTINCT_STYLES, 5 * DISTINCT_STYLES):
        colour, dash, symbol = _triple(i)
        assert (colour, dash, symbol) == _triple(i % DISTINCT_STYLES)
        assert colour in {c.lower() for c in SCHEDULE_COLOURS}
        assert colour not in RESERVED_COLOURS


def test_wcag_formula_matches_its_definition_end_points():
    """WCAG 2.1 (W3C 2018), definition of "contrast ratio": ratios run from 1:1 (a colour
    against itself) to 21:1 (black on white); the relative luminance of white is 1 and of
    black 0 by the same definition."""
    black = np.zeros(3)
    assert _wcag_luminance(WHITE) == pytest.approx(1.0)
    assert _wcag_luminance(black) == 0.0
    assert _contrast(black, WHITE) == pytest.approx(21.0)
    assert _contrast(WHITE, WHITE) == pytest.approx(1.0)


@pytest.mark.parametrize("colour", SCHEDULE_COLOURS)
def test_every_schedule_colour_has_non_text_contrast_on_white_and_on_the_band(colour):
    """WCAG 2.1 success criterion 1.4.11 Non-text Contrast (W3C 2018): graphical objects need
    a contrast ratio of at least 3:1 against adjacent colours; here against the white
    background and against the shaded bistable band (WINDOW_FILL over white), where paths
    cross it."""
    line = _rgb(colour)[:3]
    assert _contrast(line, WHITE) >= 3.0
    assert _contrast(line, _over_white(WINDOW_FILL)) >= 3.0


def test_schedule_colours_stay_apart_under_colour_vision_deficiency():
    """Every pair of schedule colours, and every schedule colour against the reserved ones
    (black and grey equilibria, the orange "now"), differ by a CIE 1976 colour difference of at
    least 10 (a clearly visible difference between lines: common practice, no source) with
    normal vision and under the Machado, Oliveira & Fernandes (2009) simulation of protanopia,
    deuteranopia and tritanopia; with normal vision by at least 20."""
    seen = {c: _seen(c) for c in SCHEDULE_COLOURS}
    reserved = {c: _seen(c) for c in RESERVED_COLOURS}
    for a, b in itertools.combinations(SCHEDULE_COLOURS, 2):
        for vision in seen[a]:
            least = 20.0 if vision == "normal vision" else 10.0
            gap = np.linalg.norm(seen[a][vision] - seen[b][vision])
            assert gap >= least, (a, b, vision, gap)
    for a, b in itertools.product(SCHEDULE_COLOURS, RESERVED_COLOURS):
        for vision in seen[a]:
            gap = np.linalg.norm(seen[a][vision] - reserved[b][vision])
            assert gap >= 10.0, (a, b, vision, gap)


def test_legend_names_wrap_without_losing_words():
    """A long schedule name wraps at spaces onto lines of at most LEGEND_LINE_CHARS; the words
    are all kept; a short one is left alone."""
    name = results()["comparison"].outcomes[-1].name
    wrapped = figures.legend_name(name)
    lines = wrapped.split("<br>")
    assert len(lines) > 1 and all(len(line) <= figures.LEGEND_LINE_CHARS for line in lines)
    assert " ".join(lines) == name
    assert figures.legend_name("Cut to 1.2 and hold") == "Cut to 1.2 and hold"


# ---------------------------------------------------------------------------------------------
# Text alternatives


def _recycling_thresholds(s: float, r: float, m: float, q: float) -> tuple[float, float]:
    """Collapse and recovery thresholds of dP/dt = L - s P + r P^q / (m^q + P^q) (Carpenter,
    Ludwig & Brock 1999, Ecological Applications 9:751-771): on the equilibrium curve
    L(P) = s P - r P^q / (m^q + P^q) the folds are where dL/dP = 0; the clear state is lost at
    the local maximum of L (collapse), the turbid one at the local minimum (recovery). Roots by
    scipy's brentq between sign changes on a grid."""

    def slope(p):
        return s - r * q * m**q * p ** (q - 1) / (m**q + p**q) ** 2

    def load(p):
        return s * p - r * p**q / (m**q + p**q)

    grid = np.linspace(1e-6, 10 * m, 4001)
    values = slope(grid)
    roots = [
        brentq(slope, a, b)
        for a, b, fa, fb in zip(grid, grid[1:], values, values[1:], strict=False)
        if fa * fb < 0
    ]
    assert len(roots) == 2
    return load(roots[0]), load(roots[1])


def _scenario_thresholds() -> tuple[float, float]:
    parameters = results()["scenario"].model.parameters
    return _recycling_thresholds(*(parameters[k] for k in ("s", "r", "m", "q")))


@pytest.fixture(scope="module")
def drawn():
    return every_figure()


def test_every_figure_kind_has_a_description_naming_its_kind(drawn):
    """Every builder stores its text alternative; description() reads it from the figure and
    from the figure's JSON alike."""
    assert len(drawn) == 11
    for kind, figure in drawn.items():
        words = description(figure)
        assert figure.layout.meta["figure"] == kind
        assert len(words) > 80, kind
        assert "<" not in words and "%{" not in words, kind  # no markup, no templates
        assert description(figure.to_plotly_json()) == words


@pytest.mark.parametrize("kind", ["diagram", "time series", "sweep", "side by side"])
def test_thresholds_in_the_description_agree_with_an_independent_computation(drawn, kind):
    """The thresholds named in the description (with the control's unit) are those of the
    lake's model computed here with scipy (see _recycling_thresholds), to the four significant
    figures the planner's wording gives."""
    collapse, recovery = _scenario_thresholds()
    unit = results()["scenario"].control.unit
    words = description(drawn[kind])
    assert f"Collapse threshold: {collapse:.4g} {unit}" in words
    assert f"Recovery threshold: {recovery:.4g} {unit}" in words


def test_frontier_description_gives_the_recovery_threshold_and_the_least_holds(drawn):
    """The frontier's description names the recovery threshold (three significant figures,
    checked against scipy as above) and the least hold of the shallowest cut tried."""
    _, recovery = _scenario_thresholds()
    frontier = results()["frontier"]
    words = description(drawn["frontier"])
    assert f"recovery threshold of {float(f'{recovery:.3g}'):g}" in words
    shallow = next(p for p in frontier.points if p.hold_years is not None)
    assert f"held at least {float(f'{shallow.hold_years:.3g}'):g} years" in words


def test_fit_descriptions_give_the_fitted_thresholds(drawn):
    """The fitted lake's collapse threshold in both fit descriptions is the fold of the model
    with the fitted parameters, computed here with scipy; its recovery fold lies below the
    lowest achievable load, and the diagram's description says so in the planner's words."""
    fit = results()["fit"]
    values = {p.name: p.value for p in fit.parameters}
    parameters = {**fit.scenario.model.parameters, **values}
    collapse, recovery = _recycling_thresholds(*(parameters[k] for k in ("s", "r", "m", "q")))
    unit = fit.scenario.control.unit
    for kind in ("fit", "fit diagram"):
        words = description(drawn[kind])
        assert f"collapse threshold: {float(f'{collapse:.3g}'):g} {unit}" in words
    assert recovery < fit.scenario.control.least
    assert "Recovery threshold: not reachable by load cuts alone" in description(
        drawn["fit diagram"]
    )


def test_ensemble_and_search_descriptions_name_their_numbers(drawn):
    """The ensemble's description gives each schedule's chance of recovery as a percentage of
    its members (recomputed here from the members that recovered), the search's the cheapest
    option's present value."""
    ensemble, search = results()["ensemble"], results()["search"]
    words = description(drawn["ensemble"])
    for summary in ensemble.schedules:
        share = 100 * summary.recovered / summary.members
        text = f"{share:.1f}%" if 0 < share < 100 else f"{share:.0f}%"
        assert f"“{summary.name}” recovers in {text} of {summary.members} members" in words
    assert f"{search.cheapest.present_value:,.0f}" in description(drawn["search"])


def test_a_diagram_describes_only_the_schedules_shown():
    """Schedules left out of ``shown`` start hidden and drop out of the description."""
    r = results()
    comparison = r["comparison"]
    runs = figures.trajectories_of(comparison)
    shown = [runs[1].name]
    figure = figures.hysteresis_figure(
        r["scenario"], comparison.diagram, trajectories=runs, shown=shown
    )
    hidden = {t.legendgroup for t in figure.data if t.visible == "legendonly"}
    assert hidden == {run.name for run in runs[0:1] + runs[2:]}
    words = description(figure)
    assert f"“{runs[1].name}”" in words and f"“{runs[0].name}”" not in words


def test_a_figure_without_a_stored_description_falls_back_to_its_title():
    figure = go.Figure(layout={"title": {"text": "No results yet<br><sup>run one</sup>"}})
    assert description(figure) == "No results yet run one"
    assert description(go.Figure()) == ""
