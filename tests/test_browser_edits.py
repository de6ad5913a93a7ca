"""No stale results and no lost edits, in a real headless Chromium (Debian's ``chromium``).

- A result computed for one scenario (the slow sweep, the uncertainty run) is marked out of date
  as soon as the scenario changes (another file picked, a schedule edited), greyed out, and its
  downloads are refused with the reason beside them; running it again (or undoing the edit)
  makes it current again.
- Unsaved edits are shown; the page asks before it is reloaded and before another file or an
  upload replaces them; Delete asks first and Undo / Redo (buttons or Ctrl+Z / Ctrl+Y) walk the
  edits back and forth.
- "Save" writes the file the scenario came from and "Save as" a new one, both keeping the file's
  comments (the "Invented lake" header, the parameters' inline comments); a file replaced keeps
  its permissions, a new one gets 0644 under umask 022.

A screenshot of each step goes to a temporary folder (``PLANNER_SCREENSHOTS`` names another).
"""

from __future__ import annotations

import re
import stat

import pytest

from planner.scenario import load_scenario, parse_scenario, scenario_from_data
from tests.browser_support import BROWSER_MARKS, TIMEOUT_MS, dom_id
from webapp import compute, drafts, ids
from webapp.files import default_scenario_dir

pytestmark = BROWSER_MARKS

HEADER = "# Invented lake and invented numbers, for demonstration only."
ALDER = compute.dump(load_scenario(default_scenario_dir() / "alder-mere.toml"))
# The demo's first overshoot schedule; its floor may be raised up to its relax-to value.
DEEP_CUT = next(i for i, s in enumerate(ALDER["schedules"]) if s["kind"] == "overshoot")
DEEP_NAME = ALDER["schedules"][DEEP_CUT]["name"]
FLOOR = drafts.number_text(ALDER["schedules"][DEEP_CUT]["floor"])
RAISED = drafts.number_text(ALDER["schedules"][DEEP_CUT]["relax_to"])
BETWEEN = drafts.number_text(
    round((ALDER["schedules"][DEEP_CUT]["floor"] + ALDER["schedules"][DEEP_CUT]["relax_to"]) / 2, 6)
)
CARD = DEEP_CUT + 1  # as the cards number it
COUNT = len(ALDER["schedules"])
TARNBY_COUNT = len(load_scenario(default_scenario_dir() / "tarnby-water.toml").schedules)


def comments(text: str) -> list[str]:
    return [line[line.index("#") :].strip() for line in text.splitlines() if "#" in line]


@pytest.fixture
def ui(page, served, shots, request):
    """The page with the app open (alder-mere.toml loaded), and small helpers."""
    from playwright.sync_api import expect

    expect.set_options(timeout=TIMEOUT_MS)
    page.set_default_timeout(TIMEOUT_MS)
    page.set_viewport_size({"width": 1500, "height": 1000})
    step = iter(range(1, 100))
    prefix = request.node.name.removeprefix("test_")[:40]

    class Ui:
        cards = page.locator(".schedule-card")
        state = page.locator(f"#{ids.EDIT_STATE}")

        @staticmethod
        def shot(name: str) -> None:
            path = shots / f"edits-{prefix}-{next(step):02d}-{name}.png"
            page.screenshot(path=str(path), full_page=True)

        @staticmethod
        def open_page() -> None:
            page.goto(served["url"])
            expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text("Loaded alder-mere.toml")
            expect(Ui.state).to_contain_text("No unsaved changes")
            expect(page.locator(dom_id(ids.schedule_result(0)))).to_contain_text("total cost")

        @staticmethod
        def pick(file_name: str) -> None:
            page.locator(f"#{ids.PICKER}").click()
            page.get_by_role("option", name=re.compile(re.escape(file_name))).click()

        @staticmethod
        def shows(title: str) -> None:
            """Wait until the working scenario is the one titled ``title`` (its diagram drawn)."""
            expect(page.locator(f"#{ids.DIAGRAM_GRAPH} .gtitle")).to_contain_text(title)

        @staticmethod
        def field(index: int, name: str):
            return page.locator(dom_id(ids.schedule_field(index, name)))

        @staticmethod
        def type_into(index: int, name: str, value: str) -> None:
            box = Ui.field(index, name)
            box.fill(value)
            box.press("Enter")

        @staticmethod
        def tab(label: str) -> None:
            page.get_by_text(label, exact=True).click()

        @staticmethod
        def leave_guard() -> bool:
            """Whether the page's beforeunload handler holds the page (a synthetic event)."""
            return page.evaluate(
                "() => { const e = new Event('beforeunload', {cancelable: true});"
                " window.dispatchEvent(e); return e.defaultPrevented; }"
            )

        @staticmethod
        def answer(accept: bool) -> list[str]:
            """Answer the next browser dialog; returns the list its message is put in."""
            seen: list[str] = []

            def handle(dialog):
                seen.append(dialog.message)
                dialog.accept() if accept else dialog.dismiss()

            page.once("dialog", handle)
            return seen

    return Ui


def test_another_lakes_sweep_is_marked_stale_and_its_export_refused(page, ui):
    from playwright.sync_api import expect

    ui.open_page()
    ui.pick("tarnby-water.toml")
    expect(ui.cards).to_have_count(TARNBY_COUNT)
    ui.shows("Tarnby Water")
    ui.tab("Slow sweep")
    page.locator(f"#{ids.SWEEP_STEP}").fill("0.01")
    page.locator(f"#{ids.SWEEP_RUN}").click()
    graph = page.locator(f"#{ids.SWEEP_GRAPH}")
    expect(graph.locator(".gtitle")).to_contain_text("Tarnby Water")
    banner = page.locator(dom_id(ids.stale_banner("sweep")))
    png = page.locator(dom_id(ids.export_button("sweep", "png")))
    expect(banner).to_be_hidden()
    expect(png).to_be_enabled()
    ui.shot("tarnby-sweep")

    # Another lake: the first lake's sweep is marked, greyed out, and cannot be downloaded.
    ui.pick("alder-mere.toml")
    expect(ui.cards).to_have_count(COUNT)
    expect(banner).to_be_visible()
    expect(banner).to_contain_text("computed for tarnby-water.toml")
    expect(banner).to_contain_text("run the sweep again")
    expect(graph).to_have_css("opacity", "0.4")
    expect(png).to_be_disabled()
    expect(page.locator(dom_id(ids.export_button("sweep", "html")))).to_be_disabled()
    expect(page.locator(dom_id(ids.export_message("sweep")))).to_contain_text(
        "Not available: The sweep was computed for tarnby-water.toml"
    )
    ui.shot("stale-sweep-refused")

    # Run again for this lake: current again, and downloadable.
    page.locator(f"#{ids.SWEEP_RUN}").click()
    expect(graph.locator(".gtitle")).to_contain_text("Alder Mere")
    expect(banner).to_be_hidden()
    expect(graph).to_have_css("opacity", "1")
    expect(png).to_be_enabled()
    expect(page.locator(dom_id(ids.export_message("sweep")))).to_be_empty()
    ui.shot("sweep-current-again")


def test_an_edit_after_an_ensemble_marks_it_stale_and_undo_makes_it_current(page, ui):
    from playwright.sync_api import expect

    ui.open_page()
    ui.tab("Uncertainty")
    page.locator(f"#{ids.ENSEMBLE_MEMBERS}").fill("40")
    page.locator(f"#{ids.ENSEMBLE_RUN}").click()
    graph = page.locator(f"#{ids.ENSEMBLE_GRAPH}")
    expect(graph.locator(".gtitle")).to_contain_text("chance of meeting the target")
    banner = page.locator(dom_id(ids.stale_banner("ensemble")))
    expect(banner).to_be_hidden()

    ui.type_into(DEEP_CUT, "floor", RAISED)
    expect(ui.state).to_contain_text("Unsaved changes")
    expect(banner).to_be_visible()
    expect(banner).to_contain_text("computed for an earlier version of this scenario")
    expect(banner).to_contain_text("run it again")
    expect(graph).to_have_css("opacity", "0.4")
    expect(page.locator(f"#{ids.ENSEMBLE_TABLE}")).to_have_css("opacity", "0.4")
    ui.shot("ensemble-stale-after-edit")

    # Undo brings back the very scenario the ensemble was run for: current again.
    page.locator(f"#{ids.UNDO_BUTTON}").click()
    expect(ui.field(DEEP_CUT, "floor")).to_have_value(FLOOR)
    expect(banner).to_be_hidden()
    expect(graph).to_have_css("opacity", "1")
    ui.shot("ensemble-current-after-undo")


def test_unsaved_edits_are_shown_and_guarded(page, ui, tmp_path):
    from playwright.sync_api import expect

    ui.open_page()
    assert not ui.leave_guard()
    assert not page.title().startswith("\u25cf")

    ui.type_into(DEEP_CUT, "floor", RAISED)
    expect(ui.state).to_contain_text("Unsaved changes")
    expect(page.locator(f"#{ids.SAVE_FILE}")).to_be_enabled()
    expect(page).to_have_title(re.compile("^\u25cf "))
    assert ui.leave_guard()
    ui.shot("unsaved-indicator")

    # Another file over unsaved edits: asked first; Cancel keeps everything as it was.
    question = ui.answer(accept=False)
    ui.pick("tarnby-water.toml")
    expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text("Kept your changes")
    assert question and "unsaved changes" in question[0] and "tarnby-water.toml" in question[0]
    expect(page.locator(f"#{ids.PICKER}")).to_contain_text("alder-mere.toml")
    expect(ui.cards).to_have_count(COUNT)
    expect(ui.field(DEEP_CUT, "floor")).to_have_value(RAISED)
    ui.shot("switch-cancelled")

    # An upload over unsaved edits: asked first too; Cancel keeps the edits.
    upload = tmp_path / "tarnby-copy.toml"
    upload.write_text(
        (default_scenario_dir() / "tarnby-water.toml").read_text(encoding="utf-8"),
        encoding="utf-8",
    )
    question = ui.answer(accept=False)
    page.locator(f"#{ids.UPLOAD} input[type=file]").set_input_files(str(upload))
    expect(page.locator(f"#{ids.LOAD_MESSAGE}")).to_contain_text(
        "Kept your changes: tarnby-copy.toml was not loaded"
    )
    assert question and "Loading the uploaded file replaces them" in question[0]
    expect(ui.cards).to_have_count(COUNT)
    expect(ui.field(DEEP_CUT, "floor")).to_have_value(RAISED)

    # Reloading asks too (the browser's own "leave site?" question).
    kinds: list[str] = []

    def leave(dialog):
        kinds.append(dialog.type)
        dialog.accept()

    page.once("dialog", leave)
    page.reload()
    assert kinds == ["beforeunload"]
    expect(ui.state).to_contain_text("No unsaved changes")

    # With nothing unsaved another file opens at once; over new edits, OK discards them.
    ui.type_into(DEEP_CUT, "floor", BETWEEN)
    expect(ui.state).to_contain_text("Unsaved changes")
    question = ui.answer(accept=True)
    ui.pick("tarnby-water.toml")
    expect(ui.cards).to_have_count(TARNBY_COUNT)
    assert question
    expect(ui.state).to_contain_text("tarnby-water.toml")
    expect(ui.state).to_contain_text("No unsaved changes")
    expect(page).not_to_have_title(re.compile("^\u25cf"))  # set with the leave guard
    assert not ui.leave_guard()
    ui.shot("switched-after-ok")


def test_delete_asks_first_and_undo_redo_walk_the_edits(page, ui):
    from playwright.sync_api import expect

    ui.open_page()
    expect(ui.field(DEEP_CUT, "name")).to_have_value(DEEP_NAME)
    delete = page.locator(dom_id(ids.schedule_button(DEEP_CUT, "delete")))

    question = ui.answer(accept=False)
    delete.click()
    expect(page.locator(f"#{ids.UNDO_BUTTON}")).to_be_disabled()
    expect(ui.cards).to_have_count(COUNT)
    assert question and question[0].startswith(f"Delete schedule {CARD}, \u201c{DEEP_NAME}\u201d?")

    question = ui.answer(accept=True)
    delete.click()
    expect(ui.cards).to_have_count(COUNT - 1)
    expect(page.locator(f"#{ids.UNDO_MESSAGE}")).to_contain_text(
        f"Deleted schedule {CARD}, \u201c{DEEP_NAME}\u201d"
    )
    expect(ui.state).to_contain_text("Unsaved changes")
    ui.shot("deleted")

    page.locator(f"#{ids.UNDO_BUTTON}").click()
    expect(ui.cards).to_have_count(COUNT)
    expect(ui.field(DEEP_CUT, "name")).to_have_value(DEEP_NAME)
    expect(page.locator(f"#{ids.UNDO_MESSAGE}")).to_contain_text("Undone: schedule")
    expect(ui.state).to_contain_text("No unsaved changes")  # back to what the file holds
    ui.shot("delete-undone")

    page.locator(f"#{ids.REDO_BUTTON}").click()
    expect(ui.cards).to_have_count(COUNT - 1)
    expect(page.locator(f"#{ids.UNDO_MESSAGE}")).to_contain_text("Redone: schedule")

    # The keyboard: Ctrl+Z outside a text field undoes, Ctrl+Y redoes.
    page.locator("h1").click()
    page.keyboard.press("Control+z")
    expect(ui.cards).to_have_count(COUNT)
    page.keyboard.press("Control+y")
    expect(ui.cards).to_have_count(COUNT - 1)
    page.keyboard.press("Control+z")
    expect(ui.cards).to_have_count(COUNT)

    # A typed value is undone as one edit, back to the value before it. (Typing before the
    # editor has redrawn what the last Ctrl+Z put back would type into cards about to go.)
    page.wait_for_load_state("networkidle")
    expect(ui.state).to_contain_text("No unsaved changes")
    ui.type_into(DEEP_CUT, "floor", RAISED)
    expect(page.locator(f"#{ids.UNDO_BUTTON}")).to_have_attribute(
        "title", f"Undo: Floor of schedule {CARD} changed (Ctrl+Z)"
    )
    page.locator("h1").click()
    page.keyboard.press("Control+z")
    expect(ui.field(DEEP_CUT, "floor")).to_have_value(FLOOR)
    expect(page.locator(f"#{ids.UNDO_MESSAGE}")).to_contain_text(
        f"Undone: Floor of schedule {CARD} changed"
    )
    expect(ui.state).to_contain_text("No unsaved changes")  # the file's scenario again
    ui.shot("edit-undone-by-keyboard")


def test_save_and_save_as_keep_comments_and_permissions(page, ui, served, tmp_path):
    from playwright.sync_api import expect

    scenarios = served["saved"].parent / "scenarios"
    target = scenarios / "alder-save.toml"
    original = (default_scenario_dir() / "alder-mere.toml").read_text(encoding="utf-8")
    target.write_text(original, encoding="utf-8")
    target.chmod(0o640)

    ui.open_page()
    ui.pick("alder-save.toml")
    expect(ui.state).to_contain_text("alder-save.toml")
    expect(page.locator(f"#{ids.SAVE_FILE}")).to_be_disabled()  # nothing to save yet
    ui.type_into(DEEP_CUT, "floor", RAISED)
    expect(ui.state).to_contain_text("Unsaved changes")
    page.locator(f"#{ids.SAVE_FILE}").click()
    expect(page.locator(f"#{ids.SAVE_MESSAGE}")).to_contain_text("Saved alder-save.toml")
    expect(ui.state).to_contain_text("No unsaved changes")
    ui.shot("saved")

    text = target.read_text(encoding="utf-8")
    expected = {**ALDER, "schedules": [dict(s) for s in ALDER["schedules"]]}
    expected["schedules"][DEEP_CUT]["floor"] = float(RAISED)
    assert load_scenario(target) == scenario_from_data(expected)
    assert text.startswith(HEADER + "\n") and comments(text) == comments(original)
    changed = [
        (old, new)
        for old, new in zip(original.splitlines(), text.splitlines(), strict=True)
        if old != new
    ]
    assert [new.split("#")[0].strip() for _, new in changed] == [f"floor = {RAISED}"]
    assert stat.S_IMODE(target.stat().st_mode) == 0o640

    # Changed on disk meanwhile (another window saved it): Save asks; Cancel writes nothing.
    outside = text.replace("[simulation]\n", "[simulation]\nsettle_cap = 30000.0\n", 1)
    assert parse_scenario(outside) != parse_scenario(text)
    target.write_text(outside, encoding="utf-8")
    ui.type_into(DEEP_CUT, "floor", BETWEEN)
    page.locator(f"#{ids.SAVE_FILE}").click()
    expect(page.locator(f"#{ids.SAVE_CONFIRM}")).to_contain_text("changed on disk")
    ui.shot("changed-on-disk-question")
    page.locator(f"#{ids.SAVE_CANCEL}").click()
    expect(page.locator(f"#{ids.SAVE_CONFIRM}")).to_be_hidden()
    assert target.read_text(encoding="utf-8") == outside
    page.locator(f"#{ids.SAVE_FILE}").click()
    page.locator(f"#{ids.SAVE_OVERWRITE}").click()
    expect(page.locator(f"#{ids.SAVE_MESSAGE}")).to_contain_text("Saved alder-save.toml")
    assert load_scenario(target).schedules[DEEP_CUT].floor == float(BETWEEN)
    assert target.read_text(encoding="utf-8").startswith(HEADER)

    # Save as: a new file in the save folder, comments kept, the usual permissions.
    page.locator(f"#{ids.SAVE_NAME}").fill("alder-plan")
    page.locator(f"#{ids.SAVE_BUTTON}").click()
    expect(page.locator(f"#{ids.SAVE_MESSAGE}")).to_contain_text("Saved alder-plan.toml")
    expect(ui.state).to_contain_text("alder-plan.toml")
    expect(ui.state).to_contain_text("No unsaved changes")
    expect(page.locator(f"#{ids.PICKER}")).to_contain_text("alder-plan.toml")
    new = served["saved"] / "alder-plan.toml"
    assert new.read_text(encoding="utf-8").startswith(HEADER)
    assert comments(new.read_text(encoding="utf-8")) == comments(original)
    assert stat.S_IMODE(new.stat().st_mode) == 0o644  # the test process's umask is 022
    assert load_scenario(new) == load_scenario(target)
    ui.shot("saved-as")

    # An upload has no file here: Save is off (use Save as), and Save as keeps its comments.
    upload = tmp_path / "uploaded-lake.toml"
    upload.write_text(original.replace("# Invented lake", "# Uploaded: invented lake"), "utf-8")
    page.locator(f"#{ids.UPLOAD} input[type=file]").set_input_files(str(upload))
    expect(ui.state).to_contain_text("uploaded; not in a scenario folder yet")
    ui.type_into(0, "name", "First schedule, renamed after the upload")
    expect(ui.state).to_contain_text("Unsaved changes")
    expect(page.locator(f"#{ids.SAVE_FILE}")).to_be_disabled()
    page.locator(f"#{ids.SAVE_NAME}").fill("uploaded-plan")
    page.locator(f"#{ids.SAVE_BUTTON}").click()
    expect(page.locator(f"#{ids.SAVE_MESSAGE}")).to_contain_text("Saved uploaded-plan.toml")
    kept = (served["saved"] / "uploaded-plan.toml").read_text(encoding="utf-8")
    assert kept.startswith("# Uploaded: invented lake")
    assert 'name = "First schedule, renamed after the upload"' in kept
    ui.shot("upload-saved-as")


def test_the_cheapest_schedule_of_an_earlier_version_cannot_be_added(page, ui):
    from playwright.sync_api import expect

    ui.open_page()
    ui.tab("Recovery frontier")
    page.locator(f"#{ids.SEARCH_RUN}").click()
    expect(page.locator(f"#{ids.SEARCH_SUMMARY}")).to_contain_text("Cheapest found")
    add = page.locator(f"#{ids.SEARCH_ADD}")
    message = page.locator(f"#{ids.SEARCH_ADD_MESSAGE}")
    banner = page.locator(dom_id(ids.stale_banner("search")))
    expect(add).to_be_enabled()

    # An edit: the schedule found belongs to the scenario before it, so it cannot be added.
    ui.type_into(DEEP_CUT, "floor", RAISED)
    expect(add).to_be_disabled()
    expect(message).to_contain_text(
        "Not available: The cheapest schedule was computed for an earlier version of this "
        "scenario; find the cheapest schedule again first."
    )
    expect(banner).to_be_visible()
    expect(page.locator(f"#{ids.SEARCH_GRAPH}")).to_have_css("opacity", "0.4")
    ui.shot("add-refused-after-edit")

    # Undo: the same scenario as the search's again, so it can be added.
    page.locator(f"#{ids.UNDO_BUTTON}").click()
    expect(ui.field(DEEP_CUT, "floor")).to_have_value(FLOOR)
    expect(add).to_be_enabled()
    expect(message).to_be_empty()
    expect(banner).to_be_hidden()
    add.click()
    expect(ui.cards).to_have_count(COUNT + 1)
    # Adding it changed the scenario: the result is now out of date, the "Added" line stays.
    expect(banner).to_be_visible()
    expect(add).to_be_disabled()
    expect(message).to_contain_text("Added")
    expect(ui.state).to_contain_text("Unsaved changes")
    ui.shot("found-schedule-added")
