"""Saving an edited scenario into the layout of the file it came from.

Reference: T. Preston-Werner, P. Gedam et al. (2021), TOML v1.0.0 specification
(https://toml.io/en/v1.0.0), sections "Comment" (a hash mark to the end of the line is a
comment, not data), "Array" and "Array of Tables". Comments and layout therefore carry no data:
the saved text must read back, with two independent TOML v1.0.0 parsers (Python's ``tomllib``
and ``tomlkit``), to exactly the edited scenario, while the file's comments, blank lines and the
layout of what was not edited stay as the user wrote them.

The round trip checked throughout is load(save(edit(x))) == edit(x), on an invented lake written
here (its layout is what the tests look at) and on every demo scenario.
"""

from __future__ import annotations

import copy
import difflib
import os
import stat
import tomllib
from pathlib import Path

import pytest
import tomlkit
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.scenario import (
    load_scenario,
    parse_scenario,
    save_scenario,
    scenario_from_data,
    scenario_to_toml,
)
from webapp import drafts

DEMOS = Path(__file__).resolve().parent.parent / "scenarios"
HEADER = "# Invented lake and invented numbers, for demonstration only."
DEMO_FILES = sorted(DEMOS.glob("*.toml"))
LAKE = '''# Invented lake and invented numbers, for demonstration only.
name = "Heronsgate Pool: a lake for the save tests"  # invented place
description = """Written for the save tests: comments everywhere,
and arrays laid out by hand."""

[model]
kind = "recycling"
[model.parameters]
L = 2.6     # external load, the control (g P / m2 / yr)
s = 1.2     # loss rate of lake P (per year)
r = 6.0     # maximum recycling (g P / m2 / yr)
m = 4.0     # lake P at half the maximum recycling (g P / m2)
q = 8.0     # steepness of recycling

[control]
parameter = "L"
label = "External P load"
unit = "g P / m2 / yr"
range = [0.0, 5.0]        # what the board can consider
lowest_achievable = 0.4
max_change_per_year = 0.5

[state]
P = 7.1   # measured last summer

[target]
variable = "P"
regime = "lowest"
threshold = 3.0

[simulation]
horizon = 40.0

# The schedules the board asked about.
[[schedules]]
name = "Cut to 1.2 and hold"
kind = "path"
points = [
    [0.0, 2.6],  # today
    [3.0, 1.2],  # after the works
]

[[schedules]]
name = "Deep cut, then relax"
kind = "overshoot"
start = 0.0
floor = 0.6        # the deepest the farms can go
down_years = 4.0
hold_years = 6.0
relax_to = 1.5
up_years = 2.0

[[schedules]]
name = "Staircase down and back"
kind = "staircase"
start = 0.0
levels = [2.0, 1.4, 0.8, 0.5, 1.2]
step_years = 4.0
ramp_years = 1.4

[[schedules]]
name = "Short cut with sediment P inactivation"
kind = "overshoot"
start = 0.0
floor = 0.9
down_years = 3.5
hold_years = 4.0
relax_to = 1.5
up_years = 2.0
[[schedules.actions]]
kind = "parameter-pulse"
name = "Aluminium treatment"
parameter = "r"
factor = 0.4
start = 2.0
duration = 6.0
decay_years = 3.0
cost = 450000.0   # one-off, EUR

# Cheapest first.
[costs]
currency = "EUR"
discount_rate = 0.03
[[costs.measures]]
name = "Riparian buffers"
capacity = 0.6
unit_cost = 25000.0
'''


def dump(scenario) -> dict:
    return scenario.model_dump(mode="json", exclude_none=True)


def comments(text: str) -> list[str]:
    """Every comment of a file (the demos keep no hash mark inside a string)."""
    return [line[line.index("#") :].strip() for line in text.splitlines() if "#" in line]


def lake_data() -> dict:
    return dump(parse_scenario(LAKE))


def saved(text: str, data: dict):
    """(edited scenario, the text saved into the layout of ``text``), read back checked with
    both parsers."""
    edited = scenario_from_data(data, "<edit>")
    out = scenario_to_toml(edited, template=text)
    assert parse_scenario(out) == edited  # load(save(edit(x))) == edit(x)
    assert tomlkit.parse(out).unwrap() == tomllib.loads(out)  # the two parsers agree
    return edited, out


def changed_lines(before: str, after: str) -> tuple[list[str], list[str]]:
    removed, added = [], []
    for line in difflib.ndiff(before.splitlines(), after.splitlines()):
        if line.startswith("- "):
            removed.append(line[2:])
        elif line.startswith("+ "):
            added.append(line[2:])
    return removed, added


def test_an_unchanged_scenario_is_saved_byte_for_byte():
    for path in DEMO_FILES:
        text = path.read_text(encoding="utf-8")
        assert scenario_to_toml(load_scenario(path), template=text) == text, path.name


def test_one_number_edited_changes_one_line_and_keeps_its_comment():
    text = LAKE
    data = lake_data()
    data["schedules"][1]["floor"] = 0.7
    data["model"]["parameters"]["L"] = 2.65
    _, out = saved(text, data)
    removed, added = changed_lines(text, out)
    assert removed == [
        "L = 2.6     # external load, the control (g P / m2 / yr)",
        "floor = 0.6        # the deepest the farms can go",
    ]
    assert added == [
        "L = 2.65     # external load, the control (g P / m2 / yr)",
        "floor = 0.7        # the deepest the farms can go",
    ]
    assert out.splitlines()[0] == HEADER


def test_a_deleted_schedule_takes_only_its_own_table_with_it():
    text = LAKE
    data = drafts.delete(lake_data(), 2)  # "Staircase down and back"
    _, out = saved(text, data)
    block = (
        "[[schedules]]\n"
        'name = "Staircase down and back"\n'
        'kind = "staircase"\n'
        "start = 0.0\n"
        "levels = [2.0, 1.4, 0.8, 0.5, 1.2]\n"
        "step_years = 4.0\n"
        "ramp_years = 1.4\n"
        "\n"
    )
    assert out == text.replace(block, "")


def test_deleting_the_last_schedule_keeps_the_comment_above_the_next_section():
    data = drafts.delete(lake_data(), 3)
    _, out = saved(LAKE, data)
    assert "ramp_years = 1.4\n\n# Cheapest first.\n[costs]" in out
    assert comments(out) == [c for c in comments(LAKE) if c != "# one-off, EUR"]


def test_added_and_duplicated_schedules_get_tables_of_their_own():
    text = LAKE
    data = lake_data()
    data = drafts.duplicate(data, 3)  # the one with an action: its [[schedules.actions]] too
    data = drafts.add(data, "path")
    edited, out = saved(text, data)
    removed, added = changed_lines(text, out)
    assert removed == []
    assert added.count("[[schedules]]") == 2 and added.count("[[schedules.actions]]") == 1
    assert 'name = "Short cut with sediment P inactivation (copy)"' in added
    assert "actions = []" not in out  # the schema's default is left out, as the demos do
    # The untouched tail of the file is as it was, to the byte, its comment still above it.
    assert out.endswith("\n\n# Cheapest first.\n" + text[text.index("[costs]") :])
    assert [s.name for s in edited.schedules][-1] == "New path schedule"


@pytest.mark.parametrize("path", DEMO_FILES, ids=lambda p: p.name)
@pytest.mark.parametrize("edit", ["number", "delete-first", "add-each-kind", "lists", "blocks"])
def test_every_demo_keeps_its_comments_through_every_kind_of_edit(path, edit):
    text = path.read_text(encoding="utf-8")
    data = dump(load_scenario(path))
    control = data["control"]["parameter"]
    if edit == "number":
        data["model"]["parameters"][control] *= 0.9
        data["simulation"]["horizon"] = data["simulation"].get("horizon", 50.0) + 5.0
    elif edit == "delete-first":
        if not data.get("schedules"):
            pytest.skip("no schedule to delete")
        data = drafts.delete(data, 0)
    elif edit == "add-each-kind":
        for kind in drafts.SCHEDULE_KINDS:
            data = drafts.add(data, kind)
    elif edit == "lists":
        low, high = data["control"]["range"]
        data["control"]["range"] = [low, high * 1.5]
        data = drafts.add(data, "staircase")
        data["schedules"][-1]["levels"] = [high * 0.4, high * 0.2]
    elif edit == "blocks":
        target = data["target"]
        if "threshold" in target:
            del target["threshold"]  # a table's key removed
        elif not {"tp", "trophic_class"} & set(target):
            target["threshold"] = 1.0  # a key added
        data["description"] = "Edited in the app."
    _, out = saved(text, data)
    kept = comments(text)
    if edit == "delete-first":  # comments inside the deleted table go with it
        first = text.index("[[schedules]]")
        end = text.find("[[schedules]]", first + 1)
        inside = comments(text[first:end]) if end > 0 else []
        kept = [c for c in kept if c not in inside]
    assert [c for c in comments(out) if c in kept] == kept
    assert out.splitlines()[0] == text.splitlines()[0]


def test_multi_line_arrays_and_their_comments_stay_when_not_edited():
    data = lake_data()
    data["schedules"][1]["hold_years"] = 7.0
    _, out = saved(LAKE, data)
    assert "points = [\n    [0.0, 2.6],  # today\n    [3.0, 1.2],  # after the works\n]" in out
    assert changed_lines(LAKE, out) == (["hold_years = 6.0"], ["hold_years = 7.0"])


def test_an_edited_array_is_rewritten_in_place_keeping_the_comment_on_its_line():
    data = lake_data()
    data["control"]["range"] = [0.0, 6.0]
    _, out = saved(LAKE, data)
    assert changed_lines(LAKE, out) == (
        ["range = [0.0, 5.0]        # what the board can consider"],
        ["range = [0.0, 6.0]        # what the board can consider"],
    )


DEEP_INLINE = (
    '{ name = "Deep", kind = "overshoot", start = 0.0, floor = 0.6, down_years = 4.0, '
    "hold_years = 6.0, relax_to = 1.5, up_years = 2.0 }"
)
UNUSUAL = f"""# Written by hand, in the other ways TOML allows.
name = "Heronsgate Pool, compact"
model = {{ kind = "recycling", parameters = {{ L = 2.6, s = 1.2, r = 6.0, m = 4.0, q = 8.0 }} }}
control.parameter = "L"  # dotted keys
control.range = [0.0, 5.0]
state = {{ P = 7.1 }}
target = {{ variable = "P", regime = "lowest", threshold = 3.0 }}
schedules = [
  {{ name = "Cut", kind = "path", points = [[0.0, 2.6], [3.0, 1.2]] }},  # inline tables
  {DEEP_INLINE},
]
"""


@pytest.mark.parametrize("edit", ["floor", "delete", "add", "range", "parameter"])
def test_inline_tables_and_dotted_keys_read_back_exactly(edit):
    data = dump(parse_scenario(UNUSUAL))
    if edit == "floor":
        data["schedules"][1]["floor"] = 0.7
    elif edit == "delete":
        data = drafts.delete(data, 0)
    elif edit == "add":
        data = drafts.add(data, "staircase")
    elif edit == "range":
        data["control"]["range"] = [0.0, 6.0]
    else:
        data["model"]["parameters"]["L"] = 2.5
    _, out = saved(UNUSUAL, data)
    assert out.startswith("# Written by hand")


def test_a_template_that_is_not_a_valid_scenario_gives_the_plain_text():
    edited = parse_scenario(LAKE)
    for broken in ("not = [valid", 'name = "only a name"'):
        out = scenario_to_toml(edited, template=broken)
        assert out == scenario_to_toml(edited) and parse_scenario(out) == edited


EDITS = st.lists(
    st.one_of(
        st.tuples(st.just("floor"), st.integers(0, 20), st.floats(0.1, 2.4)),
        st.tuples(st.just("delete"), st.integers(0, 20), st.none()),
        st.tuples(st.just("add"), st.sampled_from(drafts.SCHEDULE_KINDS), st.none()),
        st.tuples(st.just("duplicate"), st.integers(0, 20), st.none()),
        st.tuples(st.just("horizon"), st.none(), st.floats(20.0, 80.0)),
    ),
    min_size=1,
    max_size=6,
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(edits=EDITS)
def test_any_sequence_of_editor_edits_reads_back_exactly(edits):
    """Random sequences of the editor's own edits, saved into the file's layout, read back to the
    edited scenario with both parsers; the header comment and every parameter's comment stay."""
    text = LAKE
    data = lake_data()
    for op, where, value in edits:
        schedules = data.get("schedules", [])
        if op == "floor":
            overshoots = [i for i, s in enumerate(schedules) if s["kind"] == "overshoot"]
            if overshoots:
                schedule = schedules[overshoots[where % len(overshoots)]]
                schedule["floor"] = min(value, schedule["relax_to"])
        elif op == "delete" and schedules:
            data = drafts.delete(data, where % len(schedules))
        elif op == "duplicate" and schedules:
            data = drafts.duplicate(data, where % len(schedules))
        elif op == "add":
            data = drafts.add(data, where)
        elif op == "horizon":
            data["simulation"]["horizon"] = round(value, 3)
    _, out = saved(text, copy.deepcopy(data))
    assert out.splitlines()[0] == HEADER
    parameter_comments = [c for c in comments(text) if "(" in c and c.startswith("# ")]
    assert all(c in out for c in parameter_comments[:5])


def test_saved_into_the_layout_through_the_file_writer(tmp_path):
    """load(save(edit(x))) == edit(x) through the files themselves."""
    target = tmp_path / "lake.toml"
    text = LAKE
    target.write_text(text, encoding="utf-8")
    data = drafts.delete(dump(load_scenario(target)), 0)
    edited = scenario_from_data(data)
    save_scenario(edited, target, overwrite=True, template=text)
    assert load_scenario(target) == edited
    assert target.read_text(encoding="utf-8").startswith(HEADER + "\n")


def test_a_new_file_gets_the_usual_permissions_and_a_replaced_one_keeps_its_own(tmp_path):
    """New file: what open() gives under the umask (0644 under 022, POSIX open(2)); a file
    replaced keeps the mode its owner gave it (common practice, no source)."""
    edited = parse_scenario(LAKE)
    mask = os.umask(0o022)
    try:
        new = save_scenario(edited, tmp_path / "new.toml")
        assert stat.S_IMODE(new.stat().st_mode) == 0o644
        private = tmp_path / "private.toml"
        private.write_text("x = 1\n", encoding="utf-8")
        private.chmod(0o640)
        save_scenario(edited, private, overwrite=True)
        assert stat.S_IMODE(private.stat().st_mode) == 0o640
        assert load_scenario(private) == edited
    finally:
        os.umask(mask)


def test_saving_over_a_link_writes_the_file_it_points_to(tmp_path):
    real = tmp_path / "real.toml"
    real.write_text(LAKE, encoding="utf-8")
    link = tmp_path / "link.toml"
    link.symlink_to(real)
    data = dump(load_scenario(link))
    data["simulation"]["horizon"] = 45.0
    edited = scenario_from_data(data)
    save_scenario(edited, link, overwrite=True, template=link.read_text(encoding="utf-8"))
    assert link.is_symlink() and load_scenario(real) == edited
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link.toml", "real.toml"]
