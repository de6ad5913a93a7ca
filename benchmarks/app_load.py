"""Load on the web app's recompute: concurrent clients posting schedule edits over loopback.

Starts the app in a separate process on 127.0.0.1 (a free port), then CLIENTS threads each post
edits of one schedule's floor to ``/_dash-update-component`` (the callback that validates and
re-simulates) for DURATION seconds, each request with a new floor so the result is never served
from the cache. Prints the p50 and p95 latency (and p95 as a ratio of the 1 s target), the error
count, and the machine's load average before and after (other work on the machine slows it).

Target: 0 errors and p95 under 1 s with 20 clients. Bounded: it stops at the duration, after
MAX_REQUESTS per client, and each request times out after REQUEST_TIMEOUT seconds.

    python benchmarks/app_load.py [--clients 20] [--duration 60] [--scenario FILE]
"""

from __future__ import annotations

import argparse
import http.client
import json
import multiprocessing
import os
import statistics
import sys
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from webapp import compute, ids  # noqa: E402
from webapp.drafts import editor_values  # noqa: E402
from webapp.files import default_scenario_dir  # noqa: E402
from webapp.serve import DEFAULT_WORKERS  # noqa: E402

MAX_REQUESTS = 100_000  # per client, a bound beside the duration
REQUEST_TIMEOUT = 10.0  # seconds
EDITED_SCHEDULE = 1  # in alder-mere.toml: "Deep cut to 0.06 for 6 years, relax to 0.15"
TARGET_P95 = 1.0  # seconds


def recompute_callback_id(app) -> str:
    """The key under which Dash knows the editor's recompute callback."""
    for key in app.callback_map:
        if ids.WORKING + ".data" in key and ids.FIELD_MESSAGE in key:
            return key
    raise LookupError("the recompute callback is not registered")


def _as_json_id(ident: dict) -> str:
    return json.dumps(ident, sort_keys=True, separators=(",", ":"))


def recompute_body(
    callback_id: str, draft: dict, edits: dict[tuple[int, str], str], working=None
) -> dict:
    """The JSON a browser posts when the user edits schedule fields (``edits``: (index, field)
    -> text), built from the editor's own field lists as the page would show them."""
    data = draft["data"]
    fields, actions = editor_values(data)
    fields = [(ident, edits.get((ident["index"], ident["field"]), text)) for ident, text in fields]

    def values(pairs):
        return [{"id": ident, "property": "value", "value": value} for ident, value in pairs]

    def id_states(idents):
        return [{"id": ident, "property": "id", "value": ident} for ident in idents]

    field_ids = [ident for ident, _ in fields]
    action_ids = [ident for ident, _ in actions]
    messages = [ids.field_message(f["index"], f["field"]) for f in field_ids]
    action_messages = [ids.action_message(f["index"], f["action"], f["field"]) for f in action_ids]
    schedule_messages = [ids.schedule_message(i) for i in range(len(data.get("schedules", [])))]
    changed = [_as_json_id(ids.schedule_field(i, key)) + ".value" for i, key in edits]
    return {
        "output": callback_id,
        "outputs": [
            [{"id": m, "property": "children"} for m in messages],
            [{"id": m, "property": "children"} for m in action_messages],
            [{"id": m, "property": "children"} for m in schedule_messages],
            [{"id": f, "property": "className"} for f in field_ids],
            [{"id": f, "property": "className"} for f in action_ids],
            {"id": ids.WORKING, "property": "data"},
            {"id": ids.RECOMPUTE_STATUS, "property": "children"},
            {"id": ids.PENDING, "property": "data"},
        ],
        "inputs": [
            values(fields),
            values(actions),
            {"id": ids.DRAFT, "property": "data", "value": draft},
        ],
        "changedPropIds": changed,
        "state": [
            id_states(field_ids),
            id_states(action_ids),
            id_states(messages),
            id_states(action_messages),
            id_states(schedule_messages),
            {"id": ids.WORKING, "property": "data", "value": working},
        ],
    }


def draft_of(path: Path) -> dict:
    from planner.scenario import load_scenario

    return {"source": path.name, "data": compute.dump(load_scenario(path)), "serial": 1}


def _serve(scenario_dir: str, workers: int, port_queue) -> None:
    import logging

    from webapp.serve import serve

    logging.getLogger("werkzeug").setLevel(logging.ERROR)
    serve(scenario_dir, host="127.0.0.1", port=0, workers=workers, ready=port_queue.put)


def run(clients: int, duration: float, scenario: Path, workers: int = 1) -> dict:
    from webapp import create_app

    draft = draft_of(scenario)
    callback_id = recompute_callback_id(create_app(scenario.parent))
    context = multiprocessing.get_context("spawn")
    port_queue = context.Queue()
    server = context.Process(target=_serve, args=(str(scenario.parent), workers, port_queue))
    server.start()
    try:
        port = port_queue.get(timeout=60)
        latencies: list[float] = []
        errors: list[str] = []
        lock = threading.Lock()
        counter = iter(range(10**9))
        start_line = threading.Barrier(clients)
        deadline = [0.0]

        def client() -> None:
            connection = http.client.HTTPConnection("127.0.0.1", port, timeout=REQUEST_TIMEOUT)
            start_line.wait()
            for _ in range(MAX_REQUESTS):
                if time.monotonic() >= deadline[0]:
                    break
                with lock:
                    n = next(counter)
                floor = f"{0.045 + (n % 9000) * 1e-5:.5f}"  # a new value each time: no cache hit
                body = json.dumps(
                    recompute_body(callback_id, draft, {(EDITED_SCHEDULE, "floor"): floor})
                )
                began = time.perf_counter()
                try:
                    connection.request(
                        "POST",
                        "/_dash-update-component",
                        body,
                        {"Content-Type": "application/json"},
                    )
                    response = connection.getresponse()
                    payload = response.read()
                    elapsed = time.perf_counter() - began
                    ok = response.status == 200 and ids.WORKING.encode() in payload
                    problem = None if ok else f"HTTP {response.status}: {payload[:200]!r}"
                except (OSError, http.client.HTTPException) as error:
                    elapsed, problem = (
                        time.perf_counter() - began,
                        f"{type(error).__name__}: {error}",
                    )
                    connection.close()
                    connection = http.client.HTTPConnection(
                        "127.0.0.1", port, timeout=REQUEST_TIMEOUT
                    )
                with lock:
                    latencies.append(elapsed)
                    if problem:
                        errors.append(problem)
            connection.close()

        # Warm-up: each worker computes the diagram once, as the first page loads would.
        for _ in range(4 * workers):
            warm = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
            body = json.dumps(recompute_body(callback_id, draft, {}))
            warm.request(
                "POST", "/_dash-update-component", body, {"Content-Type": "application/json"}
            )
            warm.getresponse().read()
            warm.close()

        threads = [threading.Thread(target=client) for _ in range(clients)]
        deadline[0] = time.monotonic() + duration + 5  # provisional, until all are at the line
        for thread in threads:
            thread.start()
        began = time.monotonic()
        deadline[0] = began + duration
        for thread in threads:
            thread.join(timeout=duration + REQUEST_TIMEOUT + 30)
        wall = time.monotonic() - began
    finally:
        server.terminate()  # SIGTERM: the server stops its workers and exits
        server.join(timeout=15)
        if server.is_alive():
            server.kill()
            server.join(timeout=5)
    ordered = sorted(latencies)

    def quantile(q: float) -> float:
        return ordered[min(len(ordered) - 1, int(q * len(ordered)))] if ordered else float("nan")

    return {
        "requests": len(latencies),
        "errors": len(errors),
        "first_errors": errors[:3],
        "p50": quantile(0.50),
        "p95": quantile(0.95),
        "max": ordered[-1] if ordered else float("nan"),
        "mean": statistics.fmean(ordered) if ordered else float("nan"),
        "wall": wall,
    }


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--clients", type=int, default=20)
    parser.add_argument("--duration", type=float, default=60.0, help="seconds (default 60)")
    parser.add_argument(
        "--workers",
        type=int,
        default=DEFAULT_WORKERS,
        help=f"server worker processes, as `planner app --workers` (default {DEFAULT_WORKERS})",
    )
    parser.add_argument("--scenario", type=Path, default=default_scenario_dir() / "alder-mere.toml")
    args = parser.parse_args(argv)
    if not 1 <= args.clients <= 200 or not 0 < args.duration <= 3600 or not 1 <= args.workers <= 64:
        parser.error("clients must be 1..200, duration 0..3600 s and workers 1..64")
    print(
        f"{args.clients} clients, {args.duration:g} s, {args.workers} server worker(s) "
        f"(planner app --workers {args.workers}), recompute of {args.scenario.name} over loopback"
    )
    before = os.getloadavg()
    result = run(args.clients, args.duration, args.scenario, args.workers)
    after = os.getloadavg()
    print(
        f"requests      {result['requests']} ({result['requests'] / result['wall']:.1f} per second)"
    )
    print(f"latency p50   {result['p50'] * 1000:.0f} ms")
    print(
        f"latency p95   {result['p95'] * 1000:.0f} ms   "
        f"({result['p95'] / TARGET_P95:.2f} x the target of {TARGET_P95 * 1000:.0f} ms)"
    )
    print(f"latency max   {result['max'] * 1000:.0f} ms")
    print(f"errors        {result['errors']}   (target 0)")
    for line in result["first_errors"]:
        print(f"  {line}")
    cores = os.cpu_count() or 1
    print(
        f"load average  {before[0]:.2f} before, {after[0]:.2f} after (1-minute, {cores} cores; "
        "other work on the machine lengthens the latencies)"
    )
    met = result["errors"] == 0 and result["p95"] < TARGET_P95
    print("target met" if met else "target NOT met")
    return 0


if __name__ == "__main__":
    sys.exit(main())
