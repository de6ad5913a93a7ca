"""Files the user downloads: PNG and HTML of a figure, CSV of the table, the briefing (HTML and
PDF), and the results each tab offers to the briefing.

PNG goes through plotly's image export (kaleido) on the system Chromium. One export server is
started on first use and reused (a fresh browser per image takes seconds); Chromium is started
through a small wrapper that adds the planner's flags keeping it off the network. The briefing's
PDF is printed by the same Chromium (``planner.briefing.print_pdf``).

A long job's result (sweep, frontier, search, ensemble, fit) becomes a briefing part
(``planner.briefing.BriefingPart``) as the job ends: :func:`keep_part` files it on the server
under the identity of the scenario it was computed from (the job runs in a worker process, so the
file is on disk), and "Add to briefing" (:func:`offered_part`) copies it into the page's briefing
store. A part whose scenario is not the one in the editor is never offered nor exported.
"""

from __future__ import annotations

import os
import re
import shlex
import shutil
import stat
import tempfile
import threading
import warnings
from pathlib import Path
from typing import Any

import plotly.graph_objects as go

from planner.briefing import CHROMIUM_FLAGS, BriefingPart, Section, page

CHROMIUM = Path("/usr/lib/chromium/chromium")
QUIET_FLAGS = " ".join(shlex.quote(flag) for flag in CHROMIUM_FLAGS)
PNG_SIZE = {"width": 1200, "height": 700}
_lock = threading.Lock()
_server_started = False


class PngUnavailableError(RuntimeError):
    """PNG export needs Chromium and kaleido; the message says what is missing."""


def _browser_wrapper(folder: Path) -> Path:
    wrapper = folder / "chromium-quiet"
    if not wrapper.exists():
        wrapper.write_text(f'#!/bin/sh\nexec {CHROMIUM} {QUIET_FLAGS} "$@"\n', encoding="utf-8")
        wrapper.chmod(wrapper.stat().st_mode | stat.S_IXUSR | stat.S_IXGRP | stat.S_IXOTH)
    return wrapper


def _start_server() -> None:
    global _server_started
    if _server_started:
        return
    try:
        import kaleido
    except ImportError:
        raise PngUnavailableError(
            "PNG export needs the kaleido package (pip install kaleido)"
        ) from None
    if "BROWSER_PATH" not in os.environ:
        if CHROMIUM.exists():
            folder = Path(tempfile.gettempdir()) / f"planner-export-{os.getuid()}"
            folder.mkdir(mode=0o700, exist_ok=True)
            os.environ["BROWSER_PATH"] = str(_browser_wrapper(folder))
        elif not (shutil.which("chromium") or shutil.which("google-chrome")):
            raise PngUnavailableError("PNG export needs Chromium (Debian package 'chromium')")
    kaleido.start_sync_server(mathjax=False, silence_warnings=True)
    _server_started = True


def stop_png_server() -> None:
    """Stop the export browser (started on first PNG export); the next export starts it again."""
    global _server_started
    with _lock:
        if _server_started:
            import kaleido

            kaleido.stop_sync_server(silence_warnings=True)
            _server_started = False


def figure_png(figure: go.Figure, *, width: int | None = None, height: int | None = None) -> bytes:
    """PNG bytes of a figure (kaleido on the system Chromium); one export at a time."""
    size = dict(PNG_SIZE)
    layout_height = figure.layout.height
    if layout_height:
        size["height"] = int(layout_height)
    if width:
        size["width"] = width
    if height:
        size["height"] = height
    with _lock:
        _start_server()
        with warnings.catch_warnings():
            # plotly notes that per-call browser options are unused with a running server.
            warnings.filterwarnings("ignore", message="The kopts argument is ignored")
            return figure.to_image(format="png", **size)


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
_parts_folder: Path | None = None
_parts_cache: Any = None
_parts_pid: int | None = None
_parts_memory: dict[str, dict] = {}  # without a folder (a single process: tests, notebooks)


def use_parts_folder(folder: str | os.PathLike[str] | None) -> None:
    """Keep offered parts in ``folder`` (None: in this process's memory only)."""
    global _parts_folder, _parts_cache, _parts_pid
    _parts_folder = None if folder is None else Path(folder)
    _parts_cache, _parts_pid = None, None


def _cache():
    """The parts' disk cache opened by this process (a fresh handle after a fork)."""
    global _parts_cache, _parts_pid
    if _parts_folder is None:
        return None
    if _parts_cache is None or _parts_pid != os.getpid():
        import diskcache

        _parts_cache = diskcache.Cache(str(_parts_folder), size_limit=PART_BYTES)
        _parts_pid = os.getpid()
    return _parts_cache


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
