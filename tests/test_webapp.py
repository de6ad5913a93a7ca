"""The web app without a browser: the factory, the layout, and each callback as a plain
function (loading, editing, validation messages, saving, exports, background work)."""

from __future__ import annotations

import base64
import importlib.util
import json
import re
import shutil
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path

import pytest
from dash import no_update

from planner.cli import main as cli_main
from planner.errors import InputError
from planner.report import CAUTION, threshold_words
from planner.scenario import load_scenario
from planner.scenario.io import MAX_SCENARIO_BYTES
from webapp import compute, create_app, drafts, exports, files, ids
from webapp.settings import Settings
from webapp.views import data as data_view
from webapp.views import (
    diagram,
    editor,
    export,
    scenario_panel,
    side_by_side,
    sweep,
    table,
)
from webapp.views import ensemble as ensemble_view
from webapp.views import frontier as frontier_view

ROOT = Path(__file__).resolve().parent.parent
DEMOS = files.default_scenario_dir()
ALDER = "alder-mere.toml"
DEEP_CUT = 1  # "Deep cut to 0.06 for 6 years, relax to 0.15": an overshoot schedule


# ---------------------------------------------------------------------------------------------
# helpers


@pytest.fixture
def folders(tmp_path):
    scenarios = tmp_path / "scenarios"
    shutil.copytree(DEMOS, scenarios)
    saved = tmp_path / "saved"
    saved.mkdir()
    return scenarios, saved


@pytest.fixture
def settings(folders, tmp_path):
    scenarios, saved = folders
    compute.use_disk(tmp_path / "cache" / "results")
    yield Settings(
        (files.Folder("Scenarios", scenarios), files.Folder("Saved", saved)), 1, tmp_path / "cache"
    )
    compute.use_disk(None)


def draft_of(name: str = ALDER) -> dict:
    return {"source": name, "data": compute.dump(load_scenario(DEMOS / name)), "serial": 1}


def run_recompute(
    draft: dict, edits: dict | None = None, working=None, action_edits: dict | None = None
):
    """Call the editor's recompute as Dash would after the user typed ``edits``."""
    fields, actions = drafts.editor_values(draft["data"])
    edits, action_edits = edits or {}, action_edits or {}
    values = [edits.get((i["index"], i["field"]), text) for i, text in fields]
    action_values = [
        action_edits.get((i["index"], i["action"], i["field"]), text) for i, text in actions
    ]
    field_ids = [i for i, _ in fields]
    action_ids = [i for i, _ in actions]
    messages = [ids.field_message(i["index"], i["field"]) for i in field_ids]
    action_messages = [ids.action_message(i["index"], i["action"], i["field"]) for i in action_ids]
    schedule_messages = [ids.schedule_message(i) for i in range(len(draft["data"]["schedules"]))]
    out = editor.recompute(
        values,
        action_values,
        draft,
        field_ids,
        action_ids,
        messages,
        action_messages,
        schedule_messages,
        working,
    )
    names = (
        "field_messages",
        "action_messages",
        "schedule_messages",
        "field_classes",
        "action_classes",
        "working",
        "status",
        "pending",
    )
    result = dict(zip(names, out, strict=True))
    result["message_ids"], result["action_message_ids"] = messages, action_messages
    return result


def result_texts(working, count: int) -> list[str]:
    lines = editor.result_lines(working, None, [ids.schedule_result(i) for i in range(count)])
    return [text_of(line) for line in lines]


def text_of(component) -> str:
    """All the text inside a Dash component tree."""
    if component is None:
        return ""
    if isinstance(component, str | int | float):
        return str(component)
    if isinstance(component, list | tuple):
        return " ".join(text_of(c) for c in component)
    return text_of(getattr(component, "children", None))


def upload_of(text: str | bytes) -> str:
    raw = text.encode("utf-8") if isinstance(text, str) else text
    return "data:application/octet-stream;base64," + base64.b64encode(raw).decode()


class _Tags(HTMLParser):
    def __init__(self):
        super().__init__()
        self.tags: list[str] = []
        self.doctype = ""

    def handle_decl(self, decl):
        self.doctype = decl

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)


# ---------------------------------------------------------------------------------------------
# factory and layout


def test_planner_imports_no_dash():
    """The core stays free of UI code: importing every planner module loads no dash."""
    code = (
        "import sys, planner, planner.cli, planner.figures, planner.briefing, planner.report, "
        "planner.outcomes, planner.sweep\n"
        "print(sorted(m for m in sys.modules if m == 'dash' or m.startswith('dash.')))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


def test_create_app_serves_a_page_with_the_caution(folders, tmp_path):
    scenarios, saved = folders
    app = create_app(scenarios, save_dir=saved, cache_dir=tmp_path / "cache")
    client = app.server.test_client()
    assert client.get("/").status_code == 200
    layout = client.get("/_dash-layout").get_data(as_text=True)
    assert json.dumps(CAUTION)[1:-1] in layout
    options = files.picker_options(
        [files.Folder("Scenarios", scenarios), files.Folder("Saved", saved)]
    )
    assert [o["value"] for o in options] == [
        "0/alder-mere.toml",
        "0/brellow-reservoir.toml",
        "0/example-internal-load.toml",
        "0/example-retention.toml",
        "0/tarnby-water.toml",
    ]
    assert "Alder Mere" in options[0]["label"]
    assert client.get("/assets/style.css").status_code == 200


def test_create_app_defaults_to_the_bundled_demos():
    app = create_app()
    page = app.layout()
    assert CAUTION in text_of(page.children)
    picker = _find(page, ids.PICKER)
    assert picker.value.endswith("/alder-mere.toml")


def _find(component, ident):
    if getattr(component, "id", None) == ident:
        return component
    children = getattr(component, "children", None)
    for child in children if isinstance(children, list) else [children]:
        if child is not None and not isinstance(child, str):
            found = _find(child, ident)
            if found is not None:
                return found
    return None


def test_create_app_names_a_missing_folder(tmp_path):
    with pytest.raises(InputError) as caught:
        create_app(tmp_path / "nowhere")
    assert caught.value.problems[0].field == "(folder)"
    assert str(tmp_path / "nowhere") in str(caught.value)


def test_cli_app_refuses_a_missing_folder(tmp_path, capsys):
    assert cli_main(["app", str(tmp_path / "nowhere")]) == 2
    assert "no such folder" in capsys.readouterr().err


# ---------------------------------------------------------------------------------------------
# loading and uploading


def test_picking_a_demo_loads_it(settings):
    store, message, _ = scenario_panel.load_scenario_choice(
        "0/alder-mere.toml", None, None, None, settings=settings
    )
    assert store["source"] == ALDER and len(store["data"]["schedules"]) == 5
    assert "Loaded alder-mere.toml" in text_of(message)


def test_a_path_outside_the_listing_is_refused(settings):
    store, message, _ = scenario_panel.load_scenario_choice(
        "0/../../../etc/passwd", None, None, {"serial": 3}, settings=settings
    )
    assert store is no_update
    assert "no such scenario" in text_of(message)


def test_malformed_upload_names_the_field_and_keeps_the_scenario(settings):
    text = (DEMOS / ALDER).read_text(encoding="utf-8").replace("floor = 0.06", 'floor = "deep"')
    store, message, contents = scenario_panel.load_scenario_choice(
        None, upload_of(text), "bad.toml", {"serial": 1}, settings=settings, trigger=ids.UPLOAD
    )
    assert store is no_update
    assert "bad.toml: schedules.1.floor:" in text_of(message)
    assert contents is None  # the upload box is cleared so the same file can be tried again


def test_upload_messages_match_planner_check(tmp_path, settings, capsys):
    text = (
        (DEMOS / ALDER).read_text(encoding="utf-8").replace("hold_years = 6.0", "hold_years = -2")
    )
    bad = tmp_path / "bad.toml"
    bad.write_text(text, encoding="utf-8")
    assert cli_main(["check", str(bad)]) == 2
    from_cli = [line.split(": ", 1)[1] for line in capsys.readouterr().err.splitlines()]
    _, message, _ = scenario_panel.load_scenario_choice(
        None, upload_of(text), "bad.toml", None, settings=settings, trigger=ids.UPLOAD
    )
    shown = [li.children.split(": ", 1)[1] for li in message.children[1].children]
    assert shown == from_cli and any("schedules.1.hold_years" in line for line in shown)


@pytest.mark.parametrize(
    ("raw", "reason"),
    [
        (b"x" * (MAX_SCENARIO_BYTES + 1), f"larger than {MAX_SCENARIO_BYTES} bytes"),
        (b"name = \xff\xfe", "not UTF-8 text"),
        (b"name = [unclosed", "not valid TOML"),
    ],
)
def test_bad_uploads_are_refused_with_a_reason(raw, reason):
    with pytest.raises(InputError) as caught:
        files.read_upload(upload_of(raw), "up.toml")
    problem = caught.value.problems[0]
    assert (problem.source, problem.field) == ("up.toml", "(file)")
    assert reason in problem.reason


def test_a_valid_upload_is_loaded(settings):
    text = (DEMOS / "tarnby-water.toml").read_text(encoding="utf-8")
    store, message, _ = scenario_panel.load_scenario_choice(
        None, upload_of(text), "mine.toml", None, settings=settings, trigger=ids.UPLOAD
    )
    assert store["source"] == "mine.toml" and len(store["data"]["schedules"]) == 2
    assert "Not saved yet" in text_of(message)


# ---------------------------------------------------------------------------------------------
# editing


def test_editing_a_floor_changes_verdict_and_cost_and_only_that_schedule_is_simulated():
    compute.clear()
    draft = draft_of()
    first = run_recompute(draft)
    assert first["working"]["complete"] and not first["working"]["stale"]
    before = result_texts(first["working"], 5)
    counts = compute.counts()
    second = run_recompute(draft, {(DEEP_CUT, "floor"): "0.13"}, working=first["working"])
    after = result_texts(second["working"], 5)
    assert (
        compute.counts()["outcomes"] == counts["outcomes"] + 1
    )  # the other four came from the cache
    assert compute.counts()["diagrams"] == counts["diagrams"]  # a schedule edit keeps the diagram
    assert second["working"]["data"]["schedules"][DEEP_CUT]["floor"] == 0.13
    assert "recovers" in before[DEEP_CUT] and "stays in the undesired regime" in after[DEEP_CUT]
    cost = lambda text: text.split("total cost ")[1].split(" EUR")[0]  # noqa: E731
    assert cost(before[DEEP_CUT]) != cost(after[DEEP_CUT])
    assert [b for i, b in enumerate(before) if i != DEEP_CUT] == [
        a for i, a in enumerate(after) if i != DEEP_CUT
    ]


def test_a_value_that_is_not_a_number_is_named_beside_its_field():
    draft = draft_of()
    good = run_recompute(draft)["working"]
    out = run_recompute(draft, {(DEEP_CUT, "floor"): "deep"}, working=good)
    messages = dict(
        zip(
            (json.dumps(m, sort_keys=True) for m in out["message_ids"]),
            out["field_messages"],
            strict=True,
        )
    )
    floor_message = messages[json.dumps(ids.field_message(DEEP_CUT, "floor"), sort_keys=True)]
    assert floor_message.startswith("Floor: ")  # the card's label, not the file's path
    assert sum(bool(m) for m in out["field_messages"]) == 1
    assert out["working"]["stale"] and out["working"]["data"] == good["data"]  # last valid kept
    assert "1 value to fix" in text_of(out["status"])
    invalid = [c for c in out["field_classes"] if "invalid" in c]
    assert len(invalid) == 1


def test_a_cross_field_rule_lands_on_its_field():
    draft = draft_of()
    out = run_recompute(draft, {(DEEP_CUT, "relax_to"): "0.03"}, working=None)
    joined = " | ".join(out["field_messages"])
    assert "Relax to: must be at least the floor 0.06" in joined


def test_action_fields_are_editable_and_checked():
    draft = draft_of()
    bad = run_recompute(draft, action_edits={(3, 0, "parameter"): "L"})
    assert any(m.startswith("Parameter: ") for m in bad["action_messages"])
    good = run_recompute(draft, action_edits={(3, 0, "cost"): "900000"})
    assert good["working"]["data"]["schedules"][3]["actions"][0]["cost"] == 900000.0


def test_points_and_levels_are_typed_as_lists():
    draft = draft_of()
    out = run_recompute(draft, {(0, "points"): "0, 0.26; 4, 0.1", (2, "levels"): "0.2, 0.1, 0.05"})
    schedules = out["working"]["data"]["schedules"]
    assert schedules[0]["points"] == [[0.0, 0.26], [4.0, 0.1]]
    assert schedules[2]["levels"] == [0.2, 0.1, 0.05]
    broken = run_recompute(draft, {(0, "points"): "0, 0.26; 4"})
    assert any(m.startswith("Points, item 2") for m in broken["field_messages"])


def test_add_duplicate_and_delete_keep_what_was_typed():
    draft = draft_of()
    fields, actions = drafts.editor_values(draft["data"])
    values = [
        ("0.13" if i == ids.schedule_field(DEEP_CUT, "floor") else text) for i, text in fields
    ]
    args = (
        None,
        None,
        None,
        "staircase",
        draft,
        values,
        [i for i, _ in fields],
        [t for _, t in actions],
        [i for i, _ in actions],
    )
    cards, added = editor.restructure(*args, trigger=ids.ADD_BUTTON, trigger_value=1)
    assert len(cards) == 6 and added["data"]["schedules"][-1]["kind"] == "staircase"
    assert added["data"]["schedules"][DEEP_CUT]["floor"] == "0.13"  # kept as typed
    assert (
        run_recompute(added)["working"]["data"]["schedules"][-1]["name"] == "New staircase schedule"
    )

    copy = editor.restructure(*args, trigger=ids.schedule_button(0, "duplicate"), trigger_value=1)[
        1
    ]
    names = [s["name"] for s in copy["data"]["schedules"]]
    assert names[:2] == ["Cut to 0.12 and hold", "Cut to 0.12 and hold (copy)"]
    assert not run_recompute(copy)["working"]["stale"]  # the copy's name keeps names unique

    fewer = editor.restructure(*args, trigger=ids.schedule_button(0, "delete"), trigger_value=1)[1]
    assert [s["name"] for s in fewer["data"]["schedules"]] == names[2:] and len(names) == 6

    # A button just drawn reports n_clicks None: that is not a click.
    assert editor.restructure(
        *args, trigger=ids.schedule_button(0, "delete"), trigger_value=None
    ) == (no_update, no_update)


def test_new_schedules_are_valid_for_every_demo():
    for path in files.scenario_files(DEMOS):
        data = compute.dump(load_scenario(path))
        for kind in drafts.SCHEDULE_KINDS:
            data = drafts.add(data, kind)
        scenario = compute.scenario_of(data)
        assert [s.kind for s in scenario.schedules[-3:]] == list(drafts.SCHEDULE_KINDS)


def test_many_schedules_go_to_the_background_worker(settings):
    compute.clear()
    draft = draft_of()
    data = draft["data"]
    for _ in range(editor.FAST_LIMIT):
        data = drafts.duplicate(data, 1)
    big = {**draft, "data": data}
    out = run_recompute(big)
    assert out["pending"]["key"] == out["working"]["key"] and not out["working"]["complete"]
    assert "background" in text_of(out["status"])
    assert compute.cached_comparison(compute.scenario_of(out["working"]["data"])) is None
    reported = []
    ready, status = editor.compare_in_background(
        lambda value: reported.append(value), out["pending"]
    )
    assert ready["key"] == out["pending"]["key"]
    assert reported and reported[-1][0] == "100"
    compute._outcomes.clear()  # as in another process: results are read back from the disk
    comparison = compute.cached_comparison(compute.scenario_of(out["working"]["data"]))
    assert comparison is not None and len(comparison.outcomes) == len(data["schedules"])


# ---------------------------------------------------------------------------------------------
# views


def test_diagram_shows_every_path_with_units_and_hides_unchosen_ones():
    working = run_recompute(draft_of())["working"]
    shown = ["Cut to 0.12 and hold"]
    figure = diagram.draw(working, None, shown, ids.TAB_DIAGRAM)
    assert (
        "g P / m2 / yr" in figure.layout.xaxis.title.text
        and "g P / m2" in figure.layout.yaxis.title.text
    )
    hidden = {t.legendgroup for t in figure.data if t.visible == "legendonly"}
    assert "Deep cut to 0.06 for 6 years, relax to 0.15" in hidden and shown[0] not in hidden
    assert diagram.draw(working, None, shown, ids.TAB_SERIES) is no_update  # not drawn off-screen
    options, value = diagram.shown_choices(working, None, None)
    assert value == [o["value"] for o in options] and len(value) == 5


def test_summary_states_thresholds_from_the_planner():
    working = run_recompute(draft_of())["working"]
    scenario = compute.scenario_of(working["data"])
    dia, _ = compute.diagram_of(scenario)
    text = text_of(diagram.describe(working).children)
    assert f"Recovery threshold {threshold_words(dia.recovery, 'g P / m2 / yr')}" in text
    assert "Hysteretic" in text


def test_table_has_the_planner_rows_and_sorts():
    working = run_recompute(draft_of())["working"]
    comparison = compute.comparison_of(compute.scenario_of(working["data"]))
    header, rows = table.table_rows(comparison)
    assert header[:3] == ["Schedule", "Verdict", "Recovered"]
    assert "Total cost (EUR)" in header and "Overshoot depth (g P / m2 / yr)" in header
    assert [r[2] for r in rows] == ["yes" if o.recovered else "no" for o in comparison.outcomes]
    cost = header.index("Total cost (EUR)")
    _, sort = table.fill(
        working, None, None, None, trigger=ids.sort_button("Total cost (EUR)"), trigger_value=1
    )
    assert sort == {"column": "Total cost (EUR)", "descending": False}
    _, again = table.fill(
        working, None, None, sort, trigger=ids.sort_button("Total cost (EUR)"), trigger_value=1
    )
    assert again["descending"] is True
    ordered = table.sorted_rows(rows, cost, descending=False)
    assert [r[cost] for r in ordered] == sorted(r[cost] for r in rows)
    meets = header.index("Meets target at (yr)")
    for descending in (False, True):
        column = [r[meets] for r in table.sorted_rows(rows, meets, descending)]
        assert column[-1] is None  # not reached: always last


def test_side_by_side_wants_two_to_four():
    assert side_by_side.choice_problem(["a"]) == "Choose two to four schedules (1 chosen)."
    assert side_by_side.choice_problem(["a", "b", "c", "d", "e"]) is not None
    assert side_by_side.choice_problem(["a", "b"]) is None
    working = run_recompute(draft_of())["working"]
    options, value = side_by_side.choices(working, None, None)
    assert len(options) == 5 and len(value) == 2
    figure, message = side_by_side.draw(working, None, value, ids.TAB_SIDE)
    assert message == "" and figure.layout.xaxis.title.text.endswith("(g P / m2 / yr)")


def test_sweep_runs_with_progress_and_checks_its_step():
    working = run_recompute(draft_of("tarnby-water.toml"))["working"]
    reported = []
    figure, summary, message = sweep.run_sweep(reported.append, 1, working, "0.01")
    assert message == "" and "quasi-static sweep" in figure.layout.title.text
    assert "Quasi-static sweep in steps of 0.01" in summary
    assert reported and all(0 <= int(value) <= 100 for value, _ in reported)
    _, _, refused = sweep.run_sweep(reported.append, 1, working, "-1")
    assert refused.startswith("step: must be a positive number")


# ---------------------------------------------------------------------------------------------
# recovery frontier, uncertainty and monitoring data


def test_the_new_tabs_are_in_the_layout():
    tabs = _find(create_app().layout(), ids.TABS)
    labels = {tab.value: tab.label for tab in tabs.children}
    assert labels[ids.TAB_FRONTIER] == "Recovery frontier"
    assert labels[ids.TAB_ENSEMBLE] == "Uncertainty"
    assert labels[ids.TAB_DATA] == "Monitoring data"


def test_frontier_view_draws_the_frontier_and_explains_an_irreversible_lake():
    """The view shows the planner's frontier for a hysteretic lake and, for a lake whose
    recovery threshold lies below the lowest achievable load, the planner's own InputError
    reason inline (DESIGN.md section 8: Tarnby Water is irreversible)."""
    from planner.frontier import recovery_frontier

    working = run_recompute(draft_of())["working"]
    reported = []
    depths = [0.01, 0.03, 0.05]
    figure, message = frontier_view.run_frontier(reported.append, 1, working, depths=depths)
    assert message == "" and len(figure.data) > 0
    assert reported and all(0 <= int(value) <= 100 for value, _ in reported)
    expected = recovery_frontier(compute.scenario_of(working["data"]), depths=depths)
    drawn = [y for trace in figure.data for y in (trace.y or ())]
    assert any(
        p.hold_years is not None and any(abs(p.hold_years - y) < 1e-12 for y in drawn if y)
        for p in expected.points
    )
    tarnby = run_recompute(draft_of("tarnby-water.toml"))["working"]
    _, refused = frontier_view.run_frontier(reported.append, 1, tarnby, depths=[0.01])
    assert "not reachable by load cuts alone" in refused and "Traceback" not in refused


def test_frontier_takes_the_ramp_and_start_year_typed():
    """The typed ramp years reach the planner (the least hold equals the planner's frontier
    with that ramp); a word where a number belongs is refused naming the field."""
    from planner.frontier import recovery_frontier

    working = run_recompute(draft_of())["working"]
    figure, message = frontier_view.run_frontier(
        lambda *_: None, 1, working, "1", "5", depths=[0.03]
    )
    assert message == ""
    expected = recovery_frontier(
        compute.scenario_of(working["data"]), depths=[0.03], start_year=1.0, ramp_years=5.0
    )
    drawn = [y for trace in figure.data for y in (trace.y or ()) if y]
    assert any(abs(expected.points[0].hold_years - y) < 1e-12 for y in drawn)
    assert "5" in figure.layout.title.subtitle.text
    _, refused = frontier_view.run_frontier(lambda *_: None, 1, working, "", "soon", depths=[0.03])
    assert "ramp years" in refused and "not a number" in refused


def test_add_found_appends_a_schedule_with_a_unique_name():
    working = run_recompute(draft_of())["working"]
    found = {**working["data"]["schedules"][DEEP_CUT], "name": "Cheapest found: deep cut"}
    loaded = {"source": ALDER, "serial": 4}
    store, message = frontier_view.add_found(1, working, loaded, found)
    names = [s["name"] for s in store["data"]["schedules"]]
    assert len(names) == 6 and names[-1] == "Cheapest found: deep cut"
    assert store["serial"] == 5 and store["source"] == ALDER and "Added" in message
    again = run_recompute({**store, "serial": 6})["working"]
    second, _ = frontier_view.add_found(1, again, store, found)
    assert second["data"]["schedules"][-1]["name"] == "Cheapest found: deep cut (2)"
    assert frontier_view.add_found(1, working, loaded, None)[0] is no_update


def test_ensemble_view_shows_the_planners_table_and_fans():
    """The table shown is the planner's ``ensemble_rows`` for the same members and seed (runs
    are bit-identical for a given seed, planner.ensemble docstring)."""
    from planner.ensemble import run_ensemble
    from planner.ensemble_report import ensemble_rows

    working = run_recompute(draft_of())["working"]
    reported = []
    figure, fans, names, chosen, table_div, message = ensemble_view.run(
        reported.append, 1, working, "50"
    )
    assert message == "" and len(figure.data) > 0 and reported
    assert set(fans) == set(names) and chosen == names[0] and len(names) == 5
    header, rows = ensemble_rows(run_ensemble(compute.scenario_of(working["data"]), members=50))
    assert (
        text_of(table_div).split()
        == text_of([*header, *(str(c) for row in rows for c in row)]).split()
    )
    assert len(ensemble_view.fan(names[1], fans).data) > 0
    refused = ensemble_view.run(reported.append, 1, working, "0")
    assert refused[0] is no_update and refused[-1].startswith("members: must be a whole number")
    assert ensemble_view.members_of("", compute.scenario_of(working["data"])) == 2000


def test_ensemble_view_explains_a_scenario_without_uncertainty():
    working = run_recompute(draft_of("tarnby-water.toml"))["working"]
    *_, message = ensemble_view.run(lambda _: None, 1, working, "3")
    assert message == ensemble_view.NO_UNCERTAINTY
    scenario = compute.scenario_of(working["data"])
    assert ensemble_view.members_of(" ", scenario) == ensemble_view.DEFAULT_MEMBERS


def test_data_view_fits_the_demo_record_and_names_a_bad_cell():
    record = ROOT / "scenarios" / "data" / "alder-mere-monitoring.csv"
    text = record.read_text(encoding="utf-8")
    working = run_recompute(draft_of())["working"]
    reported = []
    fit_fig, diagram_fig, summary, message = data_view.run_fit(
        reported.append, upload_of(text), record.name, working
    )
    assert message == "" and len(fit_fig.data) > 0 and len(diagram_fig.data) > 0
    assert record.name in summary and reported
    bad = text.replace("1977,0.1482,0.1074", "1977,0.1482,cloudy")
    *_, problems = data_view.run_fit(reported.append, upload_of(bad), "bad.csv", working)
    line = text_of(problems)
    assert line.startswith("bad.csv: row 7, column TP:") and "Traceback" not in line
    with pytest.raises(InputError, match="larger than"):
        data_view.read_record_upload(upload_of(b"x" * (data_view.MAX_UPLOAD_BYTES + 1)), "big.csv")


# ---------------------------------------------------------------------------------------------
# saving


def test_save_as_writes_a_new_file_and_asks_before_overwriting(settings):
    working = run_recompute(draft_of(), {(DEEP_CUT, "floor"): "0.13"})["working"]
    message, style, _, pending, options, value = scenario_panel.save_as(
        "my plan", working, None, settings=settings, trigger=ids.SAVE_BUTTON
    )
    target = settings.save_folder / "my plan.toml"
    assert "Saved my plan.toml" in text_of(message) and value == "1/my plan.toml"
    assert load_scenario(target).schedules[DEEP_CUT].floor == 0.13
    assert any(o["value"] == value for o in options)
    assert [p.name for p in settings.save_folder.iterdir()] == ["my plan.toml"]  # no temporary left
    written = target.read_bytes()

    changed = run_recompute(draft_of(), {(DEEP_CUT, "floor"): "0.08"})["working"]
    out = scenario_panel.save_as(
        "my plan.toml", changed, None, settings=settings, trigger=ids.SAVE_BUTTON
    )
    assert out[1]["display"] == "block" and "exists already" in out[2] and out[3] == "my plan.toml"
    assert target.read_bytes() == written  # asked, not written

    cancelled = scenario_panel.save_as(
        "my plan.toml", changed, "my plan.toml", settings=settings, trigger=ids.SAVE_CANCEL
    )
    assert cancelled[3] is None and target.read_bytes() == written

    done = scenario_panel.save_as(
        "ignored", changed, "my plan.toml", settings=settings, trigger=ids.SAVE_OVERWRITE
    )
    assert "Saved my plan.toml" in text_of(done[0])
    assert load_scenario(target).schedules[DEEP_CUT].floor == 0.08


@pytest.mark.parametrize("name", ["", "../escape", "a/b", ".hidden", "x" * 90])
def test_save_as_refuses_names_that_are_not_plain(settings, name):
    working = run_recompute(draft_of())["working"]
    message, *_ = scenario_panel.save_as(
        name, working, None, settings=settings, trigger=ids.SAVE_BUTTON
    )
    assert "file name" in text_of(message) and "Not saved" in text_of(message)
    assert list(settings.save_folder.iterdir()) == []


@pytest.mark.parametrize(
    "pending", ["../escape.toml", "../../escape.toml", "/tmp/escape.toml", "plan\n.toml"]
)
def test_overwrite_never_writes_outside_the_save_folder(settings, pending):
    """A crafted request carrying a path in the pending-overwrite store writes nothing outside
    the save folder (common practice, no source: decide every path on the server)."""
    working = run_recompute(draft_of())["working"]
    outside = settings.save_folder.parent
    before = sorted(p.name for p in outside.iterdir())
    message, *_ = scenario_panel.save_as(
        "ignored", working, pending, settings=settings, trigger=ids.SAVE_OVERWRITE
    )
    assert "Not saved" in text_of(message) and "file name" in text_of(message)
    assert sorted(p.name for p in outside.iterdir()) == before
    assert list(settings.save_folder.iterdir()) == []
    assert not Path("/tmp/escape.toml").exists()


@pytest.mark.parametrize("name", ["pl\nan", "plan\r.toml", "a\u0000b", "../x.toml", "x/y.toml"])
def test_plain_save_refuses_names_that_are_not_plain(settings, name):
    scenario = load_scenario(DEMOS / ALDER)
    with pytest.raises(InputError) as error:
        files.save(scenario, settings.save_folder, name)
    assert "file name" in str(error.value)
    assert list(settings.save_folder.iterdir()) == []


def test_requests_for_other_host_names_are_refused(folders, tmp_path):
    """DNS rebinding: a page elsewhere that points its own name at this machine gets 400; the
    loopback names work (common practice, no source)."""
    scenarios, saved = folders
    app = create_app(scenarios, save_dir=saved, cache_dir=tmp_path / "cache")
    client = app.server.test_client()
    for host in ("attacker.example", "attacker.example:8050", "192.168.1.20:8050"):
        assert client.get("/", headers={"Host": host}).status_code == 400, host
        assert client.post("/_dash-update-component", headers={"Host": host}).status_code == 400
    for host in ("localhost:8050", "127.0.0.1:8050", "[::1]:8050", "LOCALHOST"):
        assert client.get("/", headers={"Host": host}).status_code == 200, host
    named = create_app(
        scenarios,
        save_dir=saved,
        cache_dir=tmp_path / "cache2",
        allowed_hosts=("localhost", "planner.lan"),
    )
    assert named.server.test_client().get("/", headers={"Host": "planner.lan"}).status_code == 200


def test_serving_beyond_loopback_needs_an_explicit_flag(capsys):
    """`planner app --host 0.0.0.0` is refused (exit 2, naming --host) without --allow-remote;
    nothing starts listening."""
    code = cli_main(["app", "--host", "0.0.0.0", "--port", "0"])
    assert code == 2
    err = capsys.readouterr().err
    assert "--host" in err and "--allow-remote" in err


def test_save_as_refuses_while_a_field_is_invalid(settings):
    draft = draft_of()
    good = run_recompute(draft)["working"]
    stale = run_recompute(draft, {(DEEP_CUT, "floor"): "deep"}, working=good)["working"]
    message, *_ = scenario_panel.save_as(
        "x", stale, None, settings=settings, trigger=ids.SAVE_BUTTON
    )
    assert "nothing was written" in text_of(message)
    assert list(settings.save_folder.iterdir()) == []


# ---------------------------------------------------------------------------------------------
# exports


def test_briefing_export_is_a_whole_page_with_the_caution():
    working = run_recompute(draft_of())["working"]
    download, name = export.build_export("briefing", "html", working, None, None, None, ALDER)
    assert name == "alder-mere-briefing.html" and download["type"] == "text/html"
    tags = _Tags()
    tags.feed(download["content"])
    assert tags.doctype.lower() == "doctype html"
    assert {"html", "head", "body", "table", "h1"} <= set(tags.tags)
    assert CAUTION in download["content"]


def test_table_exports_as_csv():
    import csv

    working = run_recompute(draft_of())["working"]
    download, name = export.build_export("table", "csv", working, None, None, None, ALDER)
    rows = list(csv.reader(download["content"].splitlines()))
    assert name.endswith(".csv") and rows[0][:3] == ["Schedule", "Verdict", "Recovered"]
    assert len(rows) == 6 and rows[2][0] == "Deep cut to 0.06 for 6 years, relax to 0.15"


@pytest.mark.parametrize("what", ["diagram", "series", "side"])
def test_figures_export_as_html_pages_with_the_caution(what):
    working = run_recompute(draft_of())["working"]
    side = ["Cut to 0.12 and hold", "Deep cut to 0.06 for 6 years, relax to 0.15"]
    download, name = export.build_export(what, "html", working, None, side, None, ALDER)
    assert name == f"alder-mere-{what}.html"
    assert CAUTION in download["content"] and "plotly" in download["content"]


def test_exports_refused_with_a_reason():
    draft = draft_of()
    good = run_recompute(draft)["working"]
    stale = run_recompute(draft, {(DEEP_CUT, "floor"): "deep"}, working=good)["working"]
    with pytest.raises(export.ExportRefusedError, match="fix the values"):
        export.build_export("briefing", "html", stale, None, None, None, ALDER)
    with pytest.raises(export.ExportRefusedError, match="run the sweep first"):
        export.build_export("sweep", "png", good, None, None, {"data": []}, ALDER)
    download, messages = export.on_export(
        [1],
        stale,
        None,
        None,
        None,
        [ids.export_message("briefing"), ids.export_message("diagram")],
        trigger=ids.export_button("briefing", "html"),
    )
    assert download is no_update and messages[0].startswith("Not exported") and messages[1] == ""


@pytest.mark.skipif(
    not Path("/usr/lib/chromium/chromium").exists(), reason="PNG export needs Debian's chromium"
)
def test_png_export_through_the_system_chromium():
    working = run_recompute(draft_of())["working"]
    try:
        download, name = export.build_export("diagram", "png", working, None, None, None, ALDER)
    finally:
        exports.stop_png_server()  # no export browser left running for later tests
    assert name == "alder-mere-diagram.png" and download["base64"]
    assert base64.b64decode(download["content"]).startswith(b"\x89PNG\r\n\x1a\n")


# ---------------------------------------------------------------------------------------------
# through Dash's own endpoint, as the load benchmark drives it


def load_benchmark(name: str):
    spec = importlib.util.spec_from_file_location(name, ROOT / "benchmarks" / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_the_recompute_endpoint_answers_the_load_benchmark_request(folders, tmp_path):
    app_load = load_benchmark("app_load")
    scenarios, _ = folders
    app = create_app(scenarios, cache_dir=tmp_path / "cache")
    body = app_load.recompute_body(
        app_load.recompute_callback_id(app), draft_of(), {(DEEP_CUT, "floor"): "0.13"}
    )
    reply = app.server.test_client().post("/_dash-update-component", json=body)
    assert reply.status_code == 200
    response = reply.get_json()["response"]
    assert response[ids.WORKING]["data"]["data"]["schedules"][DEEP_CUT]["floor"] == 0.13


def test_a_failing_callback_shows_a_plain_line_not_a_traceback(folders, tmp_path):
    app_load = load_benchmark("app_load")
    scenarios, _ = folders
    app = create_app(scenarios, cache_dir=tmp_path / "cache")
    body = app_load.recompute_body(app_load.recompute_callback_id(app), draft_of(), {})
    body["inputs"][2]["value"] = {"source": "x", "data": 5}  # a store no page could produce
    reply = app.server.test_client().post("/_dash-update-component", json=body)
    assert reply.status_code == 200
    shown = reply.get_json()["sideUpdate"][ids.APP_ERROR]
    assert "Your scenario and saved files are unchanged" in shown["children"]
    assert "Traceback" not in reply.get_data(as_text=True)


def test_views_never_import_the_app():
    """Views get the app's ``callback`` when registering; none imports the app module."""
    import ast

    for path in (ROOT / "webapp" / "views").glob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.ImportFrom) and node.module == "webapp":
                assert not {a.name for a in node.names} & {"app", "create_app"}, path.name
            elif isinstance(node, ast.ImportFrom):
                assert node.module != "webapp.app", path.name
            elif isinstance(node, ast.Import):
                assert "webapp.app" not in {a.name for a in node.names}, path.name


@pytest.mark.slow
def test_two_worker_processes_serve_pages_and_recomputes(folders):
    """``planner app --workers 2`` on loopback: page, page scripts and recompute are served by
    whichever worker takes each connection (a worker that never rendered the page still serves
    its scripts)."""
    import http.client
    import selectors

    scenarios, _ = folders
    code = (
        "import sys\n"
        "from webapp.serve import serve\n"
        f"serve({str(scenarios)!r}, host='127.0.0.1', port=0, workers=2,"
        " ready=lambda port: print(port, flush=True))\n"
    )
    server = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, text=True)
    try:
        with selectors.DefaultSelector() as selector:
            selector.register(server.stdout, selectors.EVENT_READ)
            assert selector.select(timeout=60), "the server did not start within 60 s"
        port = int(server.stdout.readline())
        app_load = load_benchmark("app_load")
        callback_id = app_load.recompute_callback_id(create_app(scenarios))
        body = json.dumps(
            app_load.recompute_body(callback_id, draft_of(), {(DEEP_CUT, "floor"): "0.13"})
        )
        statuses = []
        for _ in range(6):  # several connections, so both workers take some
            connection = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
            connection.request("GET", "/")
            page = connection.getresponse().read().decode()
            script = re.search(r'src="(/_dash-component-suites/[^"]+)"', page).group(1)
            connection.request("GET", script)
            statuses.append(connection.getresponse().status)
            connection.request(
                "POST", "/_dash-update-component", body, {"Content-Type": "application/json"}
            )
            reply = connection.getresponse()
            statuses.append(reply.status)
            assert b'"floor":0.13' in reply.read()
            connection.close()
        assert statuses == [200] * 12
    finally:
        server.terminate()
        server.wait(timeout=20)


def test_summary_says_an_unreachable_threshold_in_words():
    """The Tarnby Water demo's recovery fold lies at a negative load: the app says "not
    reachable by load cuts alone" and never shows that negative number as a threshold."""
    working = run_recompute(draft_of("tarnby-water.toml"))["working"]
    text = text_of(diagram.describe(working).children)
    assert "Recovery threshold not reachable by load cuts alone" in text
    assert "External P load (0 g P / m2 / yr)" in text  # units keep their case
    assert "-0.066" not in text.split("Full summary")[0]


def test_a_deeply_nested_file_in_the_folder_does_not_stop_the_app(folders, tmp_path):
    """One file nested thousands of levels deep (or with a byte-order mark) among the scenarios:
    the app starts and lists it by its file name."""
    scenarios, saved = folders
    (scenarios / "deep.toml").write_text("deep = " + "[" * 3000 + "]" * 3000 + "\n")
    (scenarios / "marked.toml").write_text("\ufeff" + (DEMOS / ALDER).read_text(encoding="utf-8"))
    app = create_app(scenarios, save_dir=saved, cache_dir=tmp_path / "cache")
    assert app.server.test_client().get("/").status_code == 200
    labels = {o["value"]: o["label"] for o in files.picker_options([files.Folder("S", scenarios)])}
    assert labels["0/deep.toml"] == "deep.toml"
    assert "Alder Mere" in labels["0/marked.toml"]


def test_a_job_past_the_apps_time_limit_stops_and_says_so(monkeypatch):
    """Every long job reports progress through compute.throttled; past JOB_SECONDS the next
    report stops it, and the view shows the limit instead of holding a worker (common
    practice, no source: a wall-clock budget per user job)."""
    from webapp.views import sweep as sweep_view

    monkeypatch.setattr(compute, "JOB_SECONDS", -1.0)
    working = run_recompute(draft_of())["working"]
    figure, summary, message = sweep_view.run_sweep(lambda *_: None, 1, working, "")
    assert "time: stopped after" in message and "limit for one job" in message
    with pytest.raises(InputError):
        compute.throttled(lambda *_: None, budget=-1.0)(0.5, "x")
    quick = compute.throttled(lambda *_: None, budget=60.0)
    quick(0.5, "x")  # well within the budget: nothing raised


def test_messages_name_cards_from_one_and_fields_by_their_labels():
    """Beside a field: its label as the card shows it; in the status line: "Schedule N"
    counted from 1 as the cards are numbered, never the file's path counted from 0."""
    from planner.errors import Problem

    data = draft_of()["data"]
    beside = drafts.message_text(
        Problem("<editor>", "schedules.1.hold_years", "must be at least 0"),
        drafts.place(Problem("<editor>", "schedules.1.hold_years", "x"), data),
        data,
    )
    assert beside == "Years at the floor: must be at least 0"
    whole = drafts.message_text(
        Problem("<editor>", "schedules.1.name", "is taken"),
        drafts.Placement("scenario"),
        data,
    )
    assert whole == "Schedule 2 name: is taken"
