"""The briefing in a real headless Chromium (Debian's ``chromium``, driven by Playwright).

From the app: hide one schedule, add an ensemble result to the briefing, download the briefing
as HTML and as PDF. Then the downloaded page opened offline: every figure drawn by its one copy
of plotly.js with no request leaving the file, the caution once, the hidden schedule nowhere, and
a full-page screenshot (in ``PLANNER_SCREENSHOTS`` when set) to look at.
"""

from __future__ import annotations

import re

from planner.ensemble import run_ensemble
from planner.ensemble_report import ensemble_part
from planner.report import CAUTION
from planner.scenario import load_scenario
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS, dom_id
from webapp import compute, exports, ids
from webapp.files import default_scenario_dir
from webapp.views import export

pytestmark = BROWSER_MARKS
HIDDEN = "Staircase down and back"


def test_briefing_page_from_the_app(page, served, shots, tmp_path):
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1400, "height": 1000})
    page.goto(served["url"])
    page.locator(f"#{ids.PICKER}").click()
    page.get_by_role("option", name=re.compile("alder-mere")).click()
    expect(page.locator(f"#{ids.TABLE} td[data-column='Schedule']")).to_have_count(5)

    # Hide one schedule: the briefing shows only the ticked ones.
    page.locator(f"#{ids.SHOWN}").get_by_text(HIDDEN, exact=True).click()
    expect(page.locator(f"#{ids.SHOWN} input:checked")).to_have_count(4)

    # An ensemble run for this scenario, offered as the Uncertainty tab offers it when its job
    # ends (exports.keep_part) and added as its "Add to briefing" adds it (the store's value).
    scenario = load_scenario(default_scenario_dir() / "alder-mere.toml")  # served a copy
    working = {"source": "alder-mere.toml", "data": compute.dump(scenario)}
    exports.keep_part(working, ensemble_part(run_ensemble(scenario, members=64)))
    offered = exports.offered_part(working, "ensemble")
    page.evaluate(
        "([store, parts]) => window.dash_clientside.set_props(store, {data: parts})",
        [export.PARTS_STORE, {"ensemble": offered}],
    )
    expect(page.locator(f"#{export.BRIEFING_CONTENTS}")).to_contain_text(
        "Added results: the chance of recovery"
    )
    page.locator(".briefing-bar").screenshot(path=str(shots / "briefing-bar.png"))

    with page.expect_download() as download:
        page.locator(dom_id(ids.export_button("briefing", "pdf"))).click()
    pdf = tmp_path / "briefing.pdf"
    download.value.save_as(pdf)
    assert pdf.read_bytes().startswith(b"%PDF-")  # ISO 32000-1:2008, 7.5.2 File Header
    with page.expect_download() as download:
        page.locator(dom_id(ids.export_button("briefing", "html"))).click()
    briefing = tmp_path / "briefing.html"
    download.value.save_as(briefing)
    expect(page.locator(dom_id(ids.export_message("briefing")))).to_contain_text(
        "with the chance of recovery"
    )

    # The page offline: nothing is fetched, every figure is drawn.
    requested = []
    page.route(
        re.compile(r"^https?://"),
        lambda route: (requested.append(route.request.url), route.abort()),
    )
    page.set_viewport_size({"width": 1100, "height": 900})
    page.goto(briefing.as_uri())
    figures = page.locator(".js-plotly-plot")
    shown = [s for s in scenario.schedules if s.name != HIDDEN]
    expect(figures).to_have_count(2 + 1 + len(shown))  # curve, series, chance, fans
    expect(page.locator(".js-plotly-plot .main-svg").first).to_be_visible()
    for i in range(figures.count()):
        expect(figures.nth(i).locator(".main-svg").first).to_be_attached()
    expect(page.locator("h1")).to_have_text(scenario.name)
    expect(page.locator(".recommendation")).to_contain_text("Recommended: “")
    expect(page.locator(".caution")).to_have_count(1)
    expect(page.locator(".caution")).to_have_text(CAUTION)
    expect(page.locator("text=" + HIDDEN)).to_have_count(0)
    assert page.locator("th", has_text="Present value (EUR)").count() >= 1
    assert requested == []
    page.screenshot(path=str(shots / "briefing-page.png"), full_page=True)
    page.screenshot(path=str(shots / "briefing-top.png"))
