"""Files the user downloads: PNG and HTML of a figure, CSV of the table, the briefing (HTML and
PDF), and the results each tab offers to the briefing.

PNG is drawn by ``planner.api.figure_image`` (kaleido on the system Chromium, started with the
planner's flags that keep it off the network), the one way the project makes images. The
briefing's PDF is printed by the same Chromium (``planner.briefing.print_pdf``).

A long job's result (sweep, frontier, search, ensemble, fit) becomes a briefing part
(``planner.briefing.BriefingPart``) as the job ends: :func:`keep_part` files it on the server
under the identity of the scenario it was computed from (the job runs in a worker process, so the
file is on disk), and "Add to briefing" (:func:`offered_part`) copies it into the page's briefing
store. A part whose scenario is not the one in the editor is never offered nor exported. The
frontier, search, ensemble and fit jobs file their figure and table for the downloads the same
way (:func:`keep_result`).
"""

from __future__ import annotations

import os
import re
import threading

import plotly.graph_objects as go

from planner.briefing import BriefingPart, Section, figure_data, page
from webapp import compute

PNG_SIZE = {"width": 1200, "height": 700}  # layout pixels of a figure that sets no size
_lock = threading.Lock()  # one image at a time: each starts a Chromium on two shared cores


class PngUnavailableError(RuntimeError):
    """PNG export needs Chromium and kaleido; the message says what is missing."""


def stop_png_server() -> None:
    """Nothing to stop: each image is drawn by a browser of its own that ends with it
    (``planner.api.figure_image``). Kept for callers that tidy up after exports."""


def figure_png(figure: go.Figure, *, width: int | None = None, height: int | None = None) -> bytes:
    """PNG bytes of a figure, drawn by ``planner.api.figure_image`` (kaleido on the system
    Chromium, off the network); its own height when it sets one, else PNG_SIZE."""
    from planner.api import figure_image

    width = width or figure.layout.width or PNG_SIZE["width"]
    height = height or figure.layout.height or PNG_SIZE["height"]
    with _lock:
        try:
            return figure_image(figure, "png", width=int(width), height=int(height))
        except RuntimeError as error:
            raise PngUnavailableError(str(error)) from None


def figure_html(figure: go.Figure, title: str, heading: str) -> str:
    """A complete offline HTML page with the figure and the caution."""
    return page(title, [Section(heading, figure=figure)])


def slug(text: str) -> str:
    """A file-name-safe version of a scenario's file name or title."""
    text = re.sub(r"\.toml$", "", text or "")
    text = re.sub(r"[^A-Za-z0-9]+", "-", text).strip("-").lower()
    return text[:60] or "scenario"


# ---------------------------------------------------------------------------------------------
# Results offered to the briefing

PART_SECONDS = 24 * 3600  # how long a finished job's part waits on the server to be added
PART_BYTES = 64 * 2**20  # the parts kept on disk, at most (oldest dropped first)
_parts = compute.DiskCache(PART_BYTES)
_parts_memory: dict[str, dict] = {}  # without a folder (a single process: tests, notebooks)


def use_parts_folder(folder: str | os.PathLike[str] | None) -> None:
    """Keep offered parts in ``folder`` (None: in this process's memory only)."""
    _parts.use(folder)


def _cache():
    """The parts' disk cache opened by this process (a fresh handle after a fork)."""
    return _parts.get()


def _key(kind: str, scenario_key: str) -> str:
    return f"briefing-part:{kind}:{scenario_key}"


def _scenario_key(working: dict | None) -> str | None:
    from webapp.views.staleness import identity

    found = identity(working)
    return None if found is None else found["key"]


def keep_part(working: dict | None, part: BriefingPart) -> None:
    """File a tab's finished result for the briefing under the scenario it came from (the
    ``working`` store value the job was given); the latest of each kind per scenario is kept."""
    key = _scenario_key(working)
    if key is None:
        return
    data = part.to_json()
    cache = _cache()
    if cache is None:
        _parts_memory[_key(part.kind, key)] = data
    else:
        cache.set(_key(part.kind, key), data, expire=PART_SECONDS)


def offered_part(working: dict | None, kind: str) -> dict | None:
    """``{"kind", "key", "part"}``: the latest result of ``kind`` for the scenario in the
    editor, as the briefing store keeps it; None when none was run for this version."""
    key = _scenario_key(working)
    if key is None:
        return None
    cache = _cache()
    found = _parts_memory.get(_key(kind, key)) if cache is None else cache.get(_key(kind, key))
    return None if found is None else {"kind": kind, "key": key, "part": found}


def current_parts(working: dict | None, added: dict | None) -> tuple[list[BriefingPart], list[str]]:
    """The parts in the briefing store that belong to the scenario in the editor, and the kinds
    left out because they were computed for another version of it."""
    key = _scenario_key(working)
    kept, left_out = [], []
    for kind, entry in (added or {}).items():
        if entry and entry.get("key") == key:
            kept.append(BriefingPart.from_json(entry["part"]))
        elif entry:
            left_out.append(kind)
    return kept, left_out


# ---------------------------------------------------------------------------------------------
# Tables of the long jobs' results, for their CSV download


def frame_csv(frame) -> str:
    """A result's table (its ``to_frame()``) as CSV text through ``planner.report.table_csv``
    (formula-safe cells): each column headed by its name and, where the frame records one in
    ``attrs["units"]``, its unit in brackets ("floor (t P / yr)"); blank for a missing value."""
    import math

    from planner.report import table_csv

    units = frame.attrs.get("units", {})
    header = [f"{name} ({units[name]})" if units.get(name) else str(name) for name in frame]
    rows = [
        ["" if isinstance(value, float) and math.isnan(value) else value for value in row]
        for row in frame.itertuples(index=False, name=None)
    ]
    return table_csv(header, rows)


def keep_result(working: dict | None, what: str, figure: go.Figure, frame) -> None:
    """File a job's result for its downloads under the scenario it came from: the figure as
    shown and its table (``to_frame()``) as CSV text. The job runs in a worker process and the
    download is made by the server, like :func:`keep_part`."""
    key = _scenario_key(working)
    if key is None:
        return
    kept = {"figure": figure_data(figure), "csv": frame_csv(frame)}
    cache = _cache()
    if cache is None:
        _parts_memory[_key(f"result-{what}", key)] = kept
    else:
        cache.set(_key(f"result-{what}", key), kept, expire=PART_SECONDS)


def kept_result(working: dict | None, what: str) -> dict | None:
    """``{"figure", "csv"}`` of result ``what`` computed for the scenario in the editor (the
    last run), or None when none was."""
    key = _scenario_key(working)
    if key is None:
        return None
    cache = _cache()
    name = _key(f"result-{what}", key)
    return _parts_memory.get(name) if cache is None else cache.get(name)
