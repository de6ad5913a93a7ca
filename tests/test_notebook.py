"""The example notebook runs from top to bottom in a fresh kernel (nbclient, ipykernel) and says
true things: its comparison has one row per schedule of the demo file, and the thresholds it
states in words are the folds of the model it loads.

Outside references: the schedules are read from the demo file with the standard library's
``tomllib``; the thresholds are the folds of the recycling model of Carpenter, Ludwig & Brock
(1999, Ecological Applications 9:751-771, eq. 1 and appendix), dP/dt = L - s P + r P^q/(m^q + P^q):
at a fold dL/dP = 0 along the steady states L(P) = s P - r P^q/(m^q + P^q), found here with
scipy.optimize.brentq on the file's parameters.
"""

from __future__ import annotations

import json
import re
import sys
import tomllib
from pathlib import Path

import nbclient
import nbformat
import numpy as np
import pytest
from scipy.optimize import brentq

from planner.report import CAUTION

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parent.parent
NOTEBOOK = ROOT / "examples" / "recovery-walkthrough.ipynb"
DEMO = ROOT / "scenarios" / "alder-mere.toml"
CELL_TIMEOUT = 300  # seconds per cell: a hung cell fails the test instead of the whole run
MEMBERS = 300  # the ensemble size the notebook asks for
PROBE = """
import json, sys
print(json.dumps({
    "python": sys.executable,
    "schedules": table["schedule"].tolist(),
    "recovery": picture.recovery_threshold,
    "collapse": picture.collapse_threshold,
    "members": odds["members"].tolist(),
    "p_recovered": odds["p_recovered"].tolist(),
}))
"""
"""Appended by the test (never saved): reads the notebook's own variables after the run."""


def _folds(parameters: dict[str, float]) -> list[float]:
    """Loads at the folds of the recycling model, by brentq on dL/dP over a fine grid of P."""
    s, r, m, q = (parameters[k] for k in ("s", "r", "m", "q"))

    def load(P):
        return s * P - r * P**q / (m**q + P**q)

    def slope(P):
        return s - r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2

    grid = np.linspace(1e-6, 10 * m, 20001)
    values = slope(grid)
    roots = [
        brentq(slope, a, b, xtol=1e-14)
        for a, b, va, vb in zip(grid[:-1], grid[1:], values[:-1], values[1:], strict=True)
        if va * vb < 0
    ]
    return sorted(load(P) for P in roots)


def _texts(cell) -> list[str]:
    """Everything a cell shows as text: streams, plain text and HTML."""
    out = []
    for output in cell.get("outputs", []):
        if output.output_type == "stream":
            out.append(output.text)
        for kind in ("text/plain", "text/html"):
            if kind in output.get("data", {}):
                out.append(output.data[kind])
    return out


def _tagged(notebook, tag: str):
    (cell,) = [c for c in notebook.cells if tag in c.get("metadata", {}).get("tags", [])]
    return cell


def test_the_saved_notebook_has_no_outputs():
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    nbformat.validate(notebook)
    code = [c for c in notebook.cells if c.cell_type == "code"]
    assert code and all(not c.outputs and c.execution_count is None for c in code)


@pytest.fixture(scope="module")
def executed(tmp_path_factory):
    """The notebook run in a fresh kernel from a folder outside the repository, and the probe."""
    notebook = nbformat.read(NOTEBOOK, as_version=4)
    notebook.cells.append(nbformat.v4.new_code_cell(PROBE))
    client = nbclient.NotebookClient(
        notebook,
        timeout=CELL_TIMEOUT,
        startup_timeout=120,
        kernel_name="python3",
        allow_errors=False,  # any error in a cell raises CellExecutionError here
        resources={"metadata": {"path": str(tmp_path_factory.mktemp("notebook"))}},
    )
    client.execute()
    probe = notebook.cells.pop()
    (line,) = [t for t in _texts(probe) if t.strip()]
    return notebook, json.loads(line)


def test_the_notebook_ran_on_this_environment(executed):
    _, probe = executed
    assert Path(probe["python"]).resolve() == Path(sys.executable).resolve()


def test_the_comparison_has_one_row_per_schedule_of_the_demo(executed):
    notebook, probe = executed
    names = [s["name"] for s in tomllib.loads(DEMO.read_text(encoding="utf-8"))["schedules"]]
    assert probe["schedules"] == names
    shown = "".join(t for t in _texts(_tagged(notebook, "compare-table")) if "<table" in t)
    body = shown.partition("<tbody>")[2]
    assert body.count("<tr>") == len(names)  # one row per schedule under the header
    assert all(name in shown for name in names)


def test_the_thresholds_in_words_are_the_folds_of_the_model(executed):
    notebook, probe = executed
    parameters = tomllib.loads(DEMO.read_text(encoding="utf-8"))["model"]["parameters"]
    recovery, collapse = _folds(parameters)
    assert probe["recovery"] == pytest.approx(recovery, rel=1e-6)
    assert probe["collapse"] == pytest.approx(collapse, rel=1e-6)
    words = "".join(_texts(_tagged(notebook, "thresholds")))
    assert re.search(rf"rises above {collapse:.3g} ", words)
    assert re.search(rf"falls below {recovery:.3g} ", words)


def test_the_ensemble_is_small_and_gives_chances(executed):
    _, probe = executed
    assert probe["members"] == [MEMBERS] * len(probe["schedules"])
    assert all(0.0 <= p <= 1.0 for p in probe["p_recovered"])


@pytest.mark.parametrize(
    "tag",
    [
        "diagram-figure",
        "compare-figure",
        "compare-time",
        "frontier-figure",
        "ensemble-figure",
        "search",
    ],
)
def test_each_figure_cell_draws_a_plotly_figure(executed, tag):
    notebook, _ = executed
    figures = [
        o.data["application/vnd.plotly.v1+json"]
        for o in _tagged(notebook, tag).outputs
        if "application/vnd.plotly.v1+json" in o.get("data", {})
    ]
    assert len(figures) == 1 and figures[0]["data"]


def test_the_caution_is_shown_once(executed):
    """The one caution (planner.report.CAUTION), once in the whole notebook's outputs."""
    notebook, _ = executed
    shown = "\n".join(t for cell in notebook.cells for t in _texts(cell))
    assert shown.count(CAUTION) == 1
