"""Files the user downloads: PNG and HTML of a figure, CSV of the table, the briefing.

PNG goes through plotly's image export (kaleido) on the system Chromium. One export server is
started on first use and reused (a fresh browser per image takes seconds); Chromium is started
through a small wrapper that adds flags keeping it off the network.
"""

from __future__ import annotations

import os
import re
import shutil
import stat
import tempfile
import threading
import warnings
from pathlib import Path

import plotly.graph_objects as go

from planner.briefing import Section, page

CHROMIUM = Path("/usr/lib/chromium/chromium")
QUIET_FLAGS = (
    "--headless=new --no-sandbox --disable-gpu --disable-quic --no-first-run "
    "--disable-background-networking --disable-component-update --disable-sync "
    "--disable-dev-shm-usage "
    '"--host-resolver-rules=MAP * ~NOTFOUND, EXCLUDE localhost, EXCLUDE 127.0.0.1"'
)
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
