"""The app's shell in a real headless Chromium (Debian's ``chromium``): keyboard-operable result
tabs, the page language, results first on a phone, messages in the user's words, model
parameters edited in the app, and an in-lake measure added in the editor.

A screenshot of each step goes to a temporary folder (``PLANNER_SCREENSHOTS`` names another).
"""

from __future__ import annotations

import re

import numpy as np
import pytest
from scipy.optimize import brentq

from planner.report import verdict_text
from planner.scenario import load_scenario
from planner.scenario.io import MAX_SCENARIO_BYTES
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS, dom_id
from webapp import compute, drafts, ids
from webapp.files import default_scenario_dir

pytestmark = BROWSER_MARKS

ALDER = compute.dump(load_scenario(default_scenario_dir() / "alder-mere.toml"))
PARAMETERS = ALDER["model"]["parameters"]
CONTROL = ALDER["control"]
TODAY = PARAMETERS[CONTROL["parameter"]]
DEEP_CUT = next(i for i, s in enumerate(ALDER["schedules"]) if s["kind"] == "overshoot")
THRESHOLD = re.compile(r"Recovery threshold ([0-9.]+(?:e-?[0-9]+)?)")


def recycling_recovery_threshold(s: float, r: float, m: float, q: float) -> float:
    """The recovery threshold of dP/dt = L - s P + r P^q / (m^q + P^q): the load at the fold
    where the turbid branch ends, i.e. the local minimum of L(P) = s P - r P^q / (m^q + P^q).

    Folds where dL/dP = 0: s = r q m^q P^(q-1) / (m^q + P^q)^2, found by scipy's brentq between
    sign changes on a grid (the recycling model of Carpenter, Ludwig & Brock 1999, Ecological
    Applications 9:751-771, appendix, in dimensional form).
    """

    def slope(p):
        return s - r * q * m**q * p ** (q - 1) / (m**q + p**q) ** 2

    grid = np.linspace(1e-6, 20 * m, 20_001)
    values = slope(grid)
    roots = [
        brentq(slope, grid[i], grid[i + 1])
        for i in np.flatnonzero(np.sign(values[:-1]) != np.sign(values[1:]))
    ]
    assert len(roots) == 2, roots  # two folds: a hysteresis window
    upper = max(roots)
    return s * upper - r * upper**q / (m**q + upper**q)


@pytest.fixture
def ui(page, served, shots, request):
    """The page with the app open (alder-mere.toml loaded), and small helpers."""
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    step = iter(range(1, 100))
    prefix = request.node.name.removeprefix("test_")[:40]

    class Ui:
        summary = page.locator(f"#{ids.SUMMARY}")

        @staticmethod
        def shot(name: str, full: bool = True) -> None:
            path = shots / f"shell-{prefix}-{next(step):02d}-{name}.png"
            page.screenshot(path=str(path), full_page=full)

        @staticmethod
        def open_page(width: int = 1500, height: int = 1000) -> None:
            page.set_viewport_size({"width": width, "height": height})
            page.goto(served["url"])
            expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text("Loaded alder-mere.toml")
            expect(page.locator(dom_id(ids.schedule_result(0)))).to_contain_text("total cost")
            expect(Ui.summary).to_contain_text("Recovery threshold")

        @staticmethod
        def recovery_shown() -> float:
            return float(THRESHOLD.search(Ui.summary.inner_text()).group(1))

    return Ui


def test_result_tabs_work_from_the_keyboard_and_the_page_has_a_language(page, ui):
    """WAI-ARIA Authoring Practices 1.2, "Tabs" pattern (W3C, 2023): a tablist of tabs with
    aria-selected, one tab in the Tab order, arrow keys move focus, Enter / Space select."""
    from playwright.sync_api import expect

    ui.open_page()
    assert page.evaluate("document.documentElement.lang") == "en"
    tablist = page.locator(f"#{ids.TABS}")
    expect(tablist).to_have_attribute("role", "tablist")
    tabs = tablist.locator("[role=tab]")
    expect(tabs).to_have_count(8)
    expect(tabs.nth(0)).to_have_attribute("aria-selected", "true")
    expect(tabs.nth(1)).to_have_attribute("aria-selected", "false")
    expect(page.locator("[role=tabpanel]")).to_have_count(1)

    page.locator(f"#{ids.SUMMARY} summary").first.focus()  # just before the result area
    for _ in range(40):
        page.keyboard.press("Tab")
        if page.evaluate("document.activeElement.getAttribute('role')") == "tab":
            break
    focused = page.evaluate("document.activeElement.textContent")
    assert focused == "Equilibrium diagram", focused  # Tab reaches the selected tab
    page.keyboard.press("ArrowRight")
    assert page.evaluate("document.activeElement.textContent") == "Over time"
    expect(tabs.nth(1)).to_have_attribute("aria-selected", "false")  # moved, not selected
    page.keyboard.press("Enter")
    expect(tabs.nth(1)).to_have_attribute("aria-selected", "true")
    expect(tabs.nth(0)).to_have_attribute("aria-selected", "false")
    expect(page.locator(f"#{ids.SERIES_GRAPH}")).to_be_visible()
    expect(page.locator("[role=tabpanel]")).to_have_attribute(
        "aria-labelledby", tabs.nth(1).get_attribute("id")
    )
    page.keyboard.press("ArrowLeft")
    page.keyboard.press(" ")
    expect(tabs.nth(0)).to_have_attribute("aria-selected", "true")
    ui.shot("tabs-by-keyboard")


def test_a_phone_sees_the_results_first(page, ui):
    """On a 390 px wide screen the lake's verdict comes before the editor, on the first screen
    (common practice, no source: a phone shows the answer before the inputs)."""
    ui.open_page(width=390, height=844)
    summary = ui.summary.bounding_box()
    sidebar = page.locator(".sidebar").bounding_box()
    ui.shot("phone-top", full=False)
    ui.shot("phone-whole")
    assert summary["y"] < sidebar["y"]
    assert summary["y"] < 844 / 2, summary


def test_a_floor_above_today_is_blamed_on_the_floor(page, ui):
    """The message names the field at fault (Floor) with the card number from 1."""
    from playwright.sync_api import expect

    ui.open_page()
    high = CONTROL["range"][1]
    floor = round((TODAY + high) / 2, 6)  # above today's value, inside the control's range
    assert floor > ALDER["schedules"][DEEP_CUT]["relax_to"]
    field = page.locator(dom_id(ids.schedule_field(DEEP_CUT, "floor")))
    field.fill(drafts.number_text(floor))
    field.press("Enter")
    message = page.locator(dom_id(ids.field_message(DEEP_CUT, "floor")))
    expect(message).to_contain_text("Floor:")
    expect(message).to_contain_text("above today's value")
    expect(page.locator(dom_id(ids.field_message(DEEP_CUT, "relax_to")))).to_have_text("")
    assert "schedules." not in page.locator(f"#{ids.RECOMPUTE_STATUS}").inner_text()
    ui.shot("floor-message")


def test_refused_uploads_say_why(page, ui):
    """A file over the size limit, and a file of a type the box does not take, each get a
    message (the browser refuses them before the server sees them)."""
    from playwright.sync_api import expect

    ui.open_page()
    huge = b"# " + b"x" * (4 * MAX_SCENARIO_BYTES + 10)
    page.set_input_files(
        f"#{ids.UPLOAD} input[type=file]",
        files=[{"name": "huge.toml", "mimeType": "application/toml", "buffer": huge}],
    )
    message = page.locator(f"#{ids.LOAD_MESSAGE}")
    expect(message).to_contain_text("huge.toml was not loaded")
    expect(message).to_contain_text(f"more than the {MAX_SCENARIO_BYTES / 1e6:g} MB")
    ui.shot("oversize-upload")

    page.get_by_role("tab", name="Monitoring data").click()
    page.set_input_files(
        f"#{ids.DATA_UPLOAD} input[type=file]",
        files=[{"name": "record.xlsx", "mimeType": "application/vnd.ms-excel", "buffer": b"PK"}],
    )
    data_message = page.locator(f"#{ids.DATA_MESSAGE}")
    expect(data_message).to_contain_text("record.xlsx was not loaded")
    expect(data_message).to_contain_text(".csv")
    ui.shot("wrong-type-upload")


def test_a_model_parameter_edit_moves_the_threshold_and_can_be_undone(page, ui):
    """Editing the maximum recycling rate r moves the recovery threshold to the value scipy's
    brentq finds on the model (Carpenter, Ludwig & Brock 1999, Ecological Applications
    9:751-771); Undo brings back the old value and the old threshold."""
    from playwright.sync_api import expect

    assert ALDER["model"]["kind"] == "recycling"
    s, r, m, q = (PARAMETERS[k] for k in ("s", "r", "m", "q"))
    before = recycling_recovery_threshold(s, r, m, q)
    new_r = round(0.8 * r, 6)
    after = recycling_recovery_threshold(s, new_r, m, q)
    assert after > 0 and abs(after - before) > 0.05 * before  # a move the page must show

    ui.open_page()
    assert ui.recovery_shown() == pytest.approx(before, rel=1e-3)
    page.locator(".parameter-box > summary").click()
    field = page.locator(dom_id(ids.parameter_field("r")))
    expect(page.locator(f"label[for='{field.get_attribute('id')}']")).to_contain_text("(r)")
    field.fill(drafts.number_text(new_r))
    field.press("Enter")
    expect(ui.summary).not_to_contain_text(f"Recovery threshold {before:.4g}")
    assert ui.recovery_shown() == pytest.approx(after, rel=1e-3)
    expect(page.locator(f"#{ids.EDIT_STATE}")).not_to_contain_text("No unsaved changes")
    ui.shot("parameter-edited")

    page.locator(f"#{ids.UNDO_BUTTON}").click()
    expect(page.locator(f"#{ids.UNDO_MESSAGE}")).to_contain_text("(r)")
    expect(field).to_have_value(drafts.number_text(r))
    expect(ui.summary).to_contain_text(f"Recovery threshold {before:.4g}")
    ui.shot("parameter-undone")

    field.fill("-1")
    field.press("Enter")
    message = page.locator(dom_id(ids.parameter_message("r")))
    expect(message).to_contain_text(drafts.parameter_label(ALDER, "r"))
    expect(message).to_contain_text("at least 0")
    ui.shot("parameter-refused")


def test_an_in_lake_measure_added_in_the_editor_gets_a_verdict(page, ui):
    """The card's new in-lake measure (catalogue entry, lake type and parameter filled in) is
    simulated like any action; the verdict shown is the planner's for that scenario."""
    from playwright.sync_api import expect

    expected_data = drafts.add_measure(ALDER, 0)
    scenario = compute.scenario_of(expected_data)
    expected = verdict_text(scenario, compute.comparison_of(scenario).outcomes[0])

    ui.open_page()
    actions = len(ALDER["schedules"][0].get("actions", []))
    page.locator(dom_id(ids.schedule_button(0, "measure"))).click()
    card = page.locator(".schedule-card").first
    expect(card.locator("legend").nth(actions)).to_contain_text(
        "In-lake measure from the catalogue"
    )
    measure = page.locator(dom_id(ids.action_field(0, actions, "measure")))
    expect(measure).to_have_value(expected_data["schedules"][0]["actions"][-1]["measure"])
    result = page.locator(dom_id(ids.schedule_result(0)))
    expect(result.locator(".verdict")).to_have_text(expected)
    expect(result).to_contain_text("total cost")
    ui.shot("in-lake-measure")


def test_monitoring_messages_name_no_command_line_option():
    """A record without the load column: the planner's message quotes the command line's
    option; the app's words name what to do in the file instead (common practice, no source:
    an app's messages speak of what its user can see)."""
    from planner.calibration import observations_for
    from planner.errors import InputError
    from planner.monitoring import parse_record

    scenario = load_scenario(default_scenario_dir() / "alder-mere.toml")
    record = parse_record("year,TP [g P / m2]\n2000,0.5\n2001,0.6\n", "record.csv")
    with pytest.raises(InputError) as raised:
        observations_for(record, scenario)
    planner_text = " ".join(str(p) for p in raised.value.problems)
    assert "--" in planner_text  # the planner's own (command-line) wording
    app_text = " ".join(str(drafts.problem_in_app_words(p)) for p in raised.value.problems)
    assert "--" not in app_text and "record.csv" in app_text
    assert "file's header" in app_text
