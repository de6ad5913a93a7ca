"""Serving the app: one process (the default), or several worker processes sharing one socket.

The user's data lives in the browser, results are cached per process, and long jobs and their
results live in a shared disk cache, so workers share nothing else: the operating system hands
each connection to whichever worker accepts it first. A long job's process is watched, and killed
at shutdown, by the serving process that started it. Several workers let simultaneous users
recompute on more than one core (the numerical work holds Python's interpreter lock).
"""

from __future__ import annotations

import atexit
import contextlib
import os
import shutil
import signal
import socket
import sys
import tempfile
from pathlib import Path

from webapp import compute, jobs
from webapp.app import LOOPBACK_NAMES, create_app  # noqa: F401 (LOOPBACK_NAMES re-exported)

LOOPBACK = "127.0.0.1"


def is_loopback(host: str) -> bool:
    """Whether listening on ``host`` keeps the app on this machine."""
    import ipaddress

    if host.lower() == "localhost":
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


# One worker per core (at most four) where processes can be forked safely; elsewhere one.
DEFAULT_WORKERS = min(4, os.cpu_count() or 1) if sys.platform.startswith("linux") else 1


def serve(
    scenario_dir: str | os.PathLike[str] | None = None,
    *,
    host: str = LOOPBACK,
    port: int = 8050,
    workers: int = DEFAULT_WORKERS,
    save_dir: str | os.PathLike[str] | None = None,
    ready=None,
    allowed_hosts: tuple[str, ...] = LOOPBACK_NAMES,
) -> None:
    """Serve until interrupted. ``ready(port)`` is called once the socket listens (port 0 picks
    a free one). Requests for host names outside ``allowed_hosts`` are refused."""
    if workers <= 1 or not hasattr(os, "fork"):
        from werkzeug.serving import make_server

        app = create_app(scenario_dir, save_dir=save_dir, allowed_hosts=allowed_hosts)
        server = make_server(host, port, app.server, threaded=True)
        if ready is not None:
            ready(server.server_port)
        try:
            server.serve_forever()
        except KeyboardInterrupt:
            pass
        finally:
            server.server_close()
            jobs.stop_all()  # no long job outlives the server
        return
    _serve_workers(
        scenario_dir,
        host=host,
        port=port,
        workers=workers,
        save_dir=save_dir,
        ready=ready,
        allowed_hosts=allowed_hosts,
    )


def _serve_workers(scenario_dir, *, host, port, workers, save_dir, ready, allowed_hosts) -> None:
    from werkzeug.serving import make_server

    cache = Path(tempfile.mkdtemp(prefix="planner-app-"))
    atexit.register(shutil.rmtree, cache, ignore_errors=True)
    # fail here, once, on bad folders
    create_app(scenario_dir, save_dir=save_dir, cache_dir=cache, allowed_hosts=allowed_hosts)
    family = socket.AF_INET6 if ":" in host else socket.AF_INET
    listener = socket.create_server((host, port), family=family, backlog=128)
    listener.set_inheritable(True)
    children: list[int] = []
    for _ in range(workers):
        pid = os.fork()
        if pid == 0:  # a worker: its own app and caches, the shared socket and disk cache
            code = 0
            try:
                signal.signal(signal.SIGTERM, lambda *_: sys.exit(0))
                app = create_app(
                    scenario_dir, save_dir=save_dir, cache_dir=cache, allowed_hosts=allowed_hosts
                )
                compute.use_disk(cache / "results", share_all=True)  # results serve every worker
                # Dash registers its script bundles while rendering the page, so a worker that
                # would otherwise first see a script request renders the page once itself.
                app.server.test_client().get("/")
                server = make_server(host, port, app.server, threaded=True, fd=listener.fileno())
                server.serve_forever()
            except (KeyboardInterrupt, SystemExit):
                pass
            except BaseException:
                import traceback

                traceback.print_exc()
                code = 1
            finally:
                jobs.stop_all()  # os._exit runs no exit handlers: kill this worker's jobs here
                os._exit(code)  # never run the parent's exit handlers in a worker
        children.append(pid)
    if ready is not None:
        ready(listener.getsockname()[1])

    def stop(*_):
        raise KeyboardInterrupt

    signal.signal(signal.SIGTERM, stop)
    try:
        for pid in children:
            os.waitpid(pid, 0)
    except KeyboardInterrupt:
        pass
    finally:
        for pid in children:
            with contextlib.suppress(ProcessLookupError):
                os.kill(pid, signal.SIGTERM)
        for pid in children:
            with contextlib.suppress(ChildProcessError):
                os.waitpid(pid, 0)
        listener.close()
