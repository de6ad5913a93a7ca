"""The web app in a real headless Chromium (Debian's ``chromium``, driven by Playwright).

One walk through the acceptance steps: pick a demo scenario, see the diagram and the table, edit
a schedule's floor and see its verdict and cost change, add a schedule, export the briefing,
upload a malformed file, save as a new file and load it again; plus the inline message for a bad
value, the overwrite question, and the background sweep with its progress bar. A screenshot of
each step goes to a temporary folder (``PLANNER_SCREENSHOTS`` names another).
"""

from __future__ import annotations

import html
import re
from html.parser import HTMLParser

from planner.report import CAUTION
from planner.scenario import load_scenario
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS, dom_id
from webapp import ids
from webapp.files import default_scenario_dir

pytestmark = BROWSER_MARKS


class _Structure(HTMLParser):
    """Counts the start and end tags that must pair, to tell a whole page from a fragment."""

    PAIRED = {"html", "head", "body", "table", "script", "style", "title"}

    def __init__(self):
        super().__init__()
        self.opened: dict[str, int] = {}
        self.closed: dict[str, int] = {}
        self.doctype = ""

    def handle_decl(self, decl):
        self.doctype = decl

    def handle_starttag(self, tag, attrs):
        if tag in self.PAIRED:
            self.opened[tag] = self.opened.get(tag, 0) + 1

    def handle_endtag(self, tag):
        if tag in self.PAIRED:
            self.closed[tag] = self.closed.get(tag, 0) + 1


def test_walk_through_the_app(page, served, shots, tmp_path):
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1500, "height": 1000})
    step = iter(range(1, 100))

    def shot(name: str) -> None:
        page.screenshot(path=str(shots / f"{next(step):02d}-{name}.png"), full_page=True)

    def choose(file_name: str) -> None:
        page.locator(f"#{ids.PICKER}").click()
        page.get_by_role("option", name=re.compile(re.escape(file_name))).click()
        expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text(f"Loaded {file_name}")

    cards = page.locator(".schedule-card")
    table_names = page.locator(f"#{ids.TABLE} td[data-column='Schedule']")

    page.goto(served["url"])
    expect(page.locator("#caution")).to_have_text(CAUTION)

    # Pick a demo scenario: the diagram and the table appear.
    choose("tarnby-water.toml")
    expect(cards).to_have_count(2)
    choose("alder-mere.toml")
    expect(cards).to_have_count(5)
    expect(page.locator(f"#{ids.DIAGRAM_GRAPH} .gtitle")).to_contain_text("Alder Mere")
    expect(page.locator(f"#{ids.DIAGRAM_GRAPH} .legendtext", has_text="Deep cut")).to_have_count(1)
    expect(table_names).to_have_count(5)
    expect(page.locator(f"#{ids.SUMMARY}")).to_contain_text("Recovery threshold")
    shot("scenario-picked")

    # The table sorts by a column heading; a second click reverses the order.
    cost_heading = page.locator(f"#{ids.TABLE} th[data-column^='Total cost'] button")
    cost_heading.click()
    expect(page.locator(f"#{ids.TABLE} th[data-column^='Total cost']")).to_have_attribute(
        "aria-sort", "ascending"
    )
    expect(table_names.first).to_have_text("Short cut with sediment P inactivation")
    cost_heading.click()
    expect(page.locator(f"#{ids.TABLE} th[data-column^='Total cost']")).to_have_attribute(
        "aria-sort", "descending"
    )
    expect(table_names.first).to_have_text("Overnight cut (breaks the rate limit)")

    # Edit schedule 2's floor: its verdict and cost change, in the card and in the table.
    result = page.locator(dom_id(ids.schedule_result(1)))
    expect(result).to_contain_text("recovers")
    cost_before = result.locator(".cost-total").inner_text()
    floor = page.locator(dom_id(ids.schedule_field(1, "floor")))
    floor.fill("0.13")
    floor.press("Enter")
    expect(result).to_contain_text("stays in the undesired regime")
    assert result.locator(".cost-total").inner_text() != cost_before
    row = page.locator(f"#{ids.TABLE} tr[data-schedule^='Deep cut to 0.06']")
    expect(row.locator("td[data-column='Verdict']")).to_have_text("stays in the undesired regime")
    shot("floor-edited")

    # A value that is not a number: a message beside the field naming it, no traceback.
    floor.fill("deep")
    floor.press("Enter")
    message = page.locator(dom_id(ids.field_message(1, "floor")))
    expect(message).to_contain_text("Floor: ")
    expect(floor.locator("xpath=..")).to_have_class(re.compile("invalid"))
    shot("bad-value-message")
    floor.fill("0.13")
    floor.press("Enter")
    expect(message).to_be_empty()

    # Add a schedule: a sixth card and a sixth row.
    page.locator(f"#{ids.ADD_BUTTON}").click()
    expect(cards).to_have_count(6)
    expect(table_names).to_have_count(6)
    expect(page.locator(dom_id(ids.schedule_result(5)))).to_contain_text("total cost")
    shot("schedule-added")

    # The other views: time series, and two schedules side by side.
    page.get_by_text("Over time", exact=True).click()
    expect(page.locator(f"#{ids.SERIES_GRAPH} .gtitle")).to_contain_text("schedules over time")
    expect(page.locator(f"#{ids.SERIES_GRAPH} .legendtext")).to_have_count(6)
    shot("time-series")
    page.get_by_text("Side by side", exact=True).click()
    expect(page.locator(f"#{ids.SIDE_GRAPH} .gtitle")).to_contain_text("side by side")
    # two panels, and the lake TP (ug/L) axis overlaid on the last one (the demo has a lake)
    expect(page.locator(f"#{ids.SIDE_GRAPH} .cartesianlayer > .subplot")).to_have_count(3)
    expect(page.locator(f"#{ids.SIDE_GRAPH} .g-y3title")).to_contain_text("ug/L")
    shot("side-by-side")
    page.get_by_text("Equilibrium diagram", exact=True).click()

    # Export the briefing: a whole HTML page carrying the caution.
    with page.expect_download() as download:
        page.locator(dom_id(ids.export_button("briefing", "html"))).click()
    briefing = tmp_path / "briefing.html"
    download.value.save_as(briefing)
    text = briefing.read_text(encoding="utf-8")
    parser = _Structure()
    parser.feed(text)
    assert parser.doctype.lower() == "doctype html"
    for tag in ("html", "head", "body", "table"):
        assert parser.opened.get(tag, 0) >= 1 and parser.opened.get(tag) == parser.closed.get(
            tag
        ), tag
    assert CAUTION in html.unescape(text)
    assert "New overshoot schedule" in text and "Deep cut to 0.06" in text
    shot("briefing-exported")

    # Upload a malformed file: the message names the field; the edited scenario stays.
    malformed = tmp_path / "malformed.toml"
    source = (default_scenario_dir() / "alder-mere.toml").read_text(encoding="utf-8")
    malformed.write_text(source.replace("floor = 0.06", 'floor = "deep"'), encoding="utf-8")
    page.locator(f"#{ids.UPLOAD} input[type=file]").set_input_files(str(malformed))
    load_message = page.locator(f"#{ids.LOAD_MESSAGE}")
    expect(load_message).to_contain_text("malformed.toml: schedules.1.floor")
    expect(cards).to_have_count(6)
    expect(page.locator(dom_id(ids.schedule_field(1, "floor")))).to_have_value("0.13")
    shot("malformed-upload")

    # Save as a new file; saving again under that name asks first and Cancel writes nothing.
    page.locator(f"#{ids.SAVE_NAME}").fill("alder-mere-edited")
    page.locator(f"#{ids.SAVE_BUTTON}").click()
    expect(page.locator(f"#{ids.SAVE_MESSAGE}")).to_contain_text("Saved alder-mere-edited.toml")
    saved_file = served["saved"] / "alder-mere-edited.toml"
    saved = load_scenario(saved_file)
    assert len(saved.schedules) == 6 and saved.schedules[1].floor == 0.13
    written = saved_file.read_bytes()
    # Right after "Save as" the editor reloads the new file; a save pressed before it has
    # caught up writes nothing and says "press the button again", as a user then would.
    confirm_text = page.locator(f"#{ids.SAVE_CONFIRM_TEXT}")
    answered = (
        "() => document.getElementById('save-confirm-text').textContent.includes('exists') || "
        "document.getElementById('save-message').textContent.includes('still updating')"
    )
    for _ in range(10):
        page.locator(f"#{ids.SAVE_BUTTON}").click()
        page.wait_for_function(answered)
        if "exists already" in (confirm_text.text_content() or ""):
            break
    expect(page.locator(f"#{ids.SAVE_CONFIRM}")).to_contain_text("exists already")
    shot("overwrite-question")
    page.locator(f"#{ids.SAVE_CANCEL}").click()
    expect(page.locator(f"#{ids.SAVE_CONFIRM}")).to_be_hidden()
    assert saved_file.read_bytes() == written

    # Reload the page and load the saved file: the edits are there.
    page.reload()
    choose("alder-mere-edited.toml")
    expect(cards).to_have_count(6)
    expect(page.locator(dom_id(ids.schedule_field(1, "floor")))).to_have_value("0.13")
    expect(page.locator(dom_id(ids.schedule_result(1)))).to_contain_text(
        "stays in the undesired regime"
    )
    shot("saved-file-reloaded")

    # The slow sweep runs in the background with a progress bar, then draws the loop.
    page.get_by_text("Slow sweep", exact=True).click()
    page.locator(f"#{ids.SWEEP_STEP}").fill("0.005")
    page.locator(f"#{ids.SWEEP_RUN}").click()
    expect(page.locator(f"#{ids.SWEEP_GRAPH} .gtitle")).to_contain_text(
        "quasi-static sweep", timeout=30_000
    )
    expect(page.locator(f"#{ids.SWEEP_SUMMARY}")).to_contain_text("jump while dialling")
    shot("sweep")

    # The ensemble runs in the background with a progress bar, then draws the chance by year.
    page.get_by_text("Uncertainty", exact=True).click()
    page.locator(f"#{ids.ENSEMBLE_MEMBERS}").fill("100")
    page.locator(f"#{ids.ENSEMBLE_RUN}").click()
    expect(page.locator(f"#{ids.ENSEMBLE_GRAPH} .gtitle")).to_contain_text(
        "chance of meeting the target", timeout=30_000
    )
    expect(page.locator(f"#{ids.ENSEMBLE_TABLE} td").first).to_be_visible()
    shot("ensemble")
