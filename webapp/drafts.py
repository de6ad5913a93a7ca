"""The schedule editor's data: which fields each schedule kind shows, how typed text goes back
into scenario data, and where each validation problem is shown.

Typed text is put into the scenario data as it is (lists split at commas and semicolons); the
planner's own validation then converts numbers and reports anything wrong with its dotted
field path, so the editor gives the same messages as ``planner check``.
"""

from __future__ import annotations

import copy
import re
from dataclasses import dataclass

from planner.errors import Problem
from planner.models.info import ParameterInfo
from planner.models.kinds import BUILTIN_INFO
from webapp import ids

# Field labels are our own; the key is the scenario-file key (used in every message).
COMMON_FIELDS = (("name", "Name", "text"),)
KIND_FIELDS: dict[str, tuple[tuple[str, str, str], ...]] = {
    "path": (("points", "Points: year, value; year, value; ...", "points"),),
    "staircase": (
        ("start", "Start (year)", "number"),
        ("levels", "Levels, in order (comma-separated)", "list"),
        ("step_years", "Years per level", "number"),
        ("ramp_years", "Years to move between levels", "number"),
    ),
    "overshoot": (
        ("start", "Start (year)", "number"),
        ("floor", "Floor", "control"),
        ("down_years", "Years to ramp down", "number"),
        ("hold_years", "Years at the floor", "number"),
        ("relax_to", "Relax to", "control"),
        ("up_years", "Years to ramp up", "number"),
    ),
}
ACTION_FIELDS: dict[str, tuple[tuple[str, str, str], ...]] = {
    "scale-state": (
        ("name", "Name", "text"),
        ("time", "At year", "number"),
        ("variable", "State variable", "text"),
        ("factor", "Multiply by", "number"),
        ("cost", "One-off cost", "money"),
    ),
    "parameter-pulse": (
        ("name", "Name", "text"),
        ("parameter", "Parameter", "text"),
        ("factor", "Multiply by", "number"),
        ("start", "From year", "number"),
        ("duration", "For (years)", "number"),
        ("decay_years", "Then fades over (years)", "number"),
        ("cost", "One-off cost", "money"),
    ),
    "in-lake-measure": (
        ("name", "Name", "text"),
        ("measure", "Measure (catalogue entry)", "text"),
        ("lake_type", "Lake type (shallow or deep)", "text"),
        ("parameter", "Parameter it multiplies", "text"),
        ("start", "First dose in year", "number"),
        ("doses", "Doses", "number"),
        ("every_years", "Years between doses", "number"),
        ("effect", "Share of the parameter left (blank: catalogue)", "number"),
        ("longevity_years", "Years each dose works (blank: catalogue)", "number"),
        ("capital_cost", "Cost of each dose", "money"),
        ("running_cost", "Running cost per year", "money"),
    ),
}
KIND_LABELS = {
    "path": "Path: points joined by straight lines",
    "staircase": "Staircase: levels held in turn",
    "overshoot": "Overshoot: down to a floor, then up",
}
ACTION_LABELS = {
    "scale-state": "One-off change of a state",
    "parameter-pulse": "Temporary change of a parameter",
    "in-lake-measure": "In-lake measure from the catalogue",
}
OPTIONAL_ACTION_FIELDS = {"every_years", "effect", "longevity_years"}  # blank: left out
SCHEDULE_KINDS = tuple(KIND_FIELDS)
_SPLIT = re.compile(r"[,\s]+")


def number_text(value: object) -> str:
    """A value as the editor shows it: numbers in their shortest exact form, text unchanged."""
    if isinstance(value, bool):
        return str(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, float):
        return str(int(value)) if value.is_integer() and abs(value) < 1e15 else repr(value)
    return "" if value is None else str(value)


def field_text(value: object, style: str) -> str:
    """The text shown in a field for a value from the scenario data."""
    if style == "points" and isinstance(value, list):
        return "; ".join(
            ", ".join(number_text(v) for v in point)
            if isinstance(point, list)
            else number_text(point)
            for point in value
        )
    if style == "list" and isinstance(value, list):
        return ", ".join(number_text(v) for v in value)
    return number_text(value)


def parse_text(text: object, style: str) -> object:
    """Typed text back into scenario data (numbers stay text: the planner's validation parses
    them and names the field when one is not a number)."""
    text = "" if text is None else str(text).strip()
    if style == "points":
        if not text:
            return []
        return [
            [part for part in _SPLIT.split(pair.strip()) if part]
            for pair in text.split(";")
            if pair.strip()
        ]
    if style == "list":
        return [part for part in _SPLIT.split(text.replace(";", ",")) if part]
    return text


def schedule_fields(kind: str) -> tuple[tuple[str, str, str], ...]:
    return COMMON_FIELDS + KIND_FIELDS.get(kind, ())


def editor_values(data: dict) -> tuple[list[tuple[dict, str]], list[tuple[dict, str]]]:
    """The (id, text) of every schedule field and every action field, in page order, as the
    editor shows them for this data."""
    fields, actions = [], []
    for i, schedule in enumerate(data.get("schedules", [])):
        for key, _, style in schedule_fields(schedule.get("kind")):
            fields.append((ids.schedule_field(i, key), field_text(schedule.get(key), style)))
        for a, action in enumerate(schedule.get("actions", [])):
            for key, _, style in ACTION_FIELDS.get(action.get("kind"), ()):
                actions.append((ids.action_field(i, a, key), field_text(action.get(key), style)))
    return fields, actions


def merge_fields(
    data: dict,
    schedule_values: list[tuple[dict, object]],
    action_values: list[tuple[dict, object]] = (),
) -> dict:
    """Scenario data with the editor's current text put in place (``(id, value)`` pairs)."""
    merged = copy.deepcopy(data)
    schedules = merged.setdefault("schedules", [])
    for ident, value in schedule_values:
        index, field = ident["index"], ident["field"]
        if not 0 <= index < len(schedules):
            continue
        styles = {key: style for key, _, style in schedule_fields(schedules[index].get("kind"))}
        if field in styles:
            schedules[index][field] = parse_text(value, styles[field])
    for ident, value in action_values:
        index, a, field = ident["index"], ident["action"], ident["field"]
        if not 0 <= index < len(schedules):
            continue
        actions = schedules[index].get("actions", [])
        if not 0 <= a < len(actions):
            continue
        styles = {key: style for key, _, style in ACTION_FIELDS.get(actions[a].get("kind"), ())}
        if field in styles:
            parsed = parse_text(value, styles[field])
            if parsed == "" and field in OPTIONAL_ACTION_FIELDS:
                actions[a].pop(field, None)  # blank: the catalogue's figure (or none)
            else:
                actions[a][field] = parsed
    return merged


@dataclass(frozen=True)
class Placement:
    """Where a problem is shown: beside a schedule field, an action field, the schedule as a
    whole, or (scenario-wide) in the status line."""

    kind: str  # "field", "action", "schedule", "parameter" or "scenario"
    index: int | None = None
    action: int | None = None
    field: str | None = None


def place(problem: Problem, data: dict) -> Placement:
    """Which part of the editor a problem (dotted path ``schedules.2.floor``) belongs to."""
    parts = problem.field.split(".")
    if len(parts) == 3 and parts[:2] == ["model", "parameters"]:
        if parts[2] in data.get("model", {}).get("parameters", {}):
            return Placement("parameter", field=parts[2])
        return Placement("scenario")
    if len(parts) < 2 or parts[0] != "schedules" or not parts[1].isdigit():
        return Placement("scenario")
    index = int(parts[1])
    schedules = data.get("schedules", [])
    if index >= len(schedules):
        return Placement("scenario")
    kind = schedules[index].get("kind")
    if len(parts) >= 4 and parts[2] == "actions" and parts[3].isdigit():
        a = int(parts[3])
        actions = schedules[index].get("actions", [])
        if a < len(actions) and len(parts) >= 5:
            keys = {key for key, _, _ in ACTION_FIELDS.get(actions[a].get("kind"), ())}
            if parts[4] in keys:
                return Placement("action", index, a, parts[4])
        return Placement("schedule", index)
    if len(parts) >= 3 and parts[2] in {key for key, _, _ in schedule_fields(kind)}:
        return Placement("field", index, field=parts[2])
    return Placement("schedule", index)


def message_text(problem: Problem, where: Placement, data: dict) -> str:
    """A message in the editor's words: the field's label as the card shows it (and which item
    of a list, counted from 1), or "Schedule N" counted from 1 as the cards are; never the
    file's internal path (schedules.1.floor) where the message sits beside its field."""
    parts = problem.field.split(".")
    if where.kind == "parameter":
        return f"{parameter_label(data, where.field)}: {problem.reason}"
    if where.kind in ("field", "action") and where.index is not None:
        schedule = data["schedules"][where.index]
        if where.kind == "field":
            labels = {key: label for key, label, _ in schedule_fields(schedule.get("kind"))}
            rest = parts[3:]
        else:
            action = schedule.get("actions", [])[where.action]
            labels = {key: label for key, label, _ in ACTION_FIELDS.get(action.get("kind"), ())}
            rest = parts[5:]
        label = labels.get(where.field, where.field).split(":")[0]  # without the typing hint
        positions = [int(p) + 1 for p in rest if p.isdigit()]
        items = [f"{word} {n}" for word, n in zip(("item", "number"), positions, strict=False)]
        return f"{', '.join([label, *items])}: {problem.reason}"
    if len(parts) >= 2 and parts[0] == "schedules" and parts[1].isdigit():
        words = [f"Schedule {int(parts[1]) + 1}"]
        for part in parts[2:]:
            words.append(f"{int(part) + 1}" if part.isdigit() else part.replace("_", " "))
        return f"{' '.join(words)}: {problem.reason}"
    return f"{problem.field}: {problem.reason}"


def blame(problems: list[Problem], data: dict) -> list[Problem]:
    """The problems with each one moved to the field actually at fault.

    The schema checks an overshoot's Relax to against its floor; when the floor is the odd one
    out (above today's value of the control, so no cut at all), the message goes to Floor.
    """
    control = data.get("control", {})
    today = data.get("model", {}).get("parameters", {}).get(control.get("parameter"))
    unit = control.get("unit", "")
    schedules = data.get("schedules", [])
    out = []
    for problem in problems:
        parts = problem.field.split(".")
        if (
            len(parts) == 3
            and parts[0] == "schedules"
            and parts[1].isdigit()
            and parts[2] == "relax_to"
            and int(parts[1]) < len(schedules)
            and problem.reason.startswith("must be at least the floor")
        ):
            schedule = schedules[int(parts[1])]
            try:
                floor, relax = float(schedule.get("floor")), float(schedule.get("relax_to"))
                today_value = float(today)
            except (TypeError, ValueError):
                out.append(problem)
                continue
            if floor > today_value:
                reason = (
                    f"{floor:g} {unit} is above today's value ({today_value:g} {unit}): the floor "
                    f"is the lowest value the cut reaches, at most Relax to ({relax:g} {unit})"
                ).replace("  ", " ")
                out.append(Problem(problem.source, f"schedules.{parts[1]}.floor", reason))
                continue
        out.append(problem)
    return out


# Command-line options quoted by the planner's messages, in the app's words: whole phrases
# first, then any option left.
PHRASE_WORDS = (
    (re.compile(r"choose one with --[a-z-]+"), "rename the column in the file's header"),
    (
        re.compile(r"(check|map one with) --state \S+=COLUMN"),
        "name that column in the file's header",
    ),
    (re.compile(r"hold one of them \(--fit\)"), "hold one of them"),
    (re.compile(r"\(or fit fewer parameters with --fit\)"), "(or fit fewer parameters)"),
)
OPTION_WORDS = {
    "--time-column": "the time column",
    "--control-column": "the load column",
    "--state": "the column of the model variable",
    "--scenario": "the scenario chosen in the Scenario panel",
    "--season": "the season of the record",
    "--fit": "the parameters fitted",
    "--bootstrap": "the number of bootstrap replicates",
    "--log": "a log scale",
    "--out": "the fitted scenario",
}
_OPTION = re.compile(r"--[a-z][a-z-]*")


def app_words(text: str) -> str:
    """A planner message with the command-line options it quotes put in the app's words
    ("...; choose one with --control-column" -> "...; rename the column in the file's header")."""
    for pattern, words in PHRASE_WORDS:
        text = pattern.sub(words, text)

    def option_words(match: re.Match) -> str:
        option = match.group(0)
        return OPTION_WORDS.get(option, option.removeprefix("--").replace("-", " "))

    return _OPTION.sub(option_words, text)


def problem_in_app_words(problem: Problem) -> Problem:
    """``problem`` with no command-line option left in its source, field or reason."""
    return Problem(app_words(problem.source), app_words(problem.field), app_words(problem.reason))


# ---------------------------------------------------------------------------------------------
# In-lake measures and model parameters in the editor.


def new_measure(data: dict, index: int, measure: str | None = None) -> dict:
    """A starting in-lake measure for schedule ``index``: the catalogue's first entry (or
    ``measure``), the lake type the scenario's mean depth suggests (shallow without one), the
    parameter the measure multiplies in this model kind, one dose when the schedule starts."""
    from planner.measures import CATALOGUE, default_parameter

    measure = measure or next(iter(CATALOGUE))
    entry = CATALOGUE[measure]
    model_kind = data.get("model", {}).get("kind", "")
    parameter = default_parameter(measure, model_kind) or ""
    lake_type = "shallow" if "shallow" in entry.lake_types else next(iter(entry.lake_types))
    schedule = data.get("schedules", [])[index]
    start = schedule.get("start", 0.0)
    if schedule.get("kind") == "path":
        start = 0.0
    action = {
        "kind": "in-lake-measure",
        "name": entry.label,
        "measure": measure,
        "lake_type": lake_type,
        "parameter": parameter,
        "start": start,
        "doses": 1,
        "capital_cost": 0.0,
        "running_cost": 0.0,
    }
    if entry.lake_types[lake_type].longevity is None:
        action["longevity_years"] = 10.0  # an operated system: how long it is run
    return action


def add_measure(data: dict, index: int) -> dict:
    """Scenario data with an in-lake measure added to schedule ``index``."""
    out = copy.deepcopy(data)
    schedule = out.setdefault("schedules", [])[index]
    schedule.setdefault("actions", []).append(new_measure(out, index))
    return out


def parameter_label(data: dict, name: str) -> str:
    """A model parameter as the parameter panel names it: what it means, then its symbol."""
    info = _parameter_info(data, name)
    meaning = info.meaning if info is not None else ""
    return f"{meaning[:1].upper()}{meaning[1:]} ({name})" if meaning else name


def _parameter_info(data: dict, name: str) -> ParameterInfo | None:
    """What a built-in model says of parameter ``name`` (None for a formula's parameters)."""
    info = BUILTIN_INFO.get(data.get("model", {}).get("kind"))
    try:
        return None if info is None else info.parameter_info(name)
    except KeyError:
        return None


def parameter_rows(data: dict) -> list[dict]:
    """One row per model parameter for the parameter panel: name, label, meaning, the valid
    range in words, unit and the value as text."""
    parameters = data.get("model", {}).get("parameters", {})
    control = data.get("control", {})
    rows = []
    for name, value in parameters.items():
        info = _parameter_info(data, name)
        if info is None or info.lower is None:
            valid = "any number"
        else:
            valid = f"{'greater than' if info.strict else 'at least'} {info.lower:g}"
        is_control = name == control.get("parameter")
        rows.append(
            {
                "name": name,
                "label": parameter_label(data, name),
                "valid": valid,
                "unit": control.get("unit", "") if is_control else "",
                "control": is_control,
                "text": number_text(value),
            }
        )
    return rows


def merge_parameters(data: dict, values: list[tuple[dict, object]]) -> dict:
    """Scenario data with the parameter panel's text put in place (``(id, value)`` pairs)."""
    merged = copy.deepcopy(data)
    parameters = merged.setdefault("model", {}).setdefault("parameters", {})
    for ident, value in values:
        name = ident["name"]
        if name in parameters:
            parameters[name] = parse_text(value, "number")
    return merged


def unique_name(base: str, taken: set[str]) -> str:
    """``base``, or ``base (2)``, ``base (3)`` ... whichever is free."""
    if base not in taken:
        return base
    n = 2
    while f"{base} ({n})" in taken:
        n += 1
    return f"{base} ({n})"


def new_schedule(kind: str, data: dict) -> dict:
    """A starting schedule of ``kind`` for this scenario: a gentle cut from today's control value
    to halfway towards the lowest achievable value. Plain starting numbers for the user to edit."""
    if kind not in KIND_FIELDS:
        raise ValueError(f"unknown schedule kind {kind!r}")
    control = data.get("control", {})
    parameter = control.get("parameter")
    current = float(data.get("model", {}).get("parameters", {}).get(parameter, 0.0))
    low = control.get("lowest_achievable", control.get("range", [0.0, 1.0])[0])
    low = float(low)
    middle = round(low + 0.5 * (current - low), 6)
    quarter = round(low + 0.25 * (current - low), 6)
    taken = {s.get("name") for s in data.get("schedules", [])}
    name = unique_name(f"New {kind} schedule", taken)
    if kind == "path":
        return {
            "name": name,
            "kind": "path",
            "actions": [],
            "points": [[0.0, current], [10.0, middle]],
        }
    if kind == "staircase":
        return {
            "name": name,
            "kind": "staircase",
            "actions": [],
            "start": 0.0,
            "levels": [middle, quarter, middle],
            "step_years": 8.0,
            "ramp_years": 4.0,
        }
    return {
        "name": name,
        "kind": "overshoot",
        "actions": [],
        "start": 0.0,
        "floor": quarter,
        "down_years": 10.0,
        "hold_years": 6.0,
        "relax_to": middle,
        "up_years": 4.0,
    }


def duplicate(data: dict, index: int) -> dict:
    """Scenario data with a copy of schedule ``index`` inserted after it, under a new name."""
    out = copy.deepcopy(data)
    schedules = out.setdefault("schedules", [])
    copy_of = copy.deepcopy(schedules[index])
    copy_of["name"] = unique_name(
        f"{copy_of.get('name', 'Schedule')} (copy)", {s.get("name") for s in schedules}
    )
    schedules.insert(index + 1, copy_of)
    return out


def delete(data: dict, index: int) -> dict:
    out = copy.deepcopy(data)
    del out.setdefault("schedules", [])[index]
    return out


def add(data: dict, kind: str) -> dict:
    out = copy.deepcopy(data)
    out.setdefault("schedules", []).append(new_schedule(kind, out))
    return out


# ---------------------------------------------------------------------------------------------
# Unsaved edits and undo / redo. The history holds earlier and later *valid* versions of the
# scenario (as kept in the working store); it lives in a store in the browser, bounded.

HISTORY_LIMIT = 20  # versions kept each way (a version is the scenario's data, a few kB)


def unsaved(working: dict | None, baseline: dict | None) -> bool:
    """Whether the editor holds edits not in the file the scenario was opened from or saved to
    (``baseline``: ``{"key", "serial"}``): values still to fix count as edits. While the editor
    has not caught up with a file just opened (its ``serial`` is older) nothing is unsaved."""
    if not working or not working.get("data") or not baseline:
        return False
    if working.get("serial", 0) < baseline.get("serial", 0):
        return False
    return bool(working.get("stale")) or working.get("key") != baseline.get("key")


def change_words(before: dict, after: dict) -> str:
    """What changed from one version of the scenario data to the next, in the editor's words
    (for "Undone: ..." and "Redone: ..."): a schedule added or deleted, or the fields changed
    of the first schedule that differs (numbered from 1, as the cards are)."""
    old, new = before.get("schedules", []), after.get("schedules", [])
    old_names = [s.get("name") for s in old]
    new_names = [s.get("name") for s in new]
    if len(new) > len(old):
        added = [n for n in new_names if n not in old_names] or new_names[-1:]
        return f"schedule \u201c{added[0]}\u201d added"
    if len(new) < len(old):
        gone = [n for n in old_names if n not in new_names] or old_names[-1:]
        return f"schedule \u201c{gone[0]}\u201d deleted"
    for number, (a, b) in enumerate(zip(old, new, strict=True), start=1):
        if a == b:
            continue
        labels = {key: label.split(":")[0] for key, label, _ in schedule_fields(b.get("kind"))}
        labels["actions"] = "its actions"
        keys = [k for k in b if a.get(k) != b.get(k)] + [k for k in a if k not in b]
        words = ", ".join(labels.get(k, k.replace("_", " ")) for k in keys)
        return f"{words} of schedule {number} changed"
    old_parameters = before.get("model", {}).get("parameters", {})
    new_parameters = after.get("model", {}).get("parameters", {})
    changed = [k for k in new_parameters if old_parameters.get(k) != new_parameters.get(k)]
    if changed:
        return f"model parameter {', '.join(parameter_label(after, k) for k in changed)} changed"
    blocks = [k for k in after if before.get(k) != after.get(k)]
    blocks += [k for k in before if k not in after]
    return f"{', '.join(blocks) or 'the scenario'} changed"


def remember(
    history: dict | None, working: dict | None, baseline: dict | None, latest: int = 0
) -> dict | None:
    """The history after the working store changed, or None when it stays as it is.

    A new valid version goes on top (the oldest dropped past HISTORY_LIMIT) and clears what
    could be redone; the same version again (an undo arriving, a recompute) changes nothing;
    a scenario opened anew (``baseline["opened"]`` changed) starts a fresh history. A working
    store older than the last version put into the editor (``latest``: its serial, bumped by
    every load, undo and redo) is an answer arriving late and is not an edit."""
    if not working or not working.get("data") or working.get("stale"):
        return None
    serial = working.get("serial", 0)
    if serial < latest or (baseline and serial < baseline.get("serial", 0)):
        return None  # the editor has not caught up with what was put into it
    opened = (baseline or {}).get("opened")
    entry = {"key": working.get("key"), "data": working["data"], "what": ""}
    history = history or {}
    present = history.get("present")
    if history.get("opened") != opened or not present:
        return {"opened": opened, "past": [], "present": entry, "future": []}
    if present.get("key") == entry["key"]:
        return None
    entry["what"] = change_words(present["data"], working["data"])
    past = [*history.get("past", []), present][-HISTORY_LIMIT:]
    return {"opened": opened, "past": past, "present": entry, "future": []}


def step(history: dict | None, direction: int) -> tuple[dict, dict, str] | None:
    """Undo (``direction`` -1) or redo (+1): ``(history, version to show, what was undone or
    redone)``, or None when there is nothing that way."""
    history = history or {}
    past, future = list(history.get("past", [])), list(history.get("future", []))
    present = history.get("present")
    if present is None or not (past if direction < 0 else future):
        return None
    if direction < 0:
        shown = past.pop()
        future = [present, *future][:HISTORY_LIMIT]
        what = present.get("what", "")
    else:
        shown = future.pop(0)
        past = [*past, present][-HISTORY_LIMIT:]
        what = shown.get("what", "")
    new = {"opened": history.get("opened"), "past": past, "present": shown, "future": future}
    return new, shown, what
