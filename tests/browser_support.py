"""What every browser test shares: Debian's Chromium, its flags, the app on a loopback port.

Browser test files use ``BROWSER_MARKS`` as their ``pytestmark``; the fixtures are re-exported by
``tests/conftest.py``.
"""

from __future__ import annotations

import json
import logging
import os
import shutil
import threading
from pathlib import Path

import pytest

from planner.briefing import CHROMIUM_FLAGS
from webapp import compute, create_app
from webapp.files import default_scenario_dir

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = list(CHROMIUM_FLAGS)  # the planner's own: no display, off the network
TIMEOUT_MS = 30_000  # generous: CI shares two cores between the server, Chromium and pytest


@pytest.fixture(scope="session")
def browser_type_launch_args(browser_type_launch_args):
    return {**browser_type_launch_args, "executable_path": str(CHROMIUM), "args": CHROMIUM_ARGS}


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    """The app on a free loopback port, its demo folder a copy, saving into its own folder."""
    from werkzeug.serving import make_server

    root = tmp_path_factory.mktemp("app")
    scenarios = root / "scenarios"
    shutil.copytree(default_scenario_dir(), scenarios)
    saved = root / "saved"
    app = create_app(scenarios, save_dir=saved, cache_dir=root / "cache")
    compute.clear()  # results cached by earlier tests in this process would hide the real work
    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    server = make_server("127.0.0.1", 0, app.server, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    yield {"url": f"http://127.0.0.1:{server.server_port}/", "saved": saved}
    server.shutdown()
    thread.join(timeout=10)


@pytest.fixture
def shots(tmp_path):
    folder = Path(os.environ.get("PLANNER_SCREENSHOTS") or tmp_path / "screenshots")
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def dom_id(ident: dict) -> str:
    """CSS selector of a pattern-matching id (Dash writes it as JSON with sorted keys)."""
    return '[id="{}"]'.format(
        json.dumps(ident, sort_keys=True, separators=(",", ":")).replace('"', '\\"')
    )


BROWSER_MARKS = [
    pytest.mark.browser,
    pytest.mark.skipif(
        not CHROMIUM.exists(),
        reason="needs Debian's chromium at /usr/bin/chromium (apt-get install chromium; "
        ".ci/run installs it)",
    ),
]
