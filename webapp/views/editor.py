"""The schedule editor: one card per schedule, with add, duplicate and delete (after a
confirmation), and undo / redo of every edit.

Two callbacks keep it quick. ``restructure`` redraws the cards when a scenario is loaded or a
schedule is added, duplicated or deleted (keeping whatever the user typed). ``recompute`` runs on
every edit: it validates through the planner, shows each problem beside its field, and
re-simulates only the schedules whose numbers changed (the diagram is cached). When many
schedules need computing at once, the work goes to a background worker with a progress bar.

Undo and redo walk a bounded history of valid versions of the scenario (``drafts.remember``,
``drafts.step``), kept in a store in the browser; a version is restored by loading it into the
editor, as a file is. Ctrl+Z and Ctrl+Y (or Ctrl+Shift+Z) press the buttons when the cursor is
not in a text field (the field's own undo works there).
"""

from __future__ import annotations

import json
import time

from dash import Input, Output, State, ctx, dcc, html, no_update

from planner.errors import InputError
from planner.report import verdict_text
from webapp import compute, drafts, ids
from webapp.jobs import JobIds, job_progress, progress_reporter, register_job
from webapp.settings import Settings
from webapp.views.common import money, working_comparison, working_scenario

FAST_LIMIT = 8  # schedules computed within one edit; more go to the background worker
WIDE_STYLES = ("text", "points", "list")
SHOWN = {"display": "flex"}
HIDDEN = {"display": "none"}
COMPARE_JOB = JobIds(
    run=None,
    box=ids.COMPARE_PROGRESS_BOX,
    bar=ids.COMPARE_PROGRESS,
    text=ids.COMPARE_PROGRESS_TEXT,
    cancel=ids.COMPARE_CANCEL,
)


# ---------------------------------------------------------------------------------------------
# layout


def layout() -> html.Section:
    return html.Section(
        [
            html.Div(
                [
                    html.H2("Schedules"),
                    html.Div(
                        [
                            html.Button(
                                "Undo",
                                id=ids.UNDO_BUTTON,
                                className="button small",
                                disabled=True,
                                title="Undo the last change (Ctrl+Z)",
                            ),
                            html.Button(
                                "Redo",
                                id=ids.REDO_BUTTON,
                                className="button small",
                                disabled=True,
                                title="Redo the change undone (Ctrl+Y)",
                            ),
                        ],
                        className="undo-buttons",
                        role="group",
                        **{"aria-label": "Undo and redo"},
                    ),
                ],
                className="panel-head",
            ),
            html.Div(id=ids.UNDO_MESSAGE, className="undo-message", role="status"),
            dcc.ConfirmDialog(id=ids.DELETE_CONFIRM, message=""),
            html.P(
                "Change any number and press Enter (or leave the field): the schedule is "
                "simulated again and every view updates.",
                className="hint",
            ),
            html.Div(id=ids.RECOMPUTE_STATUS, className="status-line", **{"aria-live": "polite"}),
            job_progress(COMPARE_JOB, "Comparing schedules"),
            html.Div(id=ids.EDITOR, className="schedule-list"),
            html.Details(
                [
                    html.Summary("Model parameters"),
                    html.P(
                        "Change a value and press Enter (or leave the field): the diagram and "
                        "every schedule are computed again. Undo brings the old value back.",
                        className="hint",
                    ),
                    html.Div(id=ids.PARAMETER_PANEL, className="fields-grid"),
                ],
                className="parameter-box",
                open=False,
            ),
            html.Div(
                [
                    html.Label(
                        "New schedule of kind", htmlFor=ids.ADD_KIND, className="field-label"
                    ),
                    dcc.Dropdown(
                        id=ids.ADD_KIND,
                        options=[{"label": k, "value": k} for k in drafts.SCHEDULE_KINDS],
                        value="overshoot",
                        clearable=False,
                        searchable=False,
                        className="kind-dropdown",
                    ),
                    html.Button("Add schedule", id=ids.ADD_BUTTON, className="button primary"),
                ],
                className="add-row",
            ),
        ],
        className="panel",
    )


def _unit_suffix(style: str, data: dict) -> str:
    control = data.get("control", {})
    if style == "control":
        return control.get("unit", "")
    if style == "money":
        return (data.get("costs") or {}).get("currency", "")
    return ""


def _field_row(
    ident: dict, message_id: dict, label: str, value: str, unit: str, wide: bool
) -> html.Div:
    return html.Div(
        [
            html.Label(label, htmlFor=_dom_id(ident), className="field-label"),
            html.Div(
                [
                    dcc.Input(
                        id=ident,
                        value=value,
                        type="text",
                        debounce=True,
                        className="field-input",
                        autoComplete="off",
                    ),
                    html.Span(unit, className="unit") if unit else None,
                ],
                className="input-with-unit",
            ),
            html.Div(id=message_id, className="field-message", role="alert"),
        ],
        className="field-row wide" if wide else "field-row",
    )


def _dom_id(ident: dict) -> str:
    # Dash renders a dict id as its JSON with sorted keys; labels point at it.
    return json.dumps(ident, sort_keys=True, separators=(",", ":"))


def schedule_card(index: int, schedule: dict, data: dict) -> html.Div:
    """The card of one schedule: its fields, its actions' fields, messages and result line."""
    kind = schedule.get("kind", "")
    control = data.get("control", {})
    rows = []
    for key, label, style in drafts.schedule_fields(kind):
        unit = _unit_suffix(style, data)
        if style == "points":
            label = (
                f"Points: year, {control.get('label') or control.get('parameter', 'value')}; ..."
            )
            unit = f"(years, {control.get('unit', '')})" if control.get("unit") else ""
        rows.append(
            _field_row(
                ids.schedule_field(index, key),
                ids.field_message(index, key),
                label,
                drafts.field_text(schedule.get(key), style),
                unit,
                wide=style in WIDE_STYLES,
            )
        )
    actions = []
    for a, action in enumerate(schedule.get("actions", [])):
        action_kind = action.get("kind", "")
        fields = [
            _field_row(
                ids.action_field(index, a, key),
                ids.action_message(index, a, key),
                label,
                drafts.field_text(action.get(key), style),
                _unit_suffix(style, data),
                wide=style in WIDE_STYLES,
            )
            for key, label, style in drafts.ACTION_FIELDS.get(action_kind, ())
        ]
        actions.append(
            html.Fieldset(
                [
                    html.Legend(
                        f"Action {a + 1}: {drafts.ACTION_LABELS.get(action_kind, action_kind)}"
                    ),
                    html.Div(fields, className="fields-grid"),
                ],
                className="action-box",
            )
        )
    return html.Div(
        [
            html.Div(
                [
                    html.Span(f"{index + 1}", className="card-number"),
                    html.Span(drafts.KIND_LABELS.get(kind, kind), className="card-kind"),
                    html.Button(
                        "Duplicate",
                        id=ids.schedule_button(index, "duplicate"),
                        className="button small",
                    ),
                    html.Button(
                        "Add in-lake measure",
                        id=ids.schedule_button(index, "measure"),
                        className="button small",
                        title="Add an in-lake measure from the catalogue to this schedule",
                    ),
                    html.Button(
                        "Delete",
                        id=ids.schedule_button(index, "delete"),
                        className="button small",
                        title="Delete this schedule (asks first; Undo brings it back)",
                    ),
                ],
                className="card-head",
            ),
            html.Div(rows, className="fields-grid"),
            *actions,
            html.Div(id=ids.schedule_message(index), className="field-message", role="alert"),
            html.Div(id=ids.schedule_result(index), className="schedule-result"),
        ],
        className="schedule-card",
        **{"data-schedule": str(index)},
    )


def parameter_panel(data: dict) -> list:
    """One field per model parameter: its meaning and symbol, unit and valid range."""
    rows = []
    for row in drafts.parameter_rows(data):
        hint = f"valid: {row['valid']}"
        if row["control"]:
            hint += "; today's value of the control (the schedules move it)"
        rows.append(
            html.Div(
                [
                    html.Label(
                        row["label"],
                        htmlFor=_dom_id(ids.parameter_field(row["name"])),
                        className="field-label",
                    ),
                    html.Div(
                        [
                            dcc.Input(
                                id=ids.parameter_field(row["name"]),
                                value=row["text"],
                                type="text",
                                debounce=True,
                                className="field-input",
                                autoComplete="off",
                            ),
                            html.Span(row["unit"], className="unit") if row["unit"] else None,
                        ],
                        className="input-with-unit",
                    ),
                    html.Div(hint, className="hint"),
                    html.Div(
                        id=ids.parameter_message(row["name"]),
                        className="field-message",
                        role="alert",
                    ),
                ],
                className="field-row",
            )
        )
    return rows


def parameter_edit(values, value_ids, message_ids, draft):
    """A model parameter typed -> (draft store, parameter messages, field classes). The draft
    store carries the new value to ``recompute`` (the one validation and simulation path);
    problems with a parameter are shown beside it, named by its label."""
    blank = [""] * len(message_ids), ["field-input"] * len(value_ids)
    if not draft:
        return no_update, *blank
    data = drafts.merge_parameters(draft["data"], list(zip(value_ids, values, strict=True)))
    messages: dict[str, list[str]] = {}
    try:
        compute.scenario_of(data, draft.get("source", "scenario"))
    except InputError as error:
        for problem in error.problems:
            where = drafts.place(problem, data)
            if where.kind == "parameter":
                messages.setdefault(where.field, []).append(
                    drafts.message_text(problem, where, data)
                )
    texts = ["; ".join(messages.get(m["name"], [])) for m in message_ids]
    classes = ["field-input invalid" if v["name"] in messages else "field-input" for v in value_ids]
    new = no_update if data == draft["data"] else {**draft, "data": data}
    return new, texts, classes


def render(data: dict) -> list:
    schedules = data.get("schedules", [])
    if not schedules:
        return [html.P("No schedules yet: add one below.", className="hint")]
    return [schedule_card(i, schedule, data) for i, schedule in enumerate(schedules)]


# ---------------------------------------------------------------------------------------------
# callbacks as plain functions (the registered wrappers only add ``ctx.triggered_id``)


def restructure(
    loaded,
    _add,
    _buttons,
    add_kind,
    draft,
    values,
    value_ids,
    action_values,
    action_ids,
    *,
    trigger=None,
    trigger_value=None,
):
    """New scenario, or add / duplicate / delete -> (editor cards, draft store)."""
    if trigger == ids.LOADED or trigger is None:
        if not loaded:
            return no_update, no_update
        data = loaded["data"]
        new = {"source": loaded["source"], "data": data, "serial": loaded.get("serial", 0)}
        return render(data), new
    if not draft or not trigger_value:
        return no_update, no_update  # a button just drawn (n_clicks None) is not a click
    data = drafts.merge_fields(
        draft["data"],
        list(zip(value_ids, values, strict=True)),
        list(zip(action_ids, action_values, strict=True)),
    )
    if trigger == ids.ADD_BUTTON:
        data = drafts.add(data, add_kind or "overshoot")
    elif isinstance(trigger, dict) and trigger.get("type") == ids.SCHEDULE_BUTTON:
        index = trigger["index"]
        if not 0 <= index < len(data.get("schedules", [])):
            return no_update, no_update
        if trigger["action"] == "duplicate":
            data = drafts.duplicate(data, index)
        elif trigger["action"] == "delete":
            data = drafts.delete(data, index)
        elif trigger["action"] == "measure":
            data = drafts.add_measure(data, index)
        else:
            return no_update, no_update
    else:
        return no_update, no_update
    return render(data), {**draft, "data": data}


def structure(
    loaded,
    add,
    buttons,
    confirmed,
    add_kind,
    draft,
    values,
    value_ids,
    action_values,
    action_ids,
    pending,
    *,
    trigger=None,
    trigger_value=None,
):
    """``restructure`` with a question before a delete -> (editor cards, draft store, delete
    question shown, its text, schedule awaiting deletion, undo message). A Delete click only
    asks; confirming deletes the schedule asked about, if it is still where it was."""
    nothing = (no_update,) * 6
    args = (loaded, add, buttons, add_kind, draft, values, value_ids, action_values, action_ids)
    is_delete = (
        isinstance(trigger, dict)
        and trigger.get("type") == ids.SCHEDULE_BUTTON
        and trigger.get("action") == "delete"
    )
    if is_delete or trigger == ids.DELETE_CONFIRM:
        if not draft or not trigger_value:
            return nothing  # a button just drawn (n_clicks None) is not a click
        schedules = drafts.merge_fields(
            draft["data"],
            list(zip(value_ids, values, strict=True)),
            list(zip(action_ids, action_values, strict=True)),
        ).get("schedules", [])
        index = trigger["index"] if is_delete else (pending or {}).get("index", -1)
        name = schedules[index].get("name") if 0 <= index < len(schedules) else None
        if is_delete:
            if name is None:
                return nothing
            question = f"Delete schedule {index + 1}, “{name}”? Undo (or Ctrl+Z) brings it back."
            return no_update, no_update, True, question, {"index": index, "name": name}, no_update
        if name is None or name != pending.get("name"):
            text = "Not deleted: the schedules changed while the question was open."
            return no_update, no_update, False, no_update, None, text
        cards, new_draft = restructure(
            *args, trigger=ids.schedule_button(index, "delete"), trigger_value=trigger_value
        )
        text = f"Deleted schedule {index + 1}, “{name}”. Undo (or Ctrl+Z) brings it back."
        return cards, new_draft, False, no_update, None, text
    cards, new_draft = restructure(*args, trigger=trigger, trigger_value=trigger_value)
    return cards, new_draft, no_update, no_update, no_update, no_update


def recompute(
    values,
    action_values,
    draft,
    value_ids,
    action_ids,
    message_ids,
    action_message_ids,
    schedule_message_ids,
    working,
):
    """Every edit -> (field messages, action messages, schedule messages, field classes, action
    field classes, working store, status line, background job)."""
    started = time.perf_counter()
    blank = (
        [""] * len(message_ids),
        [""] * len(action_message_ids),
        [""] * len(schedule_message_ids),
    )
    classes = (["field-input"] * len(value_ids), ["field-input"] * len(action_ids))
    if not draft:
        return (*blank, *classes, no_update, "", no_update)
    data = drafts.merge_fields(
        draft["data"],
        list(zip(value_ids, values, strict=True)),
        list(zip(action_ids, action_values, strict=True)),
    )
    source = draft.get("source", "scenario")
    try:
        scenario = compute.scenario_of(data, source)
    except InputError as error:
        return _problems(
            error,
            data,
            message_ids,
            action_message_ids,
            schedule_message_ids,
            value_ids,
            action_ids,
            working,
        )
    todo = compute.missing(scenario)
    valid = compute.dump(scenario)
    key = compute.scenario_key(valid)
    new = {
        "source": source,
        "data": valid,
        "key": key,
        "stale": False,
        "serial": draft.get("serial", 0),
    }
    if len(todo) > FAST_LIMIT:
        new["complete"] = False
        status = html.Span(
            f"Computing {len(todo)} schedules in the background; results appear when done.",
            className="status busy",
        )
        return (*blank, *classes, new, status, {"key": key, "data": valid})
    compute.comparison_of(scenario)
    new["complete"] = True
    elapsed = time.perf_counter() - started
    count = len(scenario.schedules)
    text = f"{count} schedules compared; {len(todo)} simulated again in {elapsed:.2f} s."
    return (*blank, *classes, new, html.Span(text, className="status ok"), no_update)


def _problems(
    error,
    data,
    message_ids,
    action_message_ids,
    schedule_message_ids,
    value_ids,
    action_ids,
    working,
):
    """Each problem beside its field (or its schedule, or in the status line); the working
    store keeps the last valid scenario, marked stale."""
    fields: dict[tuple, list[str]] = {}
    actions: dict[tuple, list[str]] = {}
    schedules: dict[int, list[str]] = {}
    general: list[str] = []
    for problem in drafts.blame(list(error.problems), data):
        where = drafts.place(problem, data)
        text = drafts.message_text(problem, where, data)
        if where.kind == "field":
            fields.setdefault((where.index, where.field), []).append(text)
        elif where.kind == "action":
            actions.setdefault((where.index, where.action, where.field), []).append(text)
        elif where.kind == "schedule":
            schedules.setdefault(where.index, []).append(text)
        else:
            general.append(text)
    field_messages = ["; ".join(fields.get((m["index"], m["field"]), [])) for m in message_ids]
    action_messages = [
        "; ".join(actions.get((m["index"], m["action"], m["field"]), []))
        for m in action_message_ids
    ]
    schedule_messages = ["; ".join(schedules.get(m["index"], [])) for m in schedule_message_ids]
    field_classes = [
        "field-input invalid" if (v["index"], v["field"]) in fields else "field-input"
        for v in value_ids
    ]
    action_classes = [
        "field-input invalid" if (v["index"], v["action"], v["field"]) in actions else "field-input"
        for v in action_ids
    ]
    count = len(error.problems)
    status_text = (
        f"{count} value{'s' if count > 1 else ''} to fix (marked below); the results shown are "
        "for the last valid values."
    )
    status = html.Div(
        [html.Span(status_text), *(html.Div(line) for line in general)],
        className="status problem",
        role="alert",
    )
    kept = {**working, "stale": True} if working else no_update
    return (
        field_messages,
        action_messages,
        schedule_messages,
        field_classes,
        action_classes,
        kept,
        status,
        no_update,
    )


def result_lines(working, _ready, result_ids):
    """The verdict and cost line under each schedule ("computing..." while the background
    worker has them)."""
    scenario = working_scenario(working)
    if scenario is None:
        return [""] * len(result_ids)
    comparison = working_comparison(working)
    if comparison is None:
        return [html.Span("computing...", className="status busy")] * len(result_ids)
    outcomes = comparison.outcomes
    currency = scenario.costs.currency if scenario.costs is not None else ""
    stale = working.get("stale")
    lines = []
    for ident in result_ids:
        i = ident["index"]
        if i >= len(outcomes) or (stale and len(outcomes) != len(result_ids)):
            lines.append(
                html.Span("not computed yet: fix the values above", className="status problem")
            )
            continue
        outcome = outcomes[i]
        parts = [
            html.Strong(verdict_text(scenario, outcome), className="verdict"),
            html.Span(
                f"meets the target from year {outcome.meets_target_at:.1f}"
                if outcome.meets_target_at is not None
                else "target not met by the horizon"
            ),
            html.Span(f"total cost {money(outcome.cost.total, currency)}", className="cost-total"),
            html.Span(
                f"present value {money(outcome.cost.present_value, currency)}", className="cost-pv"
            ),
        ]
        body = [html.Div(parts, className="result-parts")]
        if outcome.infeasible is not None:
            body.append(
                html.Div(f"Infeasible: {outcome.infeasible.message}", className="infeasible")
            )
        if stale:
            body.append(html.Div("(for the last valid values)", className="hint"))
        state = "recovered" if outcome.recovered else "not-recovered"
        lines.append(html.Div(body, className=f"result {state}"))
    return lines


def history_controls(history: dict | None) -> tuple[bool, bool, str, str]:
    """(undo disabled, redo disabled, undo title, redo title) for this history."""
    history = history or {}
    past, future = history.get("past") or [], history.get("future") or []
    present = history.get("present") or {}
    undo_title = f"Undo: {present.get('what')} (Ctrl+Z)" if past else "Nothing to undo"
    redo_title = f"Redo: {future[0].get('what')} (Ctrl+Y)" if future else "Nothing to redo"
    return not past, not future, undo_title, redo_title


def record(working, history, baseline, loaded=None):
    """The working store changed -> (history, undo / redo controls)."""
    new = drafts.remember(history, working, baseline, (loaded or {}).get("serial", 0))
    if new is None:
        return (no_update,) * 5
    return new, *history_controls(new)


def undo_redo(_undo, _redo, history, loaded, working, *, trigger=None):
    """Undo or Redo -> (loaded store, history, undo / redo controls, message). The version
    restored goes into the editor as a loaded file does; values still to fix are simply
    dropped by an undo (back to the last valid version)."""
    direction = -1 if trigger == ids.UNDO_BUTTON else 1
    present = (history or {}).get("present")
    source = (working or {}).get("source") or (loaded or {}).get("source", "<editor>")
    serial = (loaded or {}).get("serial", 0) + 1
    if direction < 0 and present and (working or {}).get("stale"):
        store = {"source": source, "data": present["data"], "serial": serial}
        text = "Undone: the values still to fix (back to the last valid ones)."
        return store, no_update, *history_controls(history), text
    stepped = drafts.step(history, direction)
    if stepped is None:
        text = "Nothing to undo." if direction < 0 else "Nothing to redo."
        return no_update, no_update, *history_controls(history), text
    new, shown, what = stepped
    store = {"source": source, "data": shown["data"], "serial": serial}
    text = f"{'Undone' if direction < 0 else 'Redone'}: {what}."
    return store, new, *history_controls(new), text


def compare_in_background(set_progress, pending):
    """Background worker: every missing schedule, with progress; results go to the disk cache."""
    if not pending:
        return no_update, no_update
    scenario = compute.scenario_of(pending["data"])
    try:
        comparison = compute.comparison_of(
            scenario, progress=progress_reporter(set_progress), persist=True
        )
    except InputError as error:
        text = "; ".join(f"{p.field}: {p.reason}" for p in error.problems)
        return no_update, html.Span(text, className="status problem")
    text = f"{len(comparison.outcomes)} schedules compared in the background."
    return {"key": pending["key"], "finished": time.time()}, html.Span(text, className="status ok")


def compare_stopped(text: str) -> tuple:
    """The outputs of a background comparison stopped before it finished: why, in the status."""
    return None, html.Span(text, className="status problem")


# ---------------------------------------------------------------------------------------------


# In the browser: a working store older than the editor's draft (the answer to an earlier
# recompute arriving after a later one, when files are picked in quick succession) hands the
# draft back, marked, which runs the recompute of what the editor shows once more (once per
# draft: the mark stops a second round).
CATCH_UP_JS = """
function (working, draft) {
    var late = working && draft && (working.serial || 0) < (draft.serial || 0);
    if (!late || draft.caught_up === draft.serial) { return window.dash_clientside.no_update; }
    return Object.assign({}, draft, {caught_up: draft.serial});
}
"""


def register_page_script(clientside_callback) -> None:
    """The editor's part of the page script (registered by ``create_app``)."""
    clientside_callback(
        CATCH_UP_JS,
        Output(ids.DRAFT, "data", allow_duplicate=True),
        Input(ids.WORKING, "data"),
        State(ids.DRAFT, "data"),
        prevent_initial_call=True,
    )


def register(callback, settings: Settings) -> None:
    def on_structure(*args):
        value = ctx.triggered[0]["value"] if ctx.triggered else None
        out = structure(*args, trigger=ctx.triggered_id, trigger_value=value)
        loaded = args[0]
        redraw = ctx.triggered_id in (ids.LOADED, None) and loaded
        return *out, parameter_panel(loaded["data"]) if redraw else no_update

    callback(
        Output(ids.EDITOR, "children"),
        Output(ids.DRAFT, "data"),
        Output(ids.DELETE_CONFIRM, "displayed"),
        Output(ids.DELETE_CONFIRM, "message"),
        Output(ids.DELETE_PENDING, "data"),
        Output(ids.UNDO_MESSAGE, "children"),
        Output(ids.PARAMETER_PANEL, "children"),
        Input(ids.LOADED, "data"),
        Input(ids.ADD_BUTTON, "n_clicks"),
        Input(ids.ALL_SCHEDULE_BUTTONS, "n_clicks"),
        Input(ids.DELETE_CONFIRM, "submit_n_clicks"),
        State(ids.ADD_KIND, "value"),
        State(ids.DRAFT, "data"),
        State(ids.ALL_SCHEDULE_FIELDS, "value"),
        State(ids.ALL_SCHEDULE_FIELDS, "id"),
        State(ids.ALL_ACTION_FIELDS, "value"),
        State(ids.ALL_ACTION_FIELDS, "id"),
        State(ids.DELETE_PENDING, "data"),
    )(on_structure)

    history_outputs = (
        (ids.UNDO_BUTTON, "disabled"),
        (ids.REDO_BUTTON, "disabled"),
        (ids.UNDO_BUTTON, "title"),
        (ids.REDO_BUTTON, "title"),
    )
    callback(
        Output(ids.HISTORY, "data"),
        *(Output(*output) for output in history_outputs),
        Input(ids.WORKING, "data"),
        State(ids.HISTORY, "data"),
        State(ids.BASELINE, "data"),
        State(ids.LOADED, "data"),
        prevent_initial_call=True,
    )(record)

    def on_undo(undo, redo, history, loaded, working):
        return undo_redo(undo, redo, history, loaded, working, trigger=ctx.triggered_id)

    callback(
        Output(ids.LOADED, "data", allow_duplicate=True),
        Output(ids.HISTORY, "data", allow_duplicate=True),
        *(Output(*output, allow_duplicate=True) for output in history_outputs),
        Output(ids.UNDO_MESSAGE, "children", allow_duplicate=True),
        Input(ids.UNDO_BUTTON, "n_clicks"),
        Input(ids.REDO_BUTTON, "n_clicks"),
        State(ids.HISTORY, "data"),
        State(ids.LOADED, "data"),
        State(ids.WORKING, "data"),
        prevent_initial_call=True,
    )(on_undo)

    callback(
        Output(ids.ALL_FIELD_MESSAGES, "children"),
        Output(ids.ALL_ACTION_MESSAGES, "children"),
        Output(ids.ALL_SCHEDULE_MESSAGES, "children"),
        Output(ids.ALL_SCHEDULE_FIELDS, "className"),
        Output(ids.ALL_ACTION_FIELDS, "className"),
        Output(ids.WORKING, "data"),
        Output(ids.RECOMPUTE_STATUS, "children"),
        Output(ids.PENDING, "data"),
        Input(ids.ALL_SCHEDULE_FIELDS, "value"),
        Input(ids.ALL_ACTION_FIELDS, "value"),
        Input(ids.DRAFT, "data"),
        State(ids.ALL_SCHEDULE_FIELDS, "id"),
        State(ids.ALL_ACTION_FIELDS, "id"),
        State(ids.ALL_FIELD_MESSAGES, "id"),
        State(ids.ALL_ACTION_MESSAGES, "id"),
        State(ids.ALL_SCHEDULE_MESSAGES, "id"),
        State(ids.WORKING, "data"),
    )(recompute)

    callback(
        Output(ids.ALL_SCHEDULE_RESULTS, "children"),
        Input(ids.WORKING, "data"),
        Input(ids.RESULTS_READY, "data"),
        State(ids.ALL_SCHEDULE_RESULTS, "id"),
    )(result_lines)

    callback(
        Output(ids.DRAFT, "data", allow_duplicate=True),
        Output(ids.ALL_PARAMETER_MESSAGES, "children"),
        Output(ids.ALL_PARAMETER_FIELDS, "className"),
        Input(ids.ALL_PARAMETER_FIELDS, "value"),
        State(ids.ALL_PARAMETER_FIELDS, "id"),
        State(ids.ALL_PARAMETER_MESSAGES, "id"),
        State(ids.DRAFT, "data"),
        prevent_initial_call=True,
    )(parameter_edit)

    register_job(
        callback,
        settings,
        compare_in_background,
        COMPARE_JOB,
        name="compare",
        what="comparison of the schedules",
        outputs=[
            Output(ids.RESULTS_READY, "data"),
            Output(ids.RECOMPUTE_STATUS, "children", allow_duplicate=True),
        ],
        inputs=[Input(ids.PENDING, "data")],
        stopped=compare_stopped,
    )
