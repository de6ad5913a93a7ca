"""Choosing, uploading and saving a scenario file, without losing edits.

Loading replaces what the editor shows only when the file is valid; a bad upload leaves the
current scenario as it was and lists every problem as ``file: field: reason``.

The file the scenario was opened from (or last saved to) is the *baseline*: its name and the
scenario key of what it holds. The panel says whether the editor holds unsaved edits
(``drafts.unsaved``); picking another file or uploading one over unsaved edits asks first, and
the page asks before it is closed or reloaded (the page script in ``webapp.app``).

"Save" writes the scenario back into the file it came from; "Save as" writes a new file in the
save folder and asks before replacing an existing one. Both keep the comments and layout of the
file the scenario came from (``planner.scenario.io.scenario_to_toml`` with a template), and
"Save" asks first when that file changed on disk since it was opened.
"""

from __future__ import annotations

from dash import Input, Output, State, ctx, dcc, html, no_update

from planner.errors import InputError
from planner.scenario import parse_scenario
from planner.scenario.io import MAX_SCENARIO_BYTES
from webapp import compute, drafts, files, ids
from webapp.settings import Settings

HIDDEN = {"display": "none"}
SHOWN = {"display": "block"}
SUBMITTED = f"{ids.OPEN_CONFIRM}.submit_n_clicks"
CANCELLED = f"{ids.OPEN_CONFIRM}.cancel_n_clicks"


def problem_list(error: InputError, intro: str) -> html.Div:
    return html.Div(
        [
            html.P(intro, className="message-title"),
            html.Ul([html.Li(str(problem)) for problem in error.problems]),
        ],
        className="message problem",
        role="alert",
    )


def layout(options: list[dict], value: str | None) -> html.Section:
    megabytes = MAX_SCENARIO_BYTES / 1e6
    return html.Section(
        [
            html.H2("Scenario"),
            html.Div(
                id=ids.EDIT_STATE, className="edit-state", role="status", **{"aria-live": "polite"}
            ),
            html.Label("Scenario file", htmlFor=ids.PICKER, className="field-label"),
            dcc.Dropdown(
                id=ids.PICKER,
                options=options,
                value=value,
                clearable=False,
                searchable=False,
                placeholder="Choose a scenario file",
            ),
            dcc.Upload(
                id=ids.UPLOAD,
                children=html.Div(
                    [
                        "Upload a scenario file: drop it here or ",
                        html.Span("choose a file", className="link-like"),
                        f" (TOML, up to {megabytes:g} MB)",
                    ]
                ),
                accept=".toml,text/plain,application/toml",
                max_size=4 * MAX_SCENARIO_BYTES,
                multiple=False,
                className="upload-box",
            ),
            html.Div(id=ids.LOAD_MESSAGE, className="message-area", **{"aria-live": "polite"}),
            dcc.ConfirmDialog(id=ids.OPEN_CONFIRM, message=""),
            html.Div(
                [
                    html.Div(
                        [
                            html.Button(
                                "Save",
                                id=ids.SAVE_FILE,
                                className="button primary",
                                disabled=True,
                                title="Save the changes into the file the scenario came from",
                            ),
                            html.Span(
                                "into the file it came from, keeping its comments", className="hint"
                            ),
                        ],
                        className="inline-row",
                    ),
                    html.Label(
                        "Save as (new file name)", htmlFor=ids.SAVE_NAME, className="field-label"
                    ),
                    html.Div(
                        [
                            dcc.Input(
                                id=ids.SAVE_NAME,
                                type="text",
                                placeholder="my-plan.toml",
                                debounce=False,
                                className="text-input",
                            ),
                            html.Button("Save as", id=ids.SAVE_BUTTON, className="button"),
                        ],
                        className="inline-row",
                    ),
                    html.Div(
                        [
                            html.Span(id=ids.SAVE_CONFIRM_TEXT),
                            html.Button(
                                "Overwrite", id=ids.SAVE_OVERWRITE, className="button danger"
                            ),
                            html.Button("Cancel", id=ids.SAVE_CANCEL, className="button"),
                        ],
                        id=ids.SAVE_CONFIRM,
                        className="confirm-box",
                        style=HIDDEN,
                    ),
                    html.Div(
                        id=ids.SAVE_MESSAGE, className="message-area", **{"aria-live": "polite"}
                    ),
                ],
                className="save-block",
            ),
        ],
        className="panel",
    )


def load_scenario_choice(choice, upload, upload_name, loaded, *, settings: Settings, trigger=None):
    """Pick or upload -> (loaded store, message, upload contents). Invalid input keeps the
    current scenario; ``serial`` makes every load a new value, so the editor always redraws."""
    serial = (loaded or {}).get("serial", 0) + 1
    if trigger == ids.UPLOAD:
        if not upload:
            return no_update, no_update, no_update
        try:
            scenario = files.read_upload(upload, upload_name)
        except InputError as error:
            message = problem_list(
                error,
                f"{upload_name or 'The file'} was not loaded; the scenario shown is unchanged.",
            )
            return no_update, message, None
        source = upload_name or "uploaded file"
        store = {"source": source, "data": compute.dump(scenario), "serial": serial}
        count = len(scenario.schedules)
        text = f"Loaded the uploaded file {source}: {count} schedules. Not saved yet."
        return store, html.Div(text, className="message ok"), None
    if not choice:
        return no_update, no_update, no_update
    try:
        name, scenario = files.read_choice(list(settings.folders), choice)
    except InputError as error:
        return (
            no_update,
            problem_list(error, "That file was not loaded; the scenario shown is unchanged."),
            no_update,
        )
    store = {"source": name, "data": compute.dump(scenario), "serial": serial}
    text = f"Loaded {name}: {len(scenario.schedules)} schedules."
    return store, html.Div(text, className="message ok"), no_update


def baseline_of(store: dict, file: str | None, working: dict | None, baseline: dict | None):
    """The baseline after ``store`` was opened from ``file`` (None: an upload). Opening the
    same scenario again (same key as the editor's) keeps the undo history; anything else
    starts a new one."""
    key = compute.scenario_key(store["data"])
    opened = (baseline or {}).get("opened", 0)
    if not working or working.get("key") != key:
        opened += 1
    return {
        "file": file,
        "source": store["source"],
        "key": key,
        "serial": store["serial"],
        "opened": opened,
    }


def _question(what: str, baseline: dict) -> str:
    name = baseline.get("source") or "the scenario"
    return (
        f"{name} has unsaved changes. {what} replaces them. Press OK to discard your changes, "
        "or Cancel to keep them (then Save or Save as first)."
    )


def open_flow(
    choice,
    upload,
    _submitted,
    _cancelled,
    upload_name,
    loaded,
    working,
    baseline,
    pending,
    *,
    settings: Settings,
    trigger=None,
):
    """A pick, an upload, or the answer to "discard unsaved changes?" -> (loaded store, load
    message, upload contents, baseline, uploaded text, question shown, question, what waits
    for the answer, picker value).

    A file is checked first: one that does not load changes nothing (and the picker goes back
    to the file open). Over unsaved edits a valid file is only opened once the user agrees;
    picking the file already open does nothing.
    """
    out = [no_update] * 9
    baseline = baseline or {}
    current = baseline.get("file")
    dirty = drafts.unsaved(working, baseline)

    def opened(store, message, file, text):
        out[0:3] = [store, message, None if file is None else no_update]
        out[3] = baseline_of(store, file, working, baseline)
        out[4] = text
        out[7] = None
        if file is None:
            out[8] = None  # the picker no longer names a file: the scenario shown is the upload
        return out

    def load(trigger_id, value):
        return load_scenario_choice(
            value if trigger_id == ids.PICKER else None,
            upload if trigger_id == ids.UPLOAD else None,
            upload_name,
            loaded,
            settings=settings,
            trigger=trigger_id,
        )

    if trigger == CANCELLED:
        out[7] = None
        if (pending or {}).get("kind") == "upload":
            out[2] = None
            name = pending.get("name") or "the uploaded file"
            out[1] = html.Div(f"Kept your changes: {name} was not loaded.", className="message")
        else:
            out[8] = current  # back to the file open (none after an upload)
            out[1] = html.Div("Kept your changes: no other file was opened.", className="message")
        return out
    if trigger == SUBMITTED:
        kind = (pending or {}).get("kind")
        if kind not in ("pick", "upload"):
            return out
        trigger, choice = (
            (ids.PICKER, pending.get("value")) if kind == "pick" else (ids.UPLOAD, None)
        )
        dirty = False
    if trigger == ids.UPLOAD:
        if not upload:
            return out
        store, message, cleared = load(ids.UPLOAD, None)
        if store is no_update:
            out[1], out[2] = message, cleared
            return out
        if dirty:
            question = _question("Loading the uploaded file", baseline)
            out[5:8] = [True, question, {"kind": "upload", "name": upload_name}]
            return out
        text = files.upload_text(upload, store["source"], MAX_SCENARIO_BYTES)
        return opened(store, message, None, text)
    if not choice or choice == current:
        return out
    store, message, _ = load(ids.PICKER, choice)
    if store is no_update:
        out[1] = message
        out[8] = current  # back to the file open (none after an upload)
        return out
    if dirty:
        question = _question(f"Opening {store['source']}", baseline)
        out[5:8] = [True, question, {"kind": "pick", "value": choice}]
        return out
    return opened(store, message, choice, None)


def save_as(name_text, working, pending, *, settings: Settings, trigger=None, template=None):
    """Save flow -> (message, confirm style, confirm text, pending name, options, picker value).

    An existing name is never replaced at once: the user is asked, and only "Overwrite" calls
    the planner's save with ``overwrite=True``. ``template``: the text of the file the scenario
    came from, whose comments and layout the new file keeps.
    """

    def not_saved(message):
        return message, HIDDEN, "", None, no_update, no_update

    if trigger == ids.SAVE_CANCEL:
        return not_saved(html.Div("Not saved.", className="message"))
    if trigger not in (ids.SAVE_BUTTON, ids.SAVE_OVERWRITE):
        return (no_update,) * 6
    if not working or not working.get("data"):
        return not_saved(html.Div("Nothing to save yet.", className="message problem"))
    if working.get("stale"):
        text = "Fix the fields marked in the schedule editor first; nothing was written."
        return not_saved(html.Div(text, className="message problem"))
    overwrite = trigger == ids.SAVE_OVERWRITE
    try:
        # The pending name comes back from the browser: it is checked like a typed one, so a
        # crafted request cannot name a file outside the save folder.
        name = files.save_name(pending if overwrite and pending else name_text)
        scenario = compute.scenario_of(working["data"])
        target = settings.save_folder / name
        if target.exists() and not overwrite:
            text = f"{name} exists already in {settings.save_folder}. Overwrite it?"
            return "", SHOWN, text, name, no_update, no_update
        path = files.save(
            scenario, settings.save_folder, name, overwrite=overwrite, template=template
        )
    except InputError as error:
        return not_saved(problem_list(error, "Not saved."))
    options = files.picker_options(list(settings.folders))
    value = f"{settings.save_index}/{path.name}"
    text = f"Saved {path.name} in {path.parent}; it is now the scenario shown."
    return html.Div(text, className="message ok"), HIDDEN, "", None, options, value


def _key_on_disk(text: str, source: str) -> str | None:
    """The scenario key of a file's text (None when it no longer holds a valid scenario)."""
    try:
        return compute.scenario_key(compute.dump(parse_scenario(text, source)))
    except InputError:
        return None


def save_plain(working, baseline, pending, *, settings: Settings, trigger=None):
    """ "Save" -> (message, confirm style, confirm text, pending, baseline): the scenario back
    into the file it was opened from, keeping that file's comments, layout and permissions.
    When the file changed on disk since (another window or program saved it) the user is asked
    first, with the same Overwrite / Cancel question as "Save as"."""

    def not_saved(message):
        return message, HIDDEN, "", None, no_update

    if not working or not working.get("data"):
        return not_saved(html.Div("Nothing to save yet.", className="message problem"))
    if working.get("stale"):
        text = "Fix the fields marked in the schedule editor first; nothing was written."
        return not_saved(html.Div(text, className="message problem"))
    baseline = baseline or {}
    choice = baseline.get("file")
    if not choice:
        text = (
            "This scenario was uploaded: it has no file in a scenario folder yet. Use Save as "
            "to write one."
        )
        return not_saved(html.Div(text, className="message problem"))
    confirmed = trigger == ids.SAVE_OVERWRITE and (pending or {}).get("file") == choice
    try:
        path, text = files.listed_text(list(settings.folders), choice)
        if not confirmed and _key_on_disk(text, path.name) != baseline.get("key"):
            question = (
                f"{path.name} changed on disk since it was opened here (another window or "
                "program saved it). Overwrite it with the scenario shown?"
            )
            return "", SHOWN, question, {"file": choice}, no_update
        scenario = compute.scenario_of(working["data"])
        path = files.save_back(scenario, list(settings.folders), choice, text)
    except InputError as error:
        return not_saved(problem_list(error, "Not saved."))
    saved = {**baseline, "key": working.get("key"), "serial": working.get("serial", 0)}
    message = html.Div(f"Saved {path.name} in {path.parent}.", className="message ok")
    return message, HIDDEN, "", None, saved


def template_of(baseline: dict | None, uploaded_text: str | None, settings: Settings):
    """The text whose layout a save keeps: the file the scenario was opened from, as it is on
    disk now, or the uploaded file's text (None when neither can be had)."""
    choice = (baseline or {}).get("file")
    if choice:
        try:
            return files.listed_text(list(settings.folders), choice)[1]
        except InputError:
            return None
    return uploaded_text if isinstance(uploaded_text, str) else None


def save_flow(
    name_text,
    working,
    pending,
    baseline,
    loaded,
    uploaded_text,
    *,
    settings: Settings,
    trigger=None,
    draft=None,
):
    """Save, Save as, Overwrite or Cancel -> (message, confirm style, confirm text, pending,
    picker options, picker value, loaded store, baseline). After "Save as" the new file is the
    one open: the editor is reloaded under its name (same scenario, so nothing goes stale).
    Nothing is written while the working store is behind the editor (``draft``: a file just
    opened or an undo not yet checked), so what is saved is always what the editor shows."""
    behind = (working or {}).get("serial", 0) < (draft or {}).get("serial", 0)
    if behind and trigger in (ids.SAVE_FILE, ids.SAVE_BUTTON, ids.SAVE_OVERWRITE):
        text = "The editor is still updating; nothing was written. Press the button again."
        message = html.Div(text, className="message problem")
        return message, HIDDEN, "", None, no_update, no_update, no_update, no_update
    plain = trigger == ids.SAVE_FILE or (
        trigger == ids.SAVE_OVERWRITE and isinstance(pending, dict)
    )
    if plain:
        message, style, text, waiting, saved = save_plain(
            working, baseline, pending, settings=settings, trigger=trigger
        )
        return message, style, text, waiting, no_update, no_update, no_update, saved
    if isinstance(pending, dict):
        pending = None  # a plain save's question answered by Cancel
    template = template_of(baseline, uploaded_text, settings)
    result = save_as(
        name_text, working, pending, settings=settings, trigger=trigger, template=template
    )
    value = result[5]
    if not isinstance(value, str):
        return (*result, no_update, no_update)
    name = value.partition("/")[2]
    serial = (loaded or {}).get("serial", 0) + 1
    store = {"source": name, "data": working["data"], "serial": serial}
    saved = {
        "file": value,
        "source": name,
        "key": working.get("key"),
        "serial": serial,
        "opened": (baseline or {}).get("opened", 0),
    }
    return (*result, store, saved)


def edit_state(working, baseline):
    """-> (the line naming the open file and whether it has unsaved changes, Save disabled,
    Save's title, unsaved)."""
    if not baseline:
        return "", True, "Nothing to save yet", False
    dirty = drafts.unsaved(working, baseline)
    parts = [html.Span("Open: "), html.Strong(baseline.get("source") or "scenario")]
    if not baseline.get("file"):
        parts.append(html.Span(" (uploaded; not in a scenario folder yet)"))
    if dirty:
        parts.append(html.Span("Unsaved changes", className="badge unsaved"))
        if working.get("stale"):
            parts.append(html.Span(" (some values still to fix)"))
    else:
        parts.append(html.Span("No unsaved changes", className="badge saved"))
    if not baseline.get("file"):
        title = "An uploaded scenario has no file here yet: use Save as"
    elif not dirty:
        title = "No unsaved changes"
    else:
        title = f"Save the changes into {baseline.get('source')}"
    return parts, not dirty or not baseline.get("file"), title, dirty


def register(callback, settings: Settings) -> None:
    def on_open(*args):
        trigger = ctx.triggered[0]["prop_id"] if ctx.triggered else None
        if trigger in (f"{ids.PICKER}.value", f"{ids.UPLOAD}.contents"):
            trigger = ctx.triggered_id
        elif trigger not in (SUBMITTED, CANCELLED):
            trigger = None
        return open_flow(*args, settings=settings, trigger=trigger)

    callback(
        Output(ids.LOADED, "data"),
        Output(ids.LOAD_MESSAGE, "children"),
        Output(ids.UPLOAD, "contents"),
        Output(ids.BASELINE, "data"),
        Output(ids.UPLOADED_TEXT, "data"),
        Output(ids.OPEN_CONFIRM, "displayed"),
        Output(ids.OPEN_CONFIRM, "message"),
        Output(ids.OPEN_PENDING, "data"),
        Output(ids.PICKER, "value"),
        Input(ids.PICKER, "value"),
        Input(ids.UPLOAD, "contents"),
        Input(ids.OPEN_CONFIRM, "submit_n_clicks"),
        Input(ids.OPEN_CONFIRM, "cancel_n_clicks"),
        State(ids.UPLOAD, "filename"),
        State(ids.LOADED, "data"),
        State(ids.WORKING, "data"),
        State(ids.BASELINE, "data"),
        State(ids.OPEN_PENDING, "data"),
    )(on_open)

    def on_save(_save, _overwrite, _cancel, _plain, *states):
        *states, draft = states
        return save_flow(*states, settings=settings, trigger=ctx.triggered_id, draft=draft)

    callback(
        Output(ids.SAVE_MESSAGE, "children"),
        Output(ids.SAVE_CONFIRM, "style"),
        Output(ids.SAVE_CONFIRM_TEXT, "children"),
        Output(ids.SAVE_PENDING, "data"),
        Output(ids.PICKER, "options"),
        Output(ids.PICKER, "value", allow_duplicate=True),
        Output(ids.LOADED, "data", allow_duplicate=True),
        Output(ids.BASELINE, "data", allow_duplicate=True),
        Input(ids.SAVE_BUTTON, "n_clicks"),
        Input(ids.SAVE_OVERWRITE, "n_clicks"),
        Input(ids.SAVE_CANCEL, "n_clicks"),
        Input(ids.SAVE_FILE, "n_clicks"),
        State(ids.SAVE_NAME, "value"),
        State(ids.WORKING, "data"),
        State(ids.SAVE_PENDING, "data"),
        State(ids.BASELINE, "data"),
        State(ids.LOADED, "data"),
        State(ids.UPLOADED_TEXT, "data"),
        State(ids.DRAFT, "data"),
        prevent_initial_call=True,
    )(on_save)

    callback(
        Output(ids.EDIT_STATE, "children"),
        Output(ids.SAVE_FILE, "disabled"),
        Output(ids.SAVE_FILE, "title"),
        Output(ids.UNSAVED, "data"),
        Input(ids.WORKING, "data"),
        Input(ids.BASELINE, "data"),
    )(edit_state)
