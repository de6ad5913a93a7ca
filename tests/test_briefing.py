"""The briefing a board reads: verdict and recommendation first, thresholds in words with units
and as lake TP, each result that was run, only the schedules shown, date and version, the
caution once, one copy of plotly.js for every figure, and the same page as a PDF printed by the
system Chromium (the CLI's ``--pdf``, the app's PDF download)."""

from __future__ import annotations

import base64
import html
import json
import re
import shutil
import subprocess
from datetime import date
from html.parser import HTMLParser
from pathlib import Path

import pytest
from plotly.offline import get_plotlyjs

import planner
from planner import briefing
from planner.briefing import BriefingPart, BriefingParts, briefing_html
from planner.cli import main
from planner.ensemble import run_ensemble
from planner.ensemble_report import ensemble_part
from planner.errors import InputError
from planner.outcomes import compare
from planner.report import CAUTION, comparison_json
from planner.scenario import load_scenario
from webapp import compute, exports
from webapp.views import export

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"
HIDDEN = "Staircase down and back"
PLOTLY_SIGNATURE = get_plotlyjs()[:120]  # the bundle's licence banner and version line
HAS_CHROMIUM = briefing.chromium() is not None
needs_chromium = pytest.mark.skipif(not HAS_CHROMIUM, reason="needs Debian's chromium")


class _Page(HTMLParser):
    """Table headings, figure containers and scripts of a page."""

    def __init__(self):
        super().__init__()
        self.headings: list[str] = []
        self.figures = 0
        self.script_sources: list[str] = []
        self._in_th = False

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "th":
            self._in_th = True
            self.headings.append("")
        if tag == "div" and "plotly-graph-div" in (attrs.get("class") or ""):
            self.figures += 1
        if tag == "script" and attrs.get("src"):
            self.script_sources.append(attrs["src"])

    def handle_endtag(self, tag):
        if tag == "th":
            self._in_th = False

    def handle_data(self, data):
        if self._in_th:
            self.headings[-1] += data


def parsed(text: str) -> _Page:
    page = _Page()
    page.feed(text)
    return page


@pytest.fixture(scope="module")
def alder():
    scenario = load_scenario(ALDER)
    comparison = compare(scenario)
    ensemble = run_ensemble(scenario, members=64, diagram=comparison.diagram)
    return scenario, comparison, ensemble


@pytest.fixture(scope="module")
def shown_page(alder):
    """The briefing with the ensemble's part and one schedule hidden, dated 2 January 2026."""
    scenario, comparison, ensemble = alder
    shown = tuple(s.name for s in scenario.schedules if s.name != HIDDEN)
    parts = BriefingParts(
        scenario, comparison, shown=shown, parts=(ensemble_part(ensemble),), source=ALDER.name
    )
    return briefing_html(parts, made=date(2026, 1, 2))


def test_one_copy_of_plotly_js_draws_every_figure(alder, shown_page):
    """plotly.py's ``to_html(include_plotlyjs=False)`` leaves the library out of each figure,
    which then relies on a copy already on the page (plotly documentation, "Interactive HTML
    Export in Python", include_plotlyjs). The page holds that copy once, inline (no CDN, so it
    works offline), and one div per figure: the curve, the time series, the ensemble's chance
    by year and one fan chart per schedule shown."""
    scenario, _, ensemble = alder
    page = parsed(shown_page)
    shown = [s for s in ensemble.schedules if s.name != HIDDEN]
    assert shown_page.count(PLOTLY_SIGNATURE) == 1
    assert page.figures == 2 + 1 + len(shown)
    assert shown_page.count("Plotly.newPlot(") == page.figures
    assert page.script_sources == []  # nothing fetched from anywhere


def test_the_caution_once_date_and_version(shown_page):
    text = html.unescape(shown_page)
    assert text.count(CAUTION) == 1
    assert '<time datetime="2026-01-02">2026-01-02</time>' in shown_page
    assert f"planner {planner.__version__}" in text
    assert '<html lang="en">' in shown_page
    assert "<pre" not in shown_page  # no monospace block


def test_today_is_the_default_date(alder):
    scenario, comparison, _ = alder
    before = date.today().isoformat()
    text = briefing_html(BriefingParts(scenario, comparison))
    assert before in text or date.today().isoformat() in text


def test_table_headings_carry_their_units(shown_page):
    """Every heading of a quantity names its unit: the control's, the currency, years, and lake
    TP in ug/L for a scenario with a [lake] block."""
    headings = set(parsed(shown_page).headings)
    unit = "g P / m2 / yr"
    for expected in (
        f"Lowest control ({unit})",
        f"Overshoot depth ({unit})",
        "Meets target at (yr)",
        "Time below threshold (yr)",
        "Total cost (EUR)",
        "Present value (EUR)",
        "Lake TP at the horizon (ug/L)",
        "Present value: median (EUR)",
        "Years to target: median (yr)",
    ):
        assert expected in headings, (expected, sorted(headings))


def test_hidden_schedules_are_absent(alder, shown_page):
    """A schedule the user hid appears nowhere: not in a table, a figure, a note or a fan."""
    scenario, _, _ = alder
    assert HIDDEN not in shown_page
    for schedule in scenario.schedules:
        if schedule.name != HIDDEN:
            assert html.escape(schedule.name) in shown_page


def test_thresholds_in_words_with_lake_tp_and_trophic_class(alder, shown_page):
    """Lake TP of an areal store is the store over the mean depth (g/m2 / m = g/m3 = mg/L);
    OECD (1982) classes by annual mean TP: hypertrophic at or above 100 ug/L. Recomputed here
    for the turbid state at the recovery threshold of Alder Mere (mean depth 3.1 m), shown to
    three significant figures (common practice, no source)."""
    scenario, comparison, _ = alder
    text = html.unescape(shown_page)
    recovery = comparison.diagram.recovery
    tp = float(recovery.state[0]) / 3.1 * 1000.0  # ug/L
    assert f"TP {float(f'{tp:.3g}'):,.0f} ug/L: hypertrophic (OECD 1982)" in text
    assert tp >= 100.0
    assert "Recovery threshold: 0.08619 g P / m2 / yr" in text
    assert "below which the undesired state can no longer persist" in text


def test_the_recommendation_is_the_cheapest_shown_schedule_that_recovers(alder, shown_page):
    """Re-derived from the `compare --json` contract (DESIGN.md section 5): of the schedules
    shown that recover and keep every limit, the least present value."""
    scenario, comparison, _ = alder
    rows = [
        s
        for s in comparison_json(comparison)["schedules"]
        if s["recovered"] and s["feasible"] and s["name"] != HIDDEN
    ]
    best = min(rows, key=lambda s: s["cost"]["present_value"])
    text = html.unescape(shown_page)
    assert f"Recommended: “{best['name']}”" in text
    assert f"{best['cost']['present_value']:,.0f} EUR in present value" in text
    # Hiding it recommends the next cheapest.
    shown = tuple(s["name"] for s in rows if s["name"] != best["name"])
    runner_up = min(
        (s for s in rows if s["name"] in shown), key=lambda s: s["cost"]["present_value"]
    )
    again = html.unescape(briefing_html(BriefingParts(scenario, comparison, shown=shown)))
    assert f"Recommended: “{runner_up['name']}”" in again
    nothing = html.unescape(briefing_html(BriefingParts(scenario, comparison, shown=())))
    assert "nothing to recommend" in nothing


def test_the_chance_of_recovery_with_its_interval_is_in_short(alder, shown_page):
    """The recommended schedule's chance of recovery and its 95% Wilson interval (Wilson 1927,
    JASA 22:209-212), recomputed from the members that recovered."""
    from scipy.stats import norm

    scenario, comparison, ensemble = alder
    best = next(s for s in ensemble.schedules if f"Recommended: “{s.name}”" in shown_page)
    n, k = best.members, best.recovered
    z = norm.ppf(0.975)
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * (p * (1 - p) / n + z * z / (4 * n * n)) ** 0.5
    low, high = max(centre - half, 0.0), min(centre + half, 1.0)
    percent = lambda v: f"{100 * v:.1f}%" if 0 < v < 1 else f"{100 * v:.0f}%"  # noqa: E731
    in_short = shown_page.split('class="caution"')[0]
    assert f"95% interval {percent(low)} to {percent(high)}" in html.unescape(in_short)


def test_a_part_survives_json(alder):
    """The web app keeps parts in the browser: JSON out and back gives the same part."""
    _, _, ensemble = alder
    part = ensemble_part(ensemble)
    again = BriefingPart.from_json(json.loads(json.dumps(part.to_json())))
    assert again == part


def test_every_kind_of_result_has_its_section(alder):
    """Search, frontier, fit and sweep results each add their section and a line to "In
    short", with the caution still once."""
    from planner.briefing import fit_part, frontier_part, search_part, sweep_part
    from planner.calibration import fit_record, observations_for
    from planner.frontier import recovery_frontier
    from planner.monitoring import read_record
    from planner.search import search
    from planner.sweep import sweep_for

    scenario, comparison, ensemble = alder
    diagram = comparison.diagram
    frontier = recovery_frontier(scenario, diagram=diagram, depths=[0.01, 0.03])
    result = search(scenario, diagram=diagram)
    record = read_record(SCENARIOS / "data" / "alder-mere-monitoring.csv")
    fit = fit_record(scenario, observations_for(record, scenario), bootstrap=0)
    sweep = sweep_for(scenario)
    parts = (
        ensemble_part(ensemble),
        search_part(scenario, result),
        frontier_part(scenario, frontier),
        fit_part(fit),
        sweep_part(scenario, sweep, diagram),
    )
    text = html.unescape(briefing_html(BriefingParts(scenario, comparison, parts=parts)))
    for heading in (
        "The chance of recovery",
        "The cheapest option",
        "How deep and how long",
        "Fit to monitoring data",
        "A slow sweep of the load",
    ):
        assert f"<h2>{heading}</h2>" in text
    assert f"“{result.cheapest.schedule.name}”" in text
    assert text.count(CAUTION) == 1
    assert text.count(PLOTLY_SIGNATURE) == 1


def _pages(pdf: bytes, folder: Path) -> int:
    """Pages of a PDF by pypdf or poppler's pdfinfo when present, else by counting the page
    objects, ``/Type /Page`` (ISO 32000-1:2008, section 7.7.3.3, Page Objects)."""
    try:
        import io

        import pypdf

        return len(pypdf.PdfReader(io.BytesIO(pdf)).pages)
    except ImportError:
        pass
    if shutil.which("pdfinfo"):
        path = folder / "pages.pdf"
        path.write_bytes(pdf)
        info = subprocess.run(["pdfinfo", str(path)], capture_output=True, text=True, check=True)
        return int(re.search(r"^Pages:\s+(\d+)", info.stdout, re.M).group(1))
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", pdf))


@needs_chromium
def test_the_pdf_is_printed_by_chromium(shown_page, tmp_path):
    """A PDF file starts with its header, "%PDF-" and the version (ISO 32000-1:2008, the PDF
    1.7 specification, section 7.5.2, File Header), and the briefing fills several A4 pages."""
    pdf = briefing.print_pdf(shown_page)
    assert pdf.startswith(b"%PDF-")
    assert _pages(pdf, tmp_path) >= 2


def test_a_missing_chromium_is_named(monkeypatch, capsys, tmp_path):
    """Without Chromium, --pdf stops before any work with a message naming the option."""
    monkeypatch.setattr(briefing, "chromium", lambda: None)
    out = tmp_path / "b.pdf"
    assert main(["compare", str(ALDER), "--pdf", str(out)]) == 2
    err = capsys.readouterr().err
    assert "--pdf" in err and "chromium" in err.lower()
    assert not out.exists()
    with pytest.raises(InputError, match="Chromium"):
        briefing.print_pdf("<html></html>")


@needs_chromium
def test_cli_writes_html_and_pdf_and_keeps_existing_files(tmp_path, capsys):
    """--html and --pdf write the same briefing; an existing PDF is kept without --force."""
    page, pdf = tmp_path / "b.html", tmp_path / "b.pdf"
    assert main(["-q", "compare", str(ALDER), "--html", str(page), "--pdf", str(pdf)]) == 0
    assert pdf.read_bytes().startswith(b"%PDF-")
    assert html.unescape(page.read_text(encoding="utf-8")).count(CAUTION) == 1
    capsys.readouterr()
    assert main(["-q", "compare", str(ALDER), "--pdf", str(pdf)]) == 2
    assert "--pdf" in capsys.readouterr().err
    assert main(["-q", "compare", str(ALDER), "--pdf", str(pdf), "--force"]) == 0


# ---------------------------------------------------------------------------------------------
# the web app: "Add to briefing", hidden schedules, stale parts, the PDF download


def _working(scenario) -> dict:
    return {"source": ALDER.name, "data": compute.dump(scenario), "complete": True}


def test_app_briefing_holds_added_results_of_this_scenario_only(alder):
    scenario, _, ensemble = alder
    working = _working(scenario)
    exports.use_parts_folder(None)
    exports.keep_part(working, ensemble_part(ensemble))
    button = export.briefing_add("ensemble")
    parts, messages = export.on_add([1], working, {}, [button], trigger=button)
    assert parts["ensemble"]["part"]["kind"] == "ensemble" and "Added" in messages[0]
    shown = [s.name for s in scenario.schedules if s.name != HIDDEN]
    download, name = export.build_export(
        "briefing", "html", working, shown, None, None, ALDER.name, parts
    )
    page = download["content"]
    assert name.startswith("alder-mere-briefing.html; with the chance of recovery")
    assert "<h2>The chance of recovery</h2>" in page and HIDDEN not in page
    # After an edit the added result belongs to another version: left out, and said so.
    edited = {**working, "data": {**working["data"], "name": "Alder Mere, edited"}}
    download, name = export.build_export(
        "briefing", "html", edited, shown, None, None, ALDER.name, parts
    )
    assert "The chance of recovery" not in download["content"]
    assert "left out" in name and "the chance of recovery" in name
    nothing, messages = export.on_add([1], edited, parts, [button], trigger=button)
    assert "Nothing to add" in messages[0]


@needs_chromium
def test_app_pdf_download(alder):
    scenario, _, _ = alder
    download, name = export.build_export(
        "briefing", "pdf", _working(scenario), None, None, None, ALDER.name
    )
    assert name == "alder-mere-briefing.pdf" and download["type"] == "application/pdf"
    assert base64.b64decode(download["content"]).startswith(b"%PDF-")


@pytest.mark.parametrize("path", sorted(SCENARIOS.glob("*.toml")), ids=lambda p: p.stem)
def test_every_demo_gets_a_board_briefing(path):
    """Each demo: the caution once, a recommendation or why there is none, units in the
    headings, the conversion to lake TP where the demo has a [lake] block."""
    scenario = load_scenario(path)
    text = html.unescape(briefing.comparison_briefing(compare(scenario)))
    assert text.count(CAUTION) == 1
    assert re.search(r"Recommended: “[^”]+”|No schedule to recommend", text)
    if scenario.costs is None:
        assert "The scenario sets no costs." in text
    else:
        assert f"Present value ({scenario.costs.currency})" in text
    if getattr(scenario, "lake", None) is not None:
        assert "Lake TP at the horizon (ug/L)" in text
