"""The `planner` command: parse arguments, call the planner, print. No numerics here.

Exit codes: 0 success, 2 invalid input (each problem names file, field and reason), 1 internal
error (a bug: please report it with the traceback).
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import traceback
from collections.abc import Callable, Sequence
from pathlib import Path

from planner.errors import InputError, Problem

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT = 0, 1, 2
COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {}


def command(name: str):
    def register(function: Callable[[argparse.Namespace], int]):
        COMMANDS[name] = function
        return function

    return register


OUTPUT_OPTIONS = ("html", "csv", "out", "save_to")
"""Options that name a file to write: checked before the work starts, never silently
replaced (``--force`` replaces them)."""


def _write(args: argparse.Namespace, option: str, text: str) -> None:
    """Write the file named by ``option`` atomically; an existing one only with --force."""
    from planner.textfiles import write_user_text

    path = getattr(args, option)
    write_user_text(path, text, overwrite=args.force)
    print(f"wrote {path}", file=sys.stderr)


def _check_outputs(args: argparse.Namespace) -> None:
    """Every output file asked for can be written, before any work (a long fit or search would
    otherwise fail only at its end)."""
    from planner.textfiles import check_output

    for option in OUTPUT_OPTIONS:
        path = getattr(args, option, None)
        if path:
            check_output(path, "--" + option.replace("_", "-"), overwrite=args.force)


def _add_force(sub: argparse._SubParsersAction) -> None:
    """``--force`` on every command that writes files."""
    for parser in sub.choices.values():
        if any(action.dest in OUTPUT_OPTIONS for action in parser._actions):
            parser.add_argument(
                "--force",
                action="store_true",
                help="replace output files that exist already (default: keep them and stop)",
            )


def _progress():
    from planner.progress import TerminalProgress

    return TerminalProgress()


@command("check")
def _check(args: argparse.Namespace) -> int:
    from planner.report import check_text
    from planner.scenario import load_scenario

    print(check_text(load_scenario(args.file), args.file))
    return EXIT_OK


@command("schema")
def _schema(args: argparse.Namespace) -> int:
    from planner.scenario import json_schema

    print(json.dumps(json_schema(), indent=2))
    return EXIT_OK


@command("diagram")
def _diagram(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.equilibria import diagram_for, locate
    from planner.figures import hysteresis_figure
    from planner.report import diagram_json, diagram_text
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    diagram = diagram_for(scenario, progress=_progress())
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    if args.json:
        print(json.dumps(diagram_json(scenario, diagram, standing), indent=2))
    else:
        print(diagram_text(scenario, diagram, standing))
    if args.html:
        figure = hysteresis_figure(scenario, diagram, standing=standing)
        text = diagram_text(scenario, diagram, standing, caution=False)
        _write(
            args,
            "html",
            page(
                scenario.name,
                [
                    Section("Equilibria and thresholds", figure=figure),
                    Section("Summary", text=text),
                ],
            ),
        )
    return EXIT_OK


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="planner",
        description="Plan load-reduction paths that bring a hysteretic lake back to clear water.",
        epilog="Screening tool: defer to local regulations and licensed professionals.",
    )
    sub = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    p = sub.add_parser("check", help="validate a scenario file and summarise it")
    p.add_argument("file")
    sub.add_parser("schema", help="print the JSON Schema of scenario files (for editors)")
    p = sub.add_parser("diagram", help="equilibria, folds, thresholds and where the lake stands")
    p.add_argument("file")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML hysteresis diagram")
    for extend in EXTENSIONS:
        extend(sub)
    _add_force(sub)
    return parser


# Later commands add their sub-parsers here (kept in their own functions below).
EXTENSIONS: list[Callable[[argparse._SubParsersAction], None]] = []


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        _check_outputs(args)
        return COMMANDS[args.command](args)
    except InputError as error:
        for problem in error.problems:
            print(str(problem), file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return EXIT_INTERNAL
    except BrokenPipeError:
        # The reader stopped early (`planner ... | head`): not an error of ours. Point stdout at
        # the null device so that the interpreter's final flush does not fail again.
        devnull = os.open(os.devnull, os.O_WRONLY)
        os.dup2(devnull, sys.stdout.fileno())
        return EXIT_OK
    except Exception:  # a bug: show it plainly
        traceback.print_exc()
        print("internal error: this is a bug in the planner, not in your input", file=sys.stderr)
        return EXIT_INTERNAL


@command("compare")
def _compare(args: argparse.Namespace) -> int:
    from planner.briefing import comparison_briefing
    from planner.outcomes import compare
    from planner.report import comparison_json, comparison_rows, comparison_text, table_csv
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    comparison = compare(scenario, progress=_progress())
    if args.json:
        print(json.dumps(comparison_json(comparison), indent=2))
    else:
        print(comparison_text(comparison))
    if args.csv:
        _write(args, "csv", table_csv(*comparison_rows(comparison)))
    if args.html:
        _write(args, "html", comparison_briefing(comparison))
    return EXIT_OK


@command("sweep")
def _sweep(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.equilibria import diagram_for
    from planner.figures import sweep_figure
    from planner.report import sweep_json, sweep_text
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    from planner.sweep import sweep_for

    sweep = sweep_for(scenario, step=args.step, progress=_progress())
    print(
        json.dumps(sweep_json(scenario, sweep), indent=2)
        if args.json
        else sweep_text(scenario, sweep)
    )
    if args.html:
        figure = sweep_figure(scenario, sweep, diagram_for(scenario))
        _write(
            args,
            "html",
            page(
                scenario.name,
                [
                    Section("Quasi-static sweep", figure=figure),
                    Section("Summary", text=sweep_text(scenario, sweep, caution=False)),
                ],
            ),
        )
    return EXIT_OK


def _more_commands(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("compare", help="run every schedule: verdicts, metrics, costs, briefing")
    p.add_argument("file")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write the HTML briefing")
    p.add_argument("--csv", metavar="OUT", help="write the comparison table as CSV")
    p = sub.add_parser("sweep", help="dial the control slowly up and down; find the jumps")
    p.add_argument("file")
    p.add_argument("--step", type=float, help="control step (default: range width / 200)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML figure of the loop")


EXTENSIONS.append(_more_commands)


@command("app")
def _app(args: argparse.Namespace) -> int:
    # the web app sits on top of the planner
    from webapp.serve import DEFAULT_WORKERS, LOOPBACK_NAMES, is_loopback, serve

    workers = DEFAULT_WORKERS if args.workers is None else args.workers
    if workers < 1:
        raise InputError([Problem("--workers", "workers", "must be at least 1")])
    remote = not is_loopback(args.host)
    if remote and not args.allow_remote:
        reason = (
            f"{args.host} serves the app beyond this machine, where anyone who reaches the port "
            "can read and save scenarios; add --allow-remote to do so on purpose"
        )
        raise InputError([Problem("--host", "host", reason)])
    allowed = (*LOOPBACK_NAMES, *args.host_name)
    if remote:
        if args.host not in ("0.0.0.0", "::"):
            allowed += (args.host,)
        print(
            f"Warning: serving on {args.host}, beyond this machine; requests naming hosts other "
            f"than {', '.join(allowed)} are refused (add names with --host-name).",
            file=sys.stderr,
        )

    def ready(port: int) -> None:
        print(f"Lake recovery planner: http://{args.host}:{port}/ (Ctrl+C stops)", file=sys.stderr)

    serve(
        args.dir,
        host=args.host,
        port=args.port,
        workers=workers,
        ready=ready,
        allowed_hosts=allowed,
    )
    return EXIT_OK


def _app_command(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("app", help="start the web app (loopback only unless --host says otherwise)")
    p.add_argument("dir", nargs="?", help="folder of scenario files (default: the bundled demos)")
    p.add_argument("--host", default="127.0.0.1", help="address to listen on (default 127.0.0.1)")
    p.add_argument("--port", type=int, default=8050, help="port to listen on (default 8050)")
    p.add_argument("--workers", type=int, help="worker processes (default: one per core, up to 4)")
    p.add_argument(
        "--allow-remote",
        action="store_true",
        help="needed to serve beyond this machine (a --host that is not a loopback address)",
    )
    p.add_argument(
        "--host-name",
        action="append",
        default=[],
        metavar="NAME",
        help="a name clients use to reach the app (repeatable; default: the loopback names and "
        "--host); requests for other names are refused",
    )


EXTENSIONS.append(_app_command)


def _number_list(text: str | None, option: str) -> list[float] | None:
    """Comma-separated numbers from an option, or an InputError naming the option."""
    if text is None:
        return None
    values = []
    for i, part in enumerate(text.split(",")):
        try:
            values.append(float(part))
        except ValueError:
            raise InputError(
                [Problem(option, f"{option.lstrip('-')}.{i}", f"{part.strip()!r} is not a number")]
            ) from None
    return values


@command("frontier")
def _frontier(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.figures import frontier_figure
    from planner.frontier import frontier_json, frontier_rows, frontier_text, recovery_frontier
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    frontier = recovery_frontier(
        scenario,
        relax_to=args.relax_to,
        depths=_number_list(args.depths, "--depths"),
        hold_years=_number_list(args.hold_years, "--hold-years") or (),
        family=args.family,
        start_year=args.start_year,
        ramp_years=args.ramp_years,
        source=args.file,
        progress=_progress(),
    )
    print(json.dumps(frontier_json(frontier), indent=2) if args.json else frontier_text(frontier))
    if args.html:
        _write(
            args,
            "html",
            page(
                f"Recovery frontier: {scenario.name}",
                [
                    Section("How deep and how long", figure=frontier_figure(scenario, frontier)),
                    Section("Least hold at each depth", table=frontier_rows(frontier)),
                ],
                summary=scenario.description,
            ),
        )
    return EXIT_OK


@command("search")
def _search(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.figures import frontier_figure, pareto_figure
    from planner.frontier import recovery_frontier
    from planner.scenario import load_scenario
    from planner.search import save_found, search, search_json, search_text

    scenario = load_scenario(args.file)
    result = search(
        scenario,
        relax_to=args.relax_to,
        by_year=args.by_year,
        families=args.family or ("overshoot", "staircase"),
        source=args.file,
        progress=_progress(),
    )
    print(json.dumps(search_json(result), indent=2) if args.json else search_text(result))
    if args.save_to:
        if result.cheapest is None:
            raise InputError([Problem(args.file, "schedules", "no admissible schedule to save")])
        _, saved = save_found(scenario, result.cheapest, args.save_to, overwrite=args.force)
        print(f"wrote {args.save_to} with the schedule {saved.name!r}", file=sys.stderr)
    if args.html:
        frontier = recovery_frontier(scenario, relax_to=result.relax_to, source=args.file)
        _write(
            args,
            "html",
            page(
                f"Cheapest recovering schedules: {scenario.name}",
                [
                    Section("Money against time", figure=pareto_figure(scenario, result)),
                    Section("How deep and how long", figure=frontier_figure(scenario, frontier)),
                    Section("Summary", text=search_text(result)),
                ],
                summary=scenario.description,
            ),
        )
    return EXIT_OK


def _frontier_commands(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("frontier", help="least hold below the recovery threshold, for each depth")
    p.add_argument("file")
    p.add_argument("--relax-to", type=float, metavar="X", help="control value after the hold")
    p.add_argument("--depths", metavar="D1,D2,...", help="depths below the recovery threshold")
    p.add_argument(
        "--hold-years",
        "--durations",
        dest="hold_years",
        metavar="Y1,Y2,...",
        help="holds at the floor (years): the least depth for each (--durations: old name)",
    )
    p.add_argument("--family", choices=("overshoot", "staircase"), default="overshoot")
    p.add_argument(
        "--start-year",
        type=float,
        default=0.0,
        metavar="Y",
        help="year the descent to the floor begins (default 0)",
    )
    p.add_argument(
        "--ramp-years",
        type=float,
        metavar="R",
        help="years of each ramp, down and up; 0 for instant jumps (default: at the scenario's "
        "largest yearly change, or 2 yr each when it sets none)",
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML figure of the frontier")
    p = sub.add_parser("search", help="cheapest recovering schedule; money against time")
    p.add_argument("file")
    p.add_argument("--by-year", type=float, metavar="Y", help="the target must be met by year Y")
    p.add_argument("--relax-to", type=float, metavar="X", help="control value after the hold")
    p.add_argument(
        "--family", action="append", choices=("overshoot", "staircase"), help="(repeatable)"
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML page with the figures")
    p.add_argument("--save-to", metavar="NEW.toml", help="write the scenario plus the cheapest")


EXTENSIONS.append(_frontier_commands)


def _name_list(text: str | None) -> list[str] | None:
    """Comma-separated names from an option (``s,r,m``), or None when the option is absent."""
    return None if text is None else [part.strip() for part in text.split(",") if part.strip()]


def _assignments(items: list[str] | None, option: str) -> dict[str, str] | None:
    """``NAME=VALUE`` pairs from a repeatable option, or an InputError naming the option."""
    if not items:
        return None
    out = {}
    for item in items:
        name, equals, value = item.partition("=")
        if not equals or not name.strip() or not value.strip():
            raise InputError([Problem(option, item, "write VARIABLE=COLUMN, e.g. P=TP")])
        out[name.strip()] = value.strip()
    return out


@command("fit")
def _fit(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.calibration import fit_json, fit_record, fit_text, observations_for
    from planner.figures import fit_figure, fit_hysteresis_figure
    from planner.monitoring import read_record
    from planner.scenario import load_scenario, save_scenario

    if args.out and Path(args.out).exists():  # say so before a long fit, not after
        raise InputError([Problem(args.out, "(file)", "exists already; choose another name")])
    scenario = load_scenario(args.scenario)
    record = read_record(args.data, time_column=args.time_column)
    observations = observations_for(
        record,
        scenario,
        control_column=args.control_column,
        states=_assignments(args.state, "--state"),
    )
    fit = fit_record(
        scenario,
        observations,
        fit=_name_list(args.fit),
        log=args.log,
        bootstrap=args.bootstrap,
        seed=args.seed,
        progress=_progress(),
    )
    print(json.dumps(fit_json(fit), indent=2) if args.json else fit_text(fit))
    if args.out:
        save_scenario(fit.fitted_scenario, args.out, overwrite=args.force)
        print(f"wrote {args.out} (the fitted scenario). {fit.priors_note}", file=sys.stderr)
    if args.html:
        _write(
            args,
            "html",
            page(
                f"Fit to monitoring data: {scenario.name}",
                [
                    Section("Record and fitted model", figure=fit_figure(fit)),
                    Section("Thresholds of the fitted lake", figure=fit_hysteresis_figure(fit)),
                    Section("Summary", text=fit_text(fit, caution=False)),
                ],
                summary=scenario.description,
            ),
        )
    return EXIT_OK


@command("signals")
def _signals(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.figures import signals_figure
    from planner.monitoring import read_record
    from planner.signals import record_signals, signals_json, signals_text

    record = read_record(args.data, time_column=args.time_column)
    signals = record_signals(
        record, args.column, window=args.window, bandwidth=args.bandwidth, before=args.before
    )
    print(json.dumps(signals_json(signals), indent=2) if args.json else signals_text(signals))
    if args.html:
        _write(
            args,
            "html",
            page(
                f"Early-warning indicators: {args.data}",
                [
                    Section("Indicators", figure=signals_figure(signals)),
                    Section("Summary", text=signals_text(signals, caution=False)),
                ],
            ),
        )
    return EXIT_OK


def _monitoring_commands(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("fit", help="fit the model to a monitoring record; thresholds, intervals")
    p.add_argument("data", help="monitoring CSV: time, load and observed columns")
    p.add_argument("--scenario", required=True, metavar="BASE.toml", help="model and first guess")
    p.add_argument("--fit", metavar="s,r,m", help="parameters to fit (default: all but q)")
    p.add_argument("--out", metavar="FITTED.toml", help="write the fitted scenario (new file)")
    p.add_argument("--log", action="store_true", help="fit the logarithms of the observations")
    p.add_argument("--bootstrap", type=int, metavar="N", help="bootstrap replicates (0: none)")
    p.add_argument("--seed", type=int, default=0, help="seed of the bootstrap draws")
    p.add_argument("--time-column", metavar="NAME", help="time column (default: the first)")
    p.add_argument("--control-column", metavar="NAME", help="load column (default: L or load)")
    p.add_argument(
        "--state", action="append", metavar="VARIABLE=COLUMN", help="observed column (repeatable)"
    )
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML page with the figures")
    p = sub.add_parser("signals", help="early-warning indicators of one monitored series")
    p.add_argument("data", help="monitoring CSV: time and one or more data columns")
    p.add_argument("--column", metavar="NAME", help="the series (needed if several columns)")
    p.add_argument("--window", type=float, metavar="F", help="window share (default: half)")
    p.add_argument("--bandwidth", type=float, metavar="YEARS", help="kernel bandwidth")
    p.add_argument("--before", type=float, metavar="TIME", help="use only times before this")
    p.add_argument("--time-column", metavar="NAME", help="time column (default: the first)")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML page with the figures")


EXTENSIONS.append(_monitoring_commands)


@command("ensemble")
def _ensemble(args: argparse.Namespace) -> int:
    from planner.ensemble import DEFAULT_CHUNK, run_ensemble
    from planner.ensemble_report import ensemble_briefing, ensemble_json, ensemble_text
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    ensemble = run_ensemble(
        scenario,
        members=args.members,
        seed=args.seed,
        scheduler=args.scheduler,
        chunk_size=DEFAULT_CHUNK if args.chunk is None else args.chunk,
        progress=_progress(),
    )
    print(json.dumps(ensemble_json(ensemble), indent=2) if args.json else ensemble_text(ensemble))
    if args.html:
        _write(args, "html", ensemble_briefing(ensemble))
    return EXIT_OK


def _ensemble_command(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "ensemble", help="chance of recovery under uncertain parameters and noisy loads"
    )
    p.add_argument("file")
    p.add_argument("--members", type=int, metavar="N", help="members (default: [uncertainty])")
    p.add_argument("--seed", type=int, metavar="S", help="seed (default: [uncertainty])")
    p.add_argument(
        "--scheduler",
        default="local",
        metavar="local|processes|tcp://HOST:PORT",
        help="where to run: this process (default), 2 local Dask worker processes, or a "
        "running Dask scheduler",
    )
    p.add_argument("--chunk", type=int, metavar="M", help="members simulated together")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--html", metavar="OUT", help="write an HTML page with the figures")


EXTENSIONS.append(_ensemble_command)


if __name__ == "__main__":
    sys.exit(main())
