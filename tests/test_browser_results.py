"""Every long job's result in a real headless Chromium (Debian's ``chromium``, Playwright): the
sweep, the recovery frontier, the cheapest-schedule search, the ensemble and the fit each run from
their tab, carry a caption naming a threshold with its value, are added to the briefing, and (all
but the sweep, whose export predates these) download as PNG and CSV; after an edit their
downloads are refused. Screenshots go to ``PLANNER_SCREENSHOTS`` when set.

File checks: a PNG starts with its 8-byte signature (ISO/IEC 15948:2004, "Portable Network
Graphics (PNG) Specification", section 5.2 "PNG signature"); a CSV's first record is its header
(RFC 4180, Shafranovich 2005, "Common Format and MIME Type for CSV Files", section 2 rule 3),
read back with Python's csv module.
"""

from __future__ import annotations

import csv
import html
import io
import re

import pytest

from planner.report import CAUTION
from planner.scenario import load_scenario
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS, dom_id
from webapp import compute, ids
from webapp.files import default_scenario_dir
from webapp.views import export, frontier

pytestmark = BROWSER_MARKS

SCENARIO = "alder-mere.toml"
RECORD = default_scenario_dir() / "data" / "alder-mere-monitoring.csv"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
MEMBERS = "200"
THRESHOLD_NUMBER = re.compile(r"threshold[^.]*?\d")  # "threshold of 0.0862 g P / m2 / yr"
# The figures that are not drawn against the load say their own key numbers instead.
CAPTION_WORDS = {
    "search": re.compile(r"Cheapest option[^;]*\d"),  # "... held 1.48 yr”, 1,633,019 EUR"
    "ensemble": re.compile(rf"recovers in [\d.]+% of {MEMBERS} members \(95% interval"),
}
# tab label, how the job starts, the graph, what the message says was added, the briefing heading
TABS = {
    "sweep": ("Slow sweep", ids.SWEEP_RUN, ids.SWEEP_GRAPH, "the slow sweep", "A slow sweep"),
    "frontier": (
        "Recovery frontier",
        ids.FRONTIER_RUN,
        ids.FRONTIER_GRAPH,
        "the recovery frontier",
        "How deep and how long",
    ),
    "search": (
        "Recovery frontier",
        ids.SEARCH_RUN,
        ids.SEARCH_GRAPH,
        "the cheapest option",
        "The cheapest option",
    ),
    "ensemble": (
        "Uncertainty",
        ids.ENSEMBLE_RUN,
        ids.ENSEMBLE_GRAPH,
        "the chance of recovery",
        "The chance of recovery",
    ),
    "fit": (
        "Monitoring data",
        None,  # the upload starts it
        ids.DATA_FIT_GRAPH,
        "the fit to monitoring data",
        "Fit to monitoring data",
    ),
}
EXPORTED = ("frontier", "search", "ensemble", "fit")


def test_add_found_refuses_a_search_of_an_earlier_version():
    """Server side: "Add to comparison" with the stamp of another version of the scenario is
    refused with the staleness rule's reason, whatever the page's button says (common practice,
    no source: never trust a client-side disable)."""
    scenario = load_scenario(default_scenario_dir() / SCENARIO)
    working = {"source": SCENARIO, "data": compute.dump(scenario)}
    found = compute.dump(scenario)["schedules"][0]
    old = {"what": "search", "source": SCENARIO, "key": "an-earlier-version"}
    store, message = frontier.add_found(1, working, None, found, [old])
    assert message.startswith("Not added: The cheapest schedule was computed for an earlier")
    current = {"what": "search", "source": SCENARIO, "key": compute.scenario_key(working["data"])}
    store, message = frontier.add_found(1, working, None, found, [current])
    assert (
        message.startswith("Added")
        and len(store["data"]["schedules"]) == len(scenario.schedules) + 1
    )


@pytest.mark.parametrize("what", EXPORTED)
def test_exports_are_refused_when_stale_or_not_run(what):
    """Server side: a download of a result stamped for another version is refused with the
    staleness rule's reason; one never run for this scenario says to run it (common practice,
    no source)."""
    scenario = load_scenario(default_scenario_dir() / SCENARIO)
    working = {"source": SCENARIO, "data": compute.dump(scenario)}
    old = {"what": what, "source": "another.toml", "key": "another"}
    with pytest.raises(export.ExportRefusedError, match="computed for another.toml"):
        export.build_export(what, "csv", working, None, None, None, SCENARIO, None, [old])
    with pytest.raises(export.ExportRefusedError, match=export.RUN_FIRST[what]):
        export.build_export(what, "png", working, None, None, None, SCENARIO, None, [])


def test_every_result_tab_runs_adds_and_exports(page, served, shots, tmp_path):
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1400, "height": 1000})
    page.goto(served["url"])
    page.locator(f"#{ids.PICKER}").click()
    page.get_by_role("option", name=re.compile(re.escape(SCENARIO))).click()
    expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text(f"Loaded {SCENARIO}")
    expect(page.locator(f"#{ids.TABLE} td[data-column='Schedule']").first).to_be_visible()
    unit = load_scenario(default_scenario_dir() / SCENARIO).control.unit

    # The diagram is captioned too, with the thresholds' values.
    diagram_caption = page.locator(f"#{ids.figure_caption(ids.DIAGRAM_GRAPH)}")
    expect(diagram_caption).to_contain_text(THRESHOLD_NUMBER)

    for what, (tab, run, graph, label, _heading) in TABS.items():
        page.get_by_text(tab, exact=True).click()
        if run is None:
            page.locator(f"#{ids.DATA_UPLOAD} input[type=file]").set_input_files(str(RECORD))
        else:
            if what == "ensemble":
                page.locator(f"#{ids.ENSEMBLE_MEMBERS}").fill(MEMBERS)
            page.locator(f"#{run}").click()
        # The figure's text alternative: a caption naming a threshold with its value, and the
        # graph grouped with it.
        caption = page.locator(f"#{ids.figure_caption(graph)}")
        words = CAPTION_WORDS.get(what, THRESHOLD_NUMBER)
        expect(caption).to_contain_text(words, timeout=120_000)
        if words is THRESHOLD_NUMBER:
            expect(caption).to_contain_text(unit)
        group = page.locator(f"figure[aria-labelledby='{ids.figure_caption(graph)}']")
        expect(group).to_have_attribute("role", "group")
        expect(group.locator(f"#{graph} .main-svg").first).to_be_visible()

        page.locator(dom_id(ids.briefing_add(what))).click()
        expect(page.locator(dom_id(ids.briefing_add_message(what)))).to_have_text(
            f"Added {export.PART_LABELS[what]} to the briefing."
        )
        expect(page.locator(f"#{ids.BRIEFING_CONTENTS}")).to_contain_text(label)
        page.locator(f"#{graph}").screenshot(path=str(shots / f"result-{what}.png"))

        if what in EXPORTED:
            png = _download(page, tmp_path, what, "png")
            assert png.read_bytes().startswith(PNG_SIGNATURE)
            table = _download(page, tmp_path, what, "csv").read_text(encoding="utf-8")
            header = next(csv.reader(io.StringIO(table)))
            if what == "fit":  # one row per fitted quantity, each in its own unit
                assert header[:3] == ["quantity", "name", "value"], header
            else:
                assert any(f"({unit})" in name or "(yr)" in name for name in header), header
            assert len(list(csv.reader(io.StringIO(table)))) > 1  # a row below the header
    page.screenshot(path=str(shots / "results-fit-tab.png"), full_page=True)

    # The briefing holds every added result, each in a section of its own, the caution once.
    expect(page.locator(f"#{ids.BRIEFING_CONTENTS}")).to_contain_text(
        ", ".join(export.PART_LABELS[what] for what in TABS)
    )
    page.locator(".briefing-bar").screenshot(path=str(shots / "results-briefing-bar.png"))
    briefing = _download(page, tmp_path, "briefing", "html").read_text(encoding="utf-8")
    for what, (*_, heading) in TABS.items():
        assert re.search(rf"<h2>{re.escape(heading)}", briefing), what
    assert html.unescape(briefing).count(CAUTION) == 1

    # An edit: every result shown belongs to the version before it, so none downloads.
    floor = page.locator(dom_id(ids.schedule_field(1, "floor")))
    floor.fill(str(float(floor.input_value()) * 1.5))
    floor.press("Enter")
    for what in EXPORTED:
        page.get_by_text(TABS[what][0], exact=True).click()
        for fmt in ("png", "csv"):
            button = page.locator(dom_id(ids.export_button(what, fmt)))
            expect(button).to_be_disabled()
            expect(button).to_have_attribute(
                "title", re.compile("^Not available: .*earlier version of this scenario; .* first$")
            )
        page.screenshot(path=str(shots / f"results-stale-{what}.png"), full_page=True)
    page.get_by_text("Recovery frontier", exact=True).click()
    expect(page.locator(f"#{ids.SEARCH_ADD}")).to_be_disabled()
    expect(page.locator(dom_id(ids.export_message("search")))).to_contain_text(
        "earlier version of this scenario"
    )
    page.screenshot(path=str(shots / "results-stale-frontier-tab.png"), full_page=True)


def _download(page, folder, what: str, fmt: str):
    from playwright.sync_api import expect

    with page.expect_download(timeout=120_000) as download:
        page.locator(dom_id(ids.export_button(what, fmt))).click()
    saved = folder / f"{what}.{fmt}"
    download.value.save_as(saved)
    expect(page.locator(dom_id(ids.export_message(what)))).to_contain_text("Downloaded")
    return saved
