"""The Dash app: ``create_app()`` builds the shell, the stores and registers every view.

The user's scenario lives in ``dcc.Store`` components in the browser (never in module globals),
so any number of tabs or server workers can run side by side. The page is built per visit, so a
reload lists files saved since.

A small script on the page (:data:`PAGE_SCRIPT_JS`) asks before the page is left or reloaded
with unsaved edits, marks the window title while there are some, and turns Ctrl+Z / Ctrl+Y into
the editor's Undo / Redo when the cursor is not in a text field.
"""

from __future__ import annotations

import atexit
import json
import logging
import os
import shutil
import tempfile
from functools import partial
from pathlib import Path
from urllib.parse import urlsplit

import dash
from dash import Dash, Input, Output, dcc, html
from flask import Response, request

from planner.errors import InputError, Problem
from planner.report import CAUTION
from planner.scenario.io import MAX_SCENARIO_BYTES
from planner.textfiles import clean_stale_temporaries
from webapp import compute, files, ids
from webapp.settings import Settings
from webapp.views import (
    VIEWS,
    data,
    diagram,
    editor,
    ensemble,
    export,
    frontier,
    scenario_panel,
    series,
    side_by_side,
    staleness,
    sweep,
    table,
    two_scenarios,
)

TITLE = "Lake recovery planner"
ASSETS = Path(__file__).resolve().parent / "assets"
LOG = logging.getLogger("webapp")
PREFERRED_DEMO = "alder-mere.toml"
PAGE_SCRIPT_JS = """
function (unsaved) {
    window.plannerUnsaved = Boolean(unsaved);
    if (!window.plannerPageScript) {
        window.plannerPageScript = true;
        window.addEventListener("beforeunload", function (event) {
            if (window.plannerUnsaved) {
                event.preventDefault();
                event.returnValue = "";
                return "";
            }
        });
        document.addEventListener("keydown", function (event) {
            if (!(event.ctrlKey || event.metaKey) || event.altKey) { return; }
            var target = event.target;
            var tag = target ? target.tagName : "";
            if (tag === "INPUT" || tag === "TEXTAREA" || tag === "SELECT" ||
                    (target && target.isContentEditable)) {
                return;  // the text field's own undo
            }
            var key = (event.key || "").toLowerCase();
            var id = null;
            if (key === "z" && !event.shiftKey) { id = "UNDO_BUTTON_ID"; }
            else if (key === "y" || (key === "z" && event.shiftKey)) { id = "REDO_BUTTON_ID"; }
            if (id === null) { return; }
            var button = document.getElementById(id);
            if (button && !button.disabled) {
                event.preventDefault();
                button.click();
            }
        });
    }
    var plain = document.title.replace(/^\u25cf /, "");
    document.title = unsaved ? "\u25cf " + plain : plain;
    return unsaved ? 1 : 0;
}
""".replace("UNDO_BUTTON_ID", ids.UNDO_BUTTON).replace("REDO_BUTTON_ID", ids.REDO_BUTTON)


def _on_error(error: Exception) -> None:
    """A bug inside a callback: log it for the maintainer, show a plain line to the user."""
    LOG.error("callback failed", exc_info=error)
    dash.set_props(
        ids.APP_ERROR,
        {
            "children": "Something went wrong inside the planner while updating the page (a bug, "
            "not a problem with your input). Your scenario and saved files are unchanged.",
            "style": {"display": "block"},
        },
    )


def _folder(path: str | os.PathLike[str] | None, what: str, *, create: bool = False) -> Path:
    folder = Path(path).expanduser()
    if create and not folder.exists():
        try:
            folder.mkdir(parents=True)
        except OSError as error:
            raise InputError(
                [Problem(str(folder), "(folder)", f"cannot create: {error.strerror}")]
            ) from None
    if not folder.is_dir():
        raise InputError([Problem(str(folder), "(folder)", f"{what}: no such folder")])
    return folder.resolve()


def _default_choice(options: list[dict]) -> str | None:
    for option in options:
        if option["value"].endswith("/" + PREFERRED_DEMO):
            return option["value"]
    return options[0]["value"] if options else None


def page(settings: Settings) -> html.Div:
    """The whole page: header, caution, scenario and schedule panels, results, stores."""
    options = files.picker_options(list(settings.folders))
    results = html.Main(
        [
            diagram.summary_layout(),
            dcc.Tabs(
                id=ids.TABS,
                value=ids.TAB_DIAGRAM,
                children=[
                    dcc.Tab(
                        label="Equilibrium diagram",
                        value=ids.TAB_DIAGRAM,
                        children=diagram.layout(),
                    ),
                    dcc.Tab(label="Over time", value=ids.TAB_SERIES, children=series.layout()),
                    dcc.Tab(
                        label="Side by side", value=ids.TAB_SIDE, children=side_by_side.layout()
                    ),
                    dcc.Tab(
                        label="Slow sweep",
                        value=ids.TAB_SWEEP,
                        children=[staleness.banner("sweep"), sweep.layout()],
                    ),
                    dcc.Tab(
                        label="Recovery frontier",
                        value=ids.TAB_FRONTIER,
                        children=[
                            staleness.banner("frontier"),
                            staleness.banner("search"),
                            frontier.layout(),
                        ],
                    ),
                    dcc.Tab(
                        label="Uncertainty",
                        value=ids.TAB_ENSEMBLE,
                        children=[staleness.banner("ensemble"), ensemble.layout()],
                    ),
                    dcc.Tab(
                        label="Monitoring data",
                        value=ids.TAB_DATA,
                        children=[staleness.banner("fit"), data.layout()],
                    ),
                    dcc.Tab(
                        label="Two scenarios",
                        value=ids.TAB_TWO,
                        children=two_scenarios.layout(options),
                    ),
                ],
                className="result-tabs",
            ),
            table.layout(),
            export.briefing_bar(),
        ],
        className="results",
    )
    return html.Div(
        [
            html.Header(
                [
                    html.H1(TITLE),
                    html.P(
                        "Test load-reduction schedules that could bring a turbid lake back to "
                        "clear water, on its equilibrium curve and over time.",
                        className="subtitle",
                    ),
                ],
                className="page-header",
            ),
            html.P(CAUTION, id="caution", className="caution", role="note"),
            html.Div(
                id=ids.APP_ERROR,
                className="message problem",
                role="alert",
                style={"display": "none"},
            ),
            html.Div(
                [
                    html.Aside(
                        [scenario_panel.layout(options, _default_choice(options)), editor.layout()],
                        className="sidebar",
                    ),
                    results,
                ],
                className="page-body",
            ),
            dcc.Store(id=ids.LOADED),
            dcc.Store(id=ids.DRAFT),
            dcc.Store(id=ids.WORKING),
            dcc.Store(id=ids.PENDING),
            dcc.Store(id=ids.RESULTS_READY),
            dcc.Store(id=ids.SAVE_PENDING),
            dcc.Store(id=ids.SORT),
            dcc.Store(id=ids.BASELINE),
            dcc.Store(id=ids.UPLOADED_TEXT),
            dcc.Store(id=ids.HISTORY),
            dcc.Store(id=ids.OPEN_PENDING),
            dcc.Store(id=ids.DELETE_PENDING),
            dcc.Store(id=ids.UNSAVED),
            dcc.Store(id=ids.PAGE_SCRIPT),
            *staleness.stores(),
        ],
        className="page",
    )


# Where a file refused by an upload box's own checks (size, type) is explained: the message area
# of its view; any other box says it in an alert.
UPLOAD_MESSAGES = {ids.UPLOAD: ids.LOAD_MESSAGE, ids.DATA_UPLOAD: ids.DATA_MESSAGE}
# The limit an upload box names: the scenario box's own cap is looser than the file cap the
# server applies, so the message names the one the user can act on.
UPLOAD_LIMITS = {ids.UPLOAD: MAX_SCENARIO_BYTES}


def _uploads(component) -> list[dict]:
    """Every dcc.Upload in a layout: its id, accepted types, size limit and message area."""
    found = []
    if isinstance(component, dcc.Upload):
        ident = component.id
        found.append(
            {
                "id": ident,
                "accept": getattr(component, "accept", None) or "",
                "max_size": getattr(component, "max_size", -1),
                "limit": UPLOAD_LIMITS.get(ident, getattr(component, "max_size", -1)),
                "message": UPLOAD_MESSAGES.get(ident),
            }
        )
    children = getattr(component, "children", None)
    if isinstance(children, (list, tuple)):
        for child in children:
            found.extend(_uploads(child))
    elif children is not None and hasattr(children, "to_plotly_json"):
        found.extend(_uploads(children))
    return found


def index_string(template: str, layout) -> str:
    """Dash's page template with the language set (``lang="en"``) and the upload boxes'
    limits handed to the page script (``assets/shell.js``), which says why a file is refused."""
    config = json.dumps({"uploads": _uploads(layout)}).replace("</", "<\\/")
    page_html = template.replace("<html>", '<html lang="en">', 1)
    return page_html.replace(
        "{%scripts%}", f"<script>window.plannerShell = {config};</script>\n{{%scripts%}}", 1
    )


LOOPBACK_NAMES = ("localhost", "127.0.0.1", "::1")


def host_name(host_header: str) -> str:
    """The host name of a Host header ("example.org:8050" -> "example.org", "[::1]:80" -> "::1")."""
    return (urlsplit("//" + host_header).hostname or "").lower()


def _allow_only(server, allowed: tuple[str, ...]) -> None:
    names = {name.lower().strip("[]") for name in allowed}

    @server.before_request
    def check_host():
        if host_name(request.host) not in names:
            return Response("This host name is not served here.", status=400)
        return None


def create_app(
    scenario_dir: str | os.PathLike[str] | None = None,
    *,
    save_dir: str | os.PathLike[str] | None = None,
    cache_dir: str | os.PathLike[str] | None = None,
    allowed_hosts: tuple[str, ...] = LOOPBACK_NAMES,
    job_seconds: float | None = None,
) -> Dash:
    """Build the app over the scenario files in ``scenario_dir`` (default: the bundled demos).

    Requests whose Host header names anything but ``allowed_hosts`` (the loopback names by
    default) are refused with 400: a web page elsewhere cannot reach the app by pointing a
    name of its own at this machine (DNS rebinding).

    "Save as" writes into ``save_dir`` (default: ``scenario_dir``); ``cache_dir`` holds the
    background workers' job queue and results (default: a temporary folder removed at exit);
    ``job_seconds`` is the wall-clock budget of one long job (default: ``PLANNER_JOB_SECONDS``
    or ``compute.JOB_SECONDS``). Raises InputError naming the folder (or the setting) when one
    cannot be used.
    """
    scenario_folder = _folder(
        scenario_dir if scenario_dir is not None else files.default_scenario_dir(),
        "scenario folder",
    )
    save_folder = (
        scenario_folder if save_dir is None else _folder(save_dir, "save folder", create=True)
    )
    folders = [files.Folder("Scenarios", scenario_folder)]
    if save_folder != scenario_folder:
        folders.append(files.Folder("Saved", save_folder))
    if cache_dir is None:
        cache_folder = Path(tempfile.mkdtemp(prefix="planner-app-"))
        atexit.register(shutil.rmtree, cache_folder, ignore_errors=True)
    else:
        cache_folder = _folder(cache_dir, "cache folder", create=True)
    budget = {} if job_seconds is None else {"job_seconds": job_seconds}
    settings = Settings(tuple(folders), len(folders) - 1, cache_folder, **budget)
    clean_stale_temporaries(save_folder)  # left by saves killed before their rename

    compute.use_disk(cache_folder / "results")
    manager = settings.jobs  # every long job, the editor's comparison too, runs under its budget
    app = Dash(
        __name__,
        title=TITLE,
        update_title=None,
        assets_folder=str(ASSETS),
        background_callback_manager=manager,
        on_error=_on_error,
    )
    # Uploads arrive base64-encoded inside a callback request; anything far above the scenario
    # size cap is refused before it is read.
    app.server.config["MAX_CONTENT_LENGTH"] = 8 * MAX_SCENARIO_BYTES
    app.index_string = index_string(app.index_string, page(settings))
    app.layout = partial(page, settings)
    _allow_only(app.server, allowed_hosts)
    # dash.callback's global registry is handed to the first app that serves a request, so a
    # second app in the same process (tests, benchmarks) would get none; each view therefore
    # registers through this app's own ``callback``, which takes the same arguments.
    for view in VIEWS:
        view.register(app.callback, settings)
    two_scenarios.register(app.callback, settings)
    staleness.register(app.callback, settings, app.clientside_callback)
    app.clientside_callback(
        PAGE_SCRIPT_JS, Output(ids.PAGE_SCRIPT, "data"), Input(ids.UNSAVED, "data")
    )
    editor.register_page_script(app.clientside_callback)
    return app
