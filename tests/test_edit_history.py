"""Unsaved edits, undo / redo, delete with a question, saving back, and results marked out of
date: the app's rules as plain functions, without a browser (tests/test_browser_edits.py drives
the same in Chromium).

The rules follow common practice for document editors, no source: an edit is unsaved until
written to its file; opening another document over unsaved edits asks first; undo restores the
version before the last change and redo the one undone, a new change clearing what could be
redone; a result computed from another version of the document is not presented as current.
"""

from __future__ import annotations

import shutil
import stat

import pytest
from dash import no_update

from planner.scenario import load_scenario
from webapp import compute, drafts, files, ids
from webapp.settings import Settings
from webapp.views import editor, scenario_panel, staleness

DEMOS = files.default_scenario_dir()
ALDER = "alder-mere.toml"
HEADER = "# Invented lake and invented numbers, for demonstration only."


def working_of(data: dict, source: str = ALDER, serial: int = 1, stale: bool = False) -> dict:
    valid = compute.dump(compute.scenario_of(data))
    key = compute.scenario_key(valid)
    return {"source": source, "data": valid, "key": key, "stale": stale, "serial": serial}


def alder_data() -> dict:
    return compute.dump(load_scenario(DEMOS / ALDER))


# The demo's first overshoot schedule (card DEEP + 1), whose floor the tests move.
DEEP = next(i for i, s in enumerate(alder_data()["schedules"]) if s["kind"] == "overshoot")
DEEP_NAME = alder_data()["schedules"][DEEP]["name"]
FLOOR_CHANGED = f"Floor of schedule {DEEP + 1} changed"


def with_floor(data: dict, fraction: float) -> dict:
    """``data`` with that schedule's floor at ``fraction`` of its relax-to value."""
    data = {**data, "schedules": [dict(s) for s in data["schedules"]]}
    schedule = data["schedules"][DEEP]
    schedule["floor"] = round(fraction * schedule["relax_to"], 6)
    return data


@pytest.fixture
def settings(tmp_path):
    scenarios = tmp_path / "scenarios"
    shutil.copytree(DEMOS, scenarios)
    saved = tmp_path / "saved"
    saved.mkdir()
    return Settings(
        (files.Folder("Scenarios", scenarios), files.Folder("Saved", saved)), 1, tmp_path / "cache"
    )


# ---------------------------------------------------------------------------------------------
# history and unsaved edits


def test_undo_and_redo_walk_valid_versions_and_a_new_edit_clears_redo():
    base = {"key": "k0", "serial": 1, "opened": 1}
    versions = [working_of(with_floor(alder_data(), f)) for f in (0.4, 0.6, 0.8)]
    history = drafts.remember(None, versions[0], base)
    assert history["present"]["key"] == versions[0]["key"] and history["past"] == []
    assert drafts.remember(history, versions[0], base) is None  # the same version again
    assert drafts.remember(history, {**versions[1], "stale": True}, base) is None  # not valid
    for version in versions[1:]:
        history = drafts.remember(history, version, base)
    assert [e["key"] for e in history["past"]] == [v["key"] for v in versions[:2]]
    assert history["present"]["what"] == FLOOR_CHANGED

    history, shown, what = drafts.step(history, -1)
    assert shown["key"] == versions[1]["key"] and what == FLOOR_CHANGED
    history, shown, _ = drafts.step(history, +1)
    assert shown["key"] == versions[2]["key"] and drafts.step(history, +1) is None
    history, _, _ = drafts.step(history, -1)
    history = drafts.remember(history, working_of(with_floor(alder_data(), 0.9)), base)
    assert history["future"] == []  # a new edit clears what could be redone
    # Another file opened: a fresh history.
    fresh = drafts.remember(history, versions[0], {**base, "opened": 2})
    assert fresh["past"] == [] and fresh["future"] == []


def test_an_answer_arriving_late_is_not_an_edit():
    """Undo, then redo at once: the working store of the undo may arrive after the redo."""
    base = {"key": "k0", "serial": 1, "opened": 1}
    first, second = (working_of(with_floor(alder_data(), f), serial=1) for f in (0.4, 0.7))
    history = drafts.remember(drafts.remember(None, first, base), second, base)
    history, _, _ = drafts.step(history, -1)  # loaded as serial 2
    history, _, _ = drafts.step(history, +1)  # loaded as serial 3
    late = {**first, "serial": 2}
    assert drafts.remember(history, late, base, latest=3) is None
    assert drafts.remember(history, {**second, "serial": 3}, base, latest=3) is None


def test_the_history_is_bounded():
    base = {"key": "k0", "serial": 1, "opened": 1}
    history = None
    for i in range(drafts.HISTORY_LIMIT + 7):
        history = drafts.remember(
            history, working_of(with_floor(alder_data(), 0.2 + i / 100)), base
        )
    assert len(history["past"]) == drafts.HISTORY_LIMIT


def test_unsaved_means_different_from_the_file_or_values_to_fix():
    working = working_of(alder_data())
    baseline = {"key": working["key"], "serial": 1}
    assert not drafts.unsaved(working, baseline)
    assert drafts.unsaved({**working, "stale": True}, baseline)
    edited = working_of(with_floor(alder_data(), 0.7))
    assert drafts.unsaved(edited, baseline)
    assert not drafts.unsaved(edited, {**baseline, "serial": 2})  # editor not caught up yet
    assert not drafts.unsaved(None, baseline) and not drafts.unsaved(working, None)


def test_changes_are_named_in_the_editors_words():
    data = alder_data()
    gone = data["schedules"][2]["name"]
    assert (
        drafts.change_words(data, drafts.delete(data, 2)) == f"schedule \u201c{gone}\u201d deleted"
    )
    assert drafts.change_words(data, drafts.add(data, "path")) == (
        "schedule \u201cNew path schedule\u201d added"
    )
    changed = with_floor(data, 0.7)
    changed["schedules"][DEEP]["hold_years"] = 9.0
    assert drafts.change_words(data, changed) == (
        f"Floor, Years at the floor of schedule {DEEP + 1} changed"
    )


def test_undo_redo_restores_through_the_loaded_store():
    first, second = (working_of(with_floor(alder_data(), f)) for f in (0.4, 0.7))
    base = {"key": first["key"], "serial": 1, "opened": 1}
    history = drafts.remember(drafts.remember(None, first, base), second, base)
    loaded = {"source": ALDER, "serial": 4}
    store, new, undo_off, redo_off, *_, text = editor.undo_redo(
        1, None, history, loaded, second, trigger=ids.UNDO_BUTTON
    )
    assert store["data"] == first["data"] and store["serial"] == 5
    assert undo_off and not redo_off and text == f"Undone: {FLOOR_CHANGED}."
    # Values still to fix: Undo drops them (back to the last valid version), history unchanged.
    store, kept, *_, text = editor.undo_redo(
        1, None, history, loaded, {**second, "stale": True}, trigger=ids.UNDO_BUTTON
    )
    assert store["data"] == second["data"] and kept is no_update and "values still" in text
    assert editor.undo_redo(None, 1, history, loaded, second, trigger=ids.REDO_BUTTON)[-1] == (
        "Nothing to redo."
    )


def test_delete_asks_first_and_deletes_what_was_asked_about():
    draft = {"source": ALDER, "data": alder_data(), "serial": 1}
    fields, actions = drafts.editor_values(draft["data"])
    args = [None, None, None, None, "overshoot", draft]
    states = ([t for _, t in fields], [i for i, _ in fields], [t for _, t in actions])
    states += ([i for i, _ in actions],)
    asked = editor.structure(
        *args, *states, None, trigger=ids.schedule_button(DEEP, "delete"), trigger_value=1
    )
    assert asked[:2] == (no_update, no_update) and asked[2] is True
    assert asked[3].startswith(f"Delete schedule {DEEP + 1}, \u201c{DEEP_NAME}\u201d?")
    pending = asked[4]
    cards, new_draft, shown, _, cleared, text = editor.structure(
        *args, *states, pending, trigger=ids.DELETE_CONFIRM, trigger_value=1
    )
    assert len(cards) == len(draft["data"]["schedules"]) - 1
    assert shown is False and cleared is None and text.startswith("Deleted")
    assert DEEP_NAME not in [s["name"] for s in new_draft["data"]["schedules"]]
    moved = {"index": DEEP, "name": "Another schedule"}
    refused = editor.structure(*args, *states, moved, trigger=ids.DELETE_CONFIRM, trigger_value=1)
    assert refused[0] is no_update and refused[-1].startswith("Not deleted")


# ---------------------------------------------------------------------------------------------
# opening over unsaved edits


def opened_alder(settings):
    out = scenario_panel.open_flow(
        f"0/{ALDER}", None, None, None, None, None, None, None, None, settings=settings
    )
    loaded, baseline = out[0], out[3]
    return loaded, baseline, working_of(loaded["data"], serial=loaded["serial"])


def test_picking_another_file_over_unsaved_edits_asks_first(settings):
    loaded, baseline, working = opened_alder(settings)
    assert baseline["file"] == f"0/{ALDER}" and baseline["key"] == working["key"]
    edited = working_of(with_floor(loaded["data"], 0.7), serial=loaded["serial"])
    call = dict(loaded=loaded, working=edited, baseline=baseline)

    def flow(choice, trigger, pending=None, upload=None, name=None):
        return scenario_panel.open_flow(
            choice,
            upload,
            None,
            None,
            name,
            call["loaded"],
            call["working"],
            call["baseline"],
            pending,
            settings=settings,
            trigger=trigger,
        )

    asked = flow("0/tarnby-water.toml", ids.PICKER)
    assert asked[0] is no_update and asked[5] is True and "unsaved changes" in asked[6]
    assert asked[7] == {"kind": "pick", "value": "0/tarnby-water.toml"}
    kept = flow("0/tarnby-water.toml", scenario_panel.CANCELLED, asked[7])
    assert kept[0] is no_update and kept[8] == f"0/{ALDER}" and kept[7] is None
    done = flow("0/tarnby-water.toml", scenario_panel.SUBMITTED, asked[7])
    assert done[0]["source"] == "tarnby-water.toml" and done[3]["file"] == "0/tarnby-water.toml"
    assert done[3]["opened"] == baseline["opened"] + 1
    # The file already open: nothing to do (a picker put back after Cancel lands here).
    assert flow(f"0/{ALDER}", ids.PICKER) == [no_update] * 9
    # A file that does not load: its problems, and the picker back on the file open.
    broken = settings.folders[0].path / "broken.toml"
    broken.write_text('name = "x"\n', encoding="utf-8")
    refused = flow("0/broken.toml", ids.PICKER)
    assert refused[0] is no_update and refused[5] is no_update and refused[8] == f"0/{ALDER}"


def test_an_upload_over_unsaved_edits_asks_and_a_bad_one_just_says_why(settings):
    import base64

    loaded, baseline, _ = opened_alder(settings)
    edited = working_of(with_floor(loaded["data"], 0.7), serial=loaded["serial"])
    text = (DEMOS / "tarnby-water.toml").read_text(encoding="utf-8")
    upload = "data:;base64," + base64.b64encode(text.encode()).decode()
    args = (None, None, "lake.toml", loaded, edited, baseline, None)
    asked = scenario_panel.open_flow(None, upload, *args, settings=settings, trigger=ids.UPLOAD)
    assert asked[5] is True and asked[7] == {"kind": "upload", "name": "lake.toml"}
    assert asked[2] is no_update  # kept until answered
    bad = "data:;base64," + base64.b64encode(b"name = [").decode()
    said = scenario_panel.open_flow(None, bad, *args, settings=settings, trigger=ids.UPLOAD)
    assert said[5] is no_update and "not valid TOML" in str(said[1])
    clean = (None, None, "lake.toml", loaded, None, baseline, None)
    done = scenario_panel.open_flow(None, upload, *clean, settings=settings, trigger=ids.UPLOAD)
    assert done[0]["source"] == "lake.toml" and done[3]["file"] is None and done[4] == text
    assert done[8] is None  # the picker names no file: the scenario shown is the upload


# ---------------------------------------------------------------------------------------------
# saving back


def test_save_writes_back_into_the_file_keeping_comments_and_mode(settings):
    loaded, baseline, _ = opened_alder(settings)
    path = settings.folders[0].path / ALDER
    path.chmod(0o640)
    edited = working_of(with_floor(loaded["data"], 0.7), serial=loaded["serial"])
    message, _, _, _, saved = scenario_panel.save_plain(
        edited, baseline, None, settings=settings, trigger=ids.SAVE_FILE
    )
    assert "Saved alder-mere.toml" in str(message) and saved["key"] == edited["key"]
    text = path.read_text(encoding="utf-8")
    floor = edited["data"]["schedules"][DEEP]["floor"]
    assert text.startswith(HEADER) and f"floor = {floor!r}" in text
    assert stat.S_IMODE(path.stat().st_mode) == 0o640
    assert not drafts.unsaved(edited, saved)

    # Changed on disk since: asked first; the answer "Overwrite" writes.
    outside = text.replace("[simulation]\n", "[simulation]\nsettle_cap = 30000.0\n", 1)
    path.write_text(outside, encoding="utf-8")
    again = working_of(with_floor(loaded["data"], 0.8), serial=loaded["serial"])
    _, style, question, pending, _ = scenario_panel.save_plain(
        again, saved, None, settings=settings, trigger=ids.SAVE_FILE
    )
    assert style["display"] == "block" and "changed on disk" in question
    assert path.read_text(encoding="utf-8") == outside
    scenario_panel.save_plain(again, saved, pending, settings=settings, trigger=ids.SAVE_OVERWRITE)
    assert load_scenario(path) == compute.scenario_of(again["data"])


def test_save_refuses_an_upload_values_to_fix_and_the_bundled_demos(settings, monkeypatch):
    loaded, baseline, working = opened_alder(settings)
    upload = {**baseline, "file": None}
    message = scenario_panel.save_plain(working, upload, None, settings=settings)[0]
    assert "Use Save as" in str(message)
    message = scenario_panel.save_plain(
        {**working, "stale": True}, baseline, None, settings=settings
    )[0]
    assert "Fix the fields" in str(message)
    monkeypatch.setattr(files, "default_scenario_dir", lambda: settings.folders[0].path)
    before = (settings.folders[0].path / ALDER).read_bytes()
    edited = working_of(with_floor(loaded["data"], 0.7), serial=loaded["serial"])
    message = scenario_panel.save_plain(edited, baseline, None, settings=settings)[0]
    assert "bundled demos" in str(message)
    assert (settings.folders[0].path / ALDER).read_bytes() == before


def test_save_as_keeps_the_layout_and_opens_the_new_file_under_its_name(settings):
    loaded, baseline, _ = opened_alder(settings)
    edited = working_of(with_floor(loaded["data"], 0.7), serial=loaded["serial"])
    out = scenario_panel.save_flow(
        "plan", edited, None, baseline, loaded, None, settings=settings, trigger=ids.SAVE_BUTTON
    )
    store, saved = out[6], out[7]
    new = settings.save_folder / "plan.toml"
    assert new.read_text(encoding="utf-8").startswith(HEADER)
    assert store["source"] == "plan.toml" and store["data"] == edited["data"]
    assert saved["file"] == "1/plan.toml" and saved["key"] == edited["key"]
    assert saved["opened"] == baseline["opened"]  # the undo history goes on
    behind = scenario_panel.save_flow(
        "plan2",
        edited,
        None,
        baseline,
        loaded,
        None,
        settings=settings,
        trigger=ids.SAVE_BUTTON,
        draft={"serial": edited["serial"] + 1},
    )
    assert "still updating" in str(behind[0]) and not (settings.save_folder / "plan2.toml").exists()


# ---------------------------------------------------------------------------------------------
# results for another version of the scenario


def test_a_result_is_stale_when_the_scenario_changed_by_content():
    alder = working_of(alder_data())
    stamp = {"what": "sweep", **staleness.identity(alder)}
    assert staleness.stale_reason(stamp, alder) is None
    saved_as = {**alder, "source": "copy.toml"}  # same scenario under another name
    assert staleness.stale_reason(stamp, saved_as) is None
    edited = working_of(with_floor(alder_data(), 0.7))
    assert staleness.stale_reason(stamp, edited) == (
        "computed for an earlier version of this scenario"
    )
    other = working_of(compute.dump(load_scenario(DEMOS / "tarnby-water.toml")), "tarnby.toml")
    assert "computed for alder-mere.toml" in staleness.stale_reason(stamp, other)
    assert "values to fix" in staleness.stale_reason(stamp, {**alder, "stale": True})
    assert staleness.stale_reason(None, edited) is None  # nothing shown, nothing stale
    assert staleness.refusal("sweep", edited, [stamp]).startswith("The sweep was computed")
    assert staleness.refusal("diagram", edited, [stamp]) is None  # not a tracked result


def test_stale_results_are_marked_and_their_buttons_refused():
    alder = working_of(alder_data())
    edited = working_of(with_floor(alder_data(), 0.7))
    stamps = [{"what": "sweep", **staleness.identity(alder)}, None]
    stamp_ids = [ids.result_stamp("sweep"), ids.result_stamp("search")]
    banners = [ids.stale_banner("sweep"), ids.stale_banner("search")]
    buttons = [ids.export_button("sweep", "png"), ids.export_button("table", "csv")]
    messages = ["Downloaded alder-mere-sweep.png", ""]
    message_ids = [ids.export_message("sweep"), ids.export_message("table")]
    dims = sum(len(t.dims) for t in staleness.TRACKED)
    styles = [{"height": "300px"}] * dims
    out = staleness.mark(
        edited, stamps, stamp_ids, banners, buttons, messages, message_ids, styles, [""], [None]
    )
    texts, hidden, disabled, titles, export_messages = out[:5]
    assert texts[0].startswith("The sweep below was computed for an earlier version")
    assert hidden == [False, True]
    assert disabled == [True, no_update] and titles[0].startswith("Not available: The sweep")
    assert export_messages[0].startswith("Not available:") and export_messages[1] is no_update
    sweep_styles = out[5 : 5 + len(staleness.BY_NAME["sweep"].dims)]
    assert all(s == {"height": "300px", **staleness.STALE_STYLE} for s in sweep_styles)
    add_disabled = out[5 + dims]
    assert add_disabled is True  # nothing found to add
    # Current again: the refusal line is cleared, the styles given back.
    again = staleness.mark(
        alder,
        stamps,
        stamp_ids,
        banners,
        buttons,
        [export_messages[0], ""],
        message_ids,
        [dict(s) for s in out[5 : 5 + dims]],
        [""],
        [{"name": "found"}],
    )
    assert again[1] == [True, True] and again[2] == [False, no_update] and again[4][0] == ""
    assert again[5] == {"height": "300px"} and again[5 + dims] is False
