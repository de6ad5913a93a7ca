"""Choosing, uploading and saving a scenario file.

Loading replaces what the editor shows only when the file is valid; a bad upload leaves the
current scenario as it was and lists every problem as ``file: field: reason``. "Save as" writes
a new file atomically and asks before replacing an existing one.
"""

from __future__ import annotations

from dash import Input, Output, State, ctx, dcc, html, no_update

from planner.errors import InputError
from planner.scenario.io import MAX_SCENARIO_BYTES
from webapp import compute, files, ids
from webapp.settings import Settings

HIDDEN = {"display": "none"}
SHOWN = {"display": "block"}


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
            html.Label("Scenario file", htmlFor=ids.PICKER, className="field-label"),
            dcc.Dropdown(
                id=ids.PICKER, options=options, value=value, clearable=False, searchable=False
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
            html.Div(
                [
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


def save_as(name_text, working, pending, *, settings: Settings, trigger=None):
    """Save flow -> (message, confirm style, confirm text, pending name, options, picker value).

    An existing name is never replaced at once: the user is asked, and only "Overwrite" calls
    the planner's save with ``overwrite=True``.
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
        path = files.save(scenario, settings.save_folder, name, overwrite=overwrite)
    except InputError as error:
        return not_saved(problem_list(error, "Not saved."))
    options = files.picker_options(list(settings.folders))
    value = f"{settings.save_index}/{path.name}"
    text = f"Saved {path.name} in {path.parent}; it is now the scenario shown."
    return html.Div(text, className="message ok"), HIDDEN, "", None, options, value


def register(callback, settings: Settings) -> None:
    def on_load(choice, upload, upload_name, loaded):
        return load_scenario_choice(
            choice, upload, upload_name, loaded, settings=settings, trigger=ctx.triggered_id
        )

    callback(
        Output(ids.LOADED, "data"),
        Output(ids.LOAD_MESSAGE, "children"),
        Output(ids.UPLOAD, "contents"),
        Input(ids.PICKER, "value"),
        Input(ids.UPLOAD, "contents"),
        State(ids.UPLOAD, "filename"),
        State(ids.LOADED, "data"),
    )(on_load)

    def on_save(_save, _overwrite, _cancel, name_text, working, pending):
        return save_as(name_text, working, pending, settings=settings, trigger=ctx.triggered_id)

    callback(
        Output(ids.SAVE_MESSAGE, "children"),
        Output(ids.SAVE_CONFIRM, "style"),
        Output(ids.SAVE_CONFIRM_TEXT, "children"),
        Output(ids.SAVE_PENDING, "data"),
        Output(ids.PICKER, "options"),
        Output(ids.PICKER, "value"),
        Input(ids.SAVE_BUTTON, "n_clicks"),
        Input(ids.SAVE_OVERWRITE, "n_clicks"),
        Input(ids.SAVE_CANCEL, "n_clicks"),
        State(ids.SAVE_NAME, "value"),
        State(ids.WORKING, "data"),
        State(ids.SAVE_PENDING, "data"),
        prevent_initial_call=True,
    )(on_save)
