"""Component ids, in one place, and the factories of pattern-matching ids.

Schedules are a variable-length list, so their fields, messages, buttons and result lines use
pattern-matching ids (dicts) whose ``index`` is the schedule's position in the scenario.
"""

from __future__ import annotations

from dash import ALL

# Stores (the user's data lives here, in the browser, never in module globals).
LOADED = "store-loaded"  # scenario as read from a file or an upload: {"source", "data", "serial"}
DRAFT = "store-draft"  # what the schedule editor shows (may hold raw text not yet valid)
WORKING = "store-working"  # the last valid scenario and whether the editor matches it
PENDING = "store-pending"  # a comparison handed to the background worker
RESULTS_READY = "store-results-ready"  # bumped when the background worker has finished
SAVE_PENDING = "store-save-pending"  # file name awaiting "overwrite?" confirmation
SORT = "store-sort"  # the comparison table's sort column and direction

# Scenario panel.
PICKER = "scenario-picker"
UPLOAD = "scenario-upload"
LOAD_MESSAGE = "scenario-load-message"
SAVE_NAME = "save-name"
SAVE_BUTTON = "save-button"
SAVE_CONFIRM = "save-confirm"
SAVE_CONFIRM_TEXT = "save-confirm-text"
SAVE_OVERWRITE = "save-overwrite"
SAVE_CANCEL = "save-cancel"
SAVE_MESSAGE = "save-message"
APP_ERROR = "app-error"

# Schedule editor.
EDITOR = "schedule-editor"
ADD_KIND = "add-kind"
ADD_BUTTON = "add-button"
RECOMPUTE_STATUS = "recompute-status"
COMPARE_PROGRESS_BOX = "compare-progress-box"
COMPARE_PROGRESS = "compare-progress"
COMPARE_PROGRESS_TEXT = "compare-progress-text"

# Results.
TABS = "result-tabs"
SUMMARY = "lake-summary"
SHOWN = "shown-schedules"
DIAGRAM_GRAPH = "diagram-graph"
SERIES_GRAPH = "series-graph"
SIDE_CHOICE = "side-choice"
SIDE_MESSAGE = "side-message"
SIDE_GRAPH = "side-graph"
TABLE = "comparison-table"
SWEEP_STEP = "sweep-step"
SWEEP_RUN = "sweep-run"
SWEEP_CANCEL = "sweep-cancel"
SWEEP_PROGRESS_BOX = "sweep-progress-box"
SWEEP_PROGRESS = "sweep-progress"
SWEEP_PROGRESS_TEXT = "sweep-progress-text"
SWEEP_MESSAGE = "sweep-message"
SWEEP_GRAPH = "sweep-graph"
SWEEP_SUMMARY = "sweep-summary"
DOWNLOAD = "download"
EXPORT_MESSAGE = "export-message"
SORT_BUTTON = "sort-button"

FRONTIER_RUN = "frontier-run"
FRONTIER_CANCEL = "frontier-cancel"
FRONTIER_PROGRESS_BOX = "frontier-progress-box"
FRONTIER_PROGRESS = "frontier-progress"
FRONTIER_PROGRESS_TEXT = "frontier-progress-text"
FRONTIER_MESSAGE = "frontier-message"
FRONTIER_GRAPH = "frontier-graph"
FRONTIER_START_YEAR = "frontier-start-year"
FRONTIER_RAMP_YEARS = "frontier-ramp-years"
SEARCH_RUN = "search-run"
SEARCH_CANCEL = "search-cancel"
SEARCH_PROGRESS_BOX = "search-progress-box"
SEARCH_PROGRESS = "search-progress"
SEARCH_PROGRESS_TEXT = "search-progress-text"
SEARCH_MESSAGE = "search-message"
SEARCH_GRAPH = "search-graph"
SEARCH_SUMMARY = "search-summary"
SEARCH_FOUND = "search-found"  # store: the cheapest schedule found, as scenario data
SEARCH_ADD = "search-add"
SEARCH_ADD_MESSAGE = "search-add-message"
ENSEMBLE_MEMBERS = "ensemble-members"
ENSEMBLE_RUN = "ensemble-run"
ENSEMBLE_CANCEL = "ensemble-cancel"
ENSEMBLE_PROGRESS_BOX = "ensemble-progress-box"
ENSEMBLE_PROGRESS = "ensemble-progress"
ENSEMBLE_PROGRESS_TEXT = "ensemble-progress-text"
ENSEMBLE_MESSAGE = "ensemble-message"
ENSEMBLE_GRAPH = "ensemble-graph"
ENSEMBLE_CHOICE = "ensemble-choice"
ENSEMBLE_FANS = "ensemble-fans"  # store: one fan figure per schedule of the last run
ENSEMBLE_FAN_GRAPH = "ensemble-fan-graph"
ENSEMBLE_TABLE = "ensemble-table"
DATA_UPLOAD = "data-upload"
DATA_CANCEL = "data-cancel"  # stops the fit
DATA_PROGRESS_BOX = "data-progress-box"
DATA_PROGRESS = "data-progress"
DATA_PROGRESS_TEXT = "data-progress-text"
DATA_MESSAGE = "data-message"
DATA_FIT_GRAPH = "data-fit-graph"
DATA_DIAGRAM_GRAPH = "data-diagram-graph"
DATA_SUMMARY = "data-summary"

# Tab values.
TAB_DIAGRAM, TAB_SERIES, TAB_SIDE, TAB_SWEEP = "diagram", "series", "side", "sweep"
TAB_FRONTIER, TAB_ENSEMBLE, TAB_DATA = "frontier", "ensemble", "data"

# Pattern-matching types.
SCHEDULE_FIELD = "schedule-field"
FIELD_MESSAGE = "field-message"
ACTION_FIELD = "action-field"
ACTION_MESSAGE = "action-message"
SCHEDULE_MESSAGE = "schedule-message"
SCHEDULE_RESULT = "schedule-result"
SCHEDULE_BUTTON = "schedule-button"
EXPORT_BUTTON = "export-button"
EXPORT_MESSAGE = "export-message"
SORT_BUTTON = "sort-button"


def schedule_field(index, field) -> dict:
    """A number or text of schedule ``index`` (``field`` is the scenario key, e.g. "floor")."""
    return {"type": SCHEDULE_FIELD, "index": index, "field": field}


def field_message(index, field) -> dict:
    """The inline message beside a schedule field."""
    return {"type": FIELD_MESSAGE, "index": index, "field": field}


def action_field(index, action, field) -> dict:
    """A number or text of action ``action`` of schedule ``index``."""
    return {"type": ACTION_FIELD, "index": index, "action": action, "field": field}


def action_message(index, action, field) -> dict:
    return {"type": ACTION_MESSAGE, "index": index, "action": action, "field": field}


def schedule_message(index) -> dict:
    """Messages about a schedule as a whole (not tied to one field)."""
    return {"type": SCHEDULE_MESSAGE, "index": index}


def schedule_result(index) -> dict:
    """The line under a schedule with its verdict and cost."""
    return {"type": SCHEDULE_RESULT, "index": index}


def schedule_button(index, action) -> dict:
    """``action`` is "duplicate" or "delete"."""
    return {"type": SCHEDULE_BUTTON, "index": index, "action": action}


def export_button(what, fmt) -> dict:
    """``what``: diagram, series, side, sweep, table or briefing; ``fmt``: png, html or csv."""
    return {"type": EXPORT_BUTTON, "what": what, "format": fmt}


def export_message(what) -> dict:
    """The message line of one row of download buttons."""
    return {"type": EXPORT_MESSAGE, "what": what}


def sort_button(column) -> dict:
    """A column heading of the comparison table (click: sort by it)."""
    return {"type": SORT_BUTTON, "column": column}


ALL_SCHEDULE_FIELDS = schedule_field(ALL, ALL)
ALL_FIELD_MESSAGES = field_message(ALL, ALL)
ALL_ACTION_FIELDS = action_field(ALL, ALL, ALL)
ALL_ACTION_MESSAGES = action_message(ALL, ALL, ALL)
ALL_SCHEDULE_MESSAGES = schedule_message(ALL)
ALL_SCHEDULE_RESULTS = schedule_result(ALL)
ALL_SCHEDULE_BUTTONS = schedule_button(ALL, ALL)
ALL_EXPORT_BUTTONS = export_button(ALL, ALL)
ALL_EXPORT_MESSAGES = export_message(ALL)
ALL_SORT_BUTTONS = sort_button(ALL)


# ---------------------------------------------------------------------------------------------
# Unsaved edits, undo and saving back (scenario panel and schedule editor).

BASELINE = "store-baseline"  # the file the scenario was opened from or last saved to
UPLOADED_TEXT = "store-uploaded-text"  # an uploaded scenario's text: its layout for "Save as"
HISTORY = "store-history"  # undo / redo: earlier and later valid versions of the scenario
OPEN_PENDING = "store-open-pending"  # a pick or upload waiting for "discard unsaved edits?"
DELETE_PENDING = "store-delete-pending"  # the schedule waiting for "delete it?"
UNSAVED = "store-unsaved"  # True while there are unsaved edits (read by the page's script)
PAGE_SCRIPT = "store-page-script"  # output of the page's script (leave-page guard, shortcuts)
OPEN_CONFIRM = "open-confirm"  # "discard unsaved edits?" before a pick or an upload
DELETE_CONFIRM = "delete-confirm"  # "delete schedule N?"
EDIT_STATE = "edit-state"  # which file is open, and whether it has unsaved edits
SAVE_FILE = "save-file"  # plain "Save": back to the file the scenario came from
UNDO_BUTTON = "undo-button"
REDO_BUTTON = "redo-button"
UNDO_MESSAGE = "undo-message"

# Results computed from an earlier version of the scenario (webapp.views.staleness).
RESULT_STAMP = "result-stamp"  # store: which scenario the result shown was computed from
RUN_STAMP = "run-stamp"  # store: which scenario the job now running was started on
STALE_BANNER = "stale-banner"


def result_stamp(what) -> dict:
    """The identity (file name and scenario key) of the scenario result ``what`` came from."""
    return {"type": RESULT_STAMP, "what": what}


def run_stamp(what) -> dict:
    return {"type": RUN_STAMP, "what": what}


def stale_banner(what) -> dict:
    """The note above result ``what`` when it was computed for another version of the scenario."""
    return {"type": STALE_BANNER, "what": what}


ALL_RESULT_STAMPS = result_stamp(ALL)
ALL_STALE_BANNERS = stale_banner(ALL)


# ---------------------------------------------------------------------------------------------
# The briefing (webapp.views.export) and the text alternatives of the result figures.

BRIEFING_PARTS = "store-briefing-parts"  # {kind: {"kind", "key", "part"}}: results added
BRIEFING_CONTENTS = "briefing-contents"
BRIEFING_CLEAR = "briefing-clear"
BRIEFING_ADD = "briefing-add"
BRIEFING_ADD_MESSAGE = "briefing-add-message"


def briefing_add(kind) -> dict:
    """A tab's "Add to briefing" button (``kind``: one of planner.briefing.PART_KINDS)."""
    return {"type": BRIEFING_ADD, "kind": kind}


def briefing_add_message(kind) -> dict:
    return {"type": BRIEFING_ADD_MESSAGE, "kind": kind}


def figure_caption(graph_id: str) -> str:
    """The caption (text alternative) under the result graph ``graph_id``."""
    return f"{graph_id}-caption"


# ---------------------------------------------------------------------------------------------
# The app shell (tabs, uploads), the model-parameter panel and the editor's background job.

COMPARE_CANCEL = "compare-cancel"  # stops the editor's background comparison
PARAMETER_PANEL = "parameter-panel"  # the model's parameters, one field each
PARAMETER_FIELD = "parameter-field"
PARAMETER_MESSAGE = "parameter-message"


def parameter_field(name) -> dict:
    """The value of model parameter ``name`` in the parameter panel."""
    return {"type": PARAMETER_FIELD, "name": name}


def parameter_message(name) -> dict:
    """The inline message beside a model parameter's field."""
    return {"type": PARAMETER_MESSAGE, "name": name}


ALL_PARAMETER_FIELDS = parameter_field(ALL)
ALL_PARAMETER_MESSAGES = parameter_message(ALL)


# ---------------------------------------------------------------------------------------------
# Two scenarios side by side: the open one and a second file chosen from the listed folders.

TAB_TWO = "two-scenarios"
TWO_CHOICE = "two-choice"  # the second scenario file (a picker value, never a path)
TWO_MESSAGE = "two-message"  # why the second file was not loaded
TWO_OPEN_TITLE = "two-open-title"
TWO_OTHER_TITLE = "two-other-title"
TWO_OPEN_GRAPH = "two-open-graph"
TWO_OTHER_GRAPH = "two-other-graph"
TWO_OPEN_WORDS = "two-open-words"
TWO_OTHER_WORDS = "two-other-words"
TWO_OPEN_TABLE = "two-open-table"
TWO_OTHER_TABLE = "two-other-table"
