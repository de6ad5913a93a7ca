"""The "Two scenarios" tab in a real headless Chromium (Debian's ``chromium``, Playwright): with
alder-mere.toml open, picking tarnby-water.toml shows both scenarios' titles, diagrams and
verdicts next to each other. The titles expected are read from the two files with Python's own
TOML reader (``tomllib``, PEP 680), not through the app. A screenshot goes to
``PLANNER_SCREENSHOTS`` when set.
"""

from __future__ import annotations

import re
import tomllib

from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS
from webapp import ids
from webapp.files import default_scenario_dir

pytestmark = BROWSER_MARKS

OPEN, SECOND = "alder-mere.toml", "tarnby-water.toml"


def title_of(name: str) -> str:
    with open(default_scenario_dir() / name, "rb") as file:
        return tomllib.load(file)["name"]


def test_two_scenarios_side_by_side(page, served, shots):
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1500, "height": 1000})
    page.goto(served["url"])
    expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text(f"Loaded {OPEN}")

    page.get_by_role("tab", name="Two scenarios").click()
    expect(page.locator(f"#{ids.TWO_OPEN_TITLE}")).to_have_text(title_of(OPEN))
    page.locator(f"#{ids.TWO_CHOICE}").click()
    page.get_by_role("option", name=re.compile(re.escape(SECOND))).click()

    expect(page.locator(f"#{ids.TWO_OTHER_TITLE}")).to_contain_text(title_of(SECOND))
    expect(page.locator(f"#{ids.TWO_OPEN_TITLE}")).to_have_text(title_of(OPEN))
    expect(page.locator(f"#{ids.TWO_OPEN_WORDS}")).to_contain_text("Hysteretic")
    expect(page.locator(f"#{ids.TWO_OTHER_WORDS}")).to_contain_text("Irreversible")
    expect(page.locator(f"#{ids.TWO_OTHER_GRAPH} .gtitle")).to_contain_text("Tarnby Water")
    expect(page.locator(f"#{ids.TWO_OPEN_GRAPH} .gtitle")).to_contain_text("Alder Mere")
    page.screenshot(path=str(shots / "two-scenarios.png"), full_page=True)
