"""Server time of one recompute in the web app, for a scenario with 6 schedules.

One recompute is what the server does after the user edits a number: the editor's recompute
callback (validate through the planner, re-simulate, keep the diagram from the cache) plus every
callback the edit triggers on the page as first shown (results under each schedule, summary,
diagram with every path, comparison table), each output serialised to JSON as Dash sends it.
The callbacks are called directly as plain functions, so no network time is included.

Two cases: one schedule edited (the usual edit: the other five come from the cache) and all six
re-simulated (every outcome cache cleared first). Median of RUNS runs. Target: under 300 ms.

    python benchmarks/app_redraw.py [--runs 7]
"""

from __future__ import annotations

import argparse
import json
import statistics
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import plotly.utils  # noqa: E402
from app_load import recompute_body  # noqa: E402

from planner.scenario import load_scenario  # noqa: E402
from webapp import compute, drafts, ids  # noqa: E402
from webapp.files import default_scenario_dir  # noqa: E402
from webapp.views import diagram, editor, table  # noqa: E402

TARGET_MS = 300.0


def serialised(output) -> int:
    return len(json.dumps(output, cls=plotly.utils.PlotlyJSONEncoder))


def six_schedule_draft() -> dict:
    path = default_scenario_dir() / "alder-mere.toml"
    data = drafts.add(compute.dump(load_scenario(path)), "overshoot")
    assert len(data["schedules"]) == 6
    return {"source": "alder-mere-six.toml", "data": data, "serial": 1}


def one_recompute(draft: dict, floor: str, shown: list[str] | None) -> dict[str, float]:
    """Times (s) of each server step after an edit of schedule 2's floor."""
    body = recompute_body("benchmark", draft, {(1, "floor"): floor})
    inputs, states = body["inputs"], body["state"]
    times: dict[str, float] = {}
    began = time.perf_counter()
    out = editor.recompute(
        [v["value"] for v in inputs[0]],
        [v["value"] for v in inputs[1]],
        inputs[2]["value"],
        *([s["value"] for s in group] for group in states[:5]),
        None,
    )
    serialised(out)
    working = out[5]
    assert working["complete"] and not working["stale"], out[6]
    times["recompute callback (validate, simulate)"] = time.perf_counter() - began

    step = time.perf_counter()
    result_ids = [ids.schedule_result(i) for i in range(len(draft["data"]["schedules"]))]
    serialised(editor.result_lines(working, None, result_ids))
    times["verdict and cost under each schedule"] = time.perf_counter() - step

    step = time.perf_counter()
    serialised(diagram.describe(working))
    times["lake summary"] = time.perf_counter() - step

    step = time.perf_counter()
    serialised(diagram.draw(working, None, shown, ids.TAB_DIAGRAM))
    times["hysteresis diagram with 6 paths"] = time.perf_counter() - step

    step = time.perf_counter()
    serialised(table.fill(working, None, None, None))
    times["comparison table"] = time.perf_counter() - step
    times["total"] = time.perf_counter() - began
    return times


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=7)
    args = parser.parse_args(argv)
    runs = max(1, min(args.runs, 100))
    draft = six_schedule_draft()
    names = [s["name"] for s in draft["data"]["schedules"]]
    one_recompute(draft, "0.06", names)  # warm: compiles the model, computes the diagram once
    cases = {}
    for case in ("one schedule edited", "all six re-simulated"):
        samples = []
        for run in range(runs):
            if case == "all six re-simulated":
                compute.clear(keep_diagrams=True)
            samples.append(one_recompute(draft, f"{0.055 + 0.001 * run:.3f}", names))
        cases[case] = {key: statistics.median(s[key] for s in samples) for key in samples[0]}
    print(f"Server time of one recompute, 6 schedules (alder-mere.toml + 1), median of {runs} runs")
    width = max(len(k) for k in cases["one schedule edited"])
    print(f"{'':{width}}  {'one edited':>11}  {'all six':>9}")
    for key in cases["one schedule edited"]:
        one, six = (cases[c][key] * 1000 for c in cases)
        print(f"{key:{width}}  {one:8.1f} ms  {six:6.1f} ms")
    worst = cases["all six re-simulated"]["total"] * 1000
    verdict = "met" if worst < TARGET_MS else "NOT met"
    print(f"target: under {TARGET_MS:.0f} ms per recompute; {verdict} ({worst:.0f} ms at worst)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
