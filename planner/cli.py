"""The `planner` command: parse arguments, call the planner, print. No numerics here.

Exit codes: 0 success, 2 invalid input (each problem names file, field and reason), 1 internal
error (a bug: please report it with the traceback).
"""

from __future__ import annotations

import argparse
import importlib
import json
import logging
import os
import re
import sys
import traceback
from collections.abc import Callable, Iterator, Sequence
from contextlib import contextmanager
from functools import partial

from planner import __version__
from planner.errors import InputError, Problem
from planner.progress import ProgressReport, is_terminal

EXIT_OK, EXIT_INTERNAL, EXIT_INPUT = 0, 1, 2
COMMANDS: dict[str, Callable[[argparse.Namespace], int]] = {}
LOG = logging.getLogger("planner.cli")  # by name: run as `python -m planner.cli`, too
LOGGERS = ("planner", "webapp")
"""Loggers whose messages the command shows on standard error (files written, warnings, progress
lines away from a terminal); their level follows -q / -v."""
TIME_FORMAT = "%Y-%m-%d %H:%M:%S"


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
    LOG.info("wrote %s", path)


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


class MessageFormatter(logging.Formatter):
    """A log message as plain text: ``wrote briefing.html`` on a terminal; elsewhere (a log file,
    CI output) preceded by the date and time, which a log needs. Warnings and errors start with
    their level (``warning: ...``)."""

    def __init__(self, *, stamped: bool):
        super().__init__(datefmt=TIME_FORMAT)
        self.stamped = stamped

    def format(self, record: logging.LogRecord) -> str:
        text = super().format(record)  # the message, and a traceback when one is attached
        if record.levelno >= logging.WARNING:
            text = f"{record.levelname.lower()}: {text}"
        if self.stamped:
            text = f"{self.formatTime(record, self.datefmt)} {text}"
        return text


@contextmanager
def _messages_to_stderr(*, quiet: bool, verbose: bool) -> Iterator[None]:
    """Show the planner's log messages on standard error while a command runs: warnings only
    with ``quiet``, debugging messages too with ``verbose``. The loggers are restored afterwards,
    so that ``main`` called from a script or a notebook leaves their logging as it was."""
    level = logging.DEBUG if verbose else logging.WARNING if quiet else logging.INFO
    handler = logging.StreamHandler(sys.stderr)
    handler.setFormatter(MessageFormatter(stamped=not is_terminal(sys.stderr)))
    saved = []
    for name in LOGGERS:
        logger = logging.getLogger(name)
        saved.append((logger, logger.level, logger.propagate))
        logger.setLevel(level)
        logger.propagate = False  # shown once, here, even when the caller configured logging
        logger.addHandler(handler)
    try:
        yield
    finally:
        for logger, old_level, propagate in saved:
            logger.removeHandler(handler)
            logger.setLevel(old_level)
            logger.propagate = propagate


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
    diagram = diagram_for(scenario, progress=args.progress)
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


_CONSTANT = re.compile(r"\{(planner(?:\.\w+)*):(\w+(?:\.\w+)*)\}")
"""``{planner.module:NAME}`` in a help text: a default that lives in a planner module."""


def _constant_text(match: re.Match[str]) -> str:
    """The value of ``{planner.module:NAME}`` (or ``Model.field``, a scenario field's default)."""
    value = importlib.import_module(match.group(1))
    for name in match.group(2).split("."):
        fields = getattr(value, "model_fields", None)
        value = fields[name].default if fields and name in fields else getattr(value, name)
    return f"{value:g}" if isinstance(value, float) else str(value)


def _shows_no_default(default: object) -> bool:
    """Defaults argparse should not print: absent (None), a flag's False, a repeatable's []."""
    return default is None or default is False or default == [] or default == argparse.SUPPRESS


class HelpFormatter(argparse.ArgumentDefaultsHelpFormatter):
    """Help that states every option's default. A plain value is added by argparse as
    ``(default: VALUE)``; where the planner decides (the option's value is None until then), the
    help text says how in its own ``(default: ...)``, or ``(repeatable; default: ...)`` after
    another note. A ``{planner.module:NAME}`` in it is the constant NAME of that module, read
    only when help is shown: parsing imports nothing heavy, and the help never repeats a number
    kept elsewhere."""

    def _get_help_string(self, action: argparse.Action) -> str:
        text = _CONSTANT.sub(_constant_text, action.help or "")
        if re.search(r"(\(|; )default: ", text) or _shows_no_default(action.default):
            return text
        return f"{text} (default: %(default)s)"


def _add_verbosity(parser: argparse.ArgumentParser, *, top: bool) -> None:
    """``-q/--quiet`` and ``-v/--verbose``, before the command or after it. Only the top-level
    parser has defaults: a sub-command's would overwrite what was given before the command."""
    defaults = {} if top else {"default": argparse.SUPPRESS}
    group = parser.add_mutually_exclusive_group()
    group.add_argument(
        "-q",
        "--quiet",
        action="store_true",
        help="no progress and no notes (files written): only warnings and errors",
        **defaults,
    )
    group.add_argument(
        "-v", "--verbose", action="store_true", help="also debugging messages", **defaults
    )


def _add_scenario_file(parser: argparse.ArgumentParser) -> None:
    parser.add_argument("file", metavar="FILE", help="the scenario (TOML)")


def _add_json_and_html(parser: argparse.ArgumentParser, html: str) -> None:
    """``--json`` and ``--html OUT``, alike on every command that has them."""
    parser.add_argument(
        "--json", action="store_true", help="print one JSON object instead of the text summary"
    )
    parser.add_argument("--html", metavar="OUT", help=f"write {html}")


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="planner",
        description="Plan load-reduction paths that bring a hysteretic lake back to clear water.",
        epilog="Screening tool: defer to local regulations and licensed professionals.",
        formatter_class=HelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"%(prog)s {__version__}")
    _add_verbosity(parser, top=True)
    sub = parser.add_subparsers(
        dest="command",
        required=True,
        metavar="COMMAND",
        parser_class=partial(argparse.ArgumentParser, formatter_class=HelpFormatter),
    )
    p = sub.add_parser("check", help="validate a scenario file and summarise it")
    _add_scenario_file(p)
    sub.add_parser("schema", help="print the JSON Schema of scenario files (for editors)")
    p = sub.add_parser("diagram", help="equilibria, folds, thresholds and where the lake stands")
    _add_scenario_file(p)
    _add_json_and_html(p, "an HTML hysteresis diagram")
    for extend in EXTENSIONS:
        extend(sub)
    _add_force(sub)
    for command_parser in sub.choices.values():
        _add_verbosity(command_parser, top=False)
    return parser


# Later commands add their sub-parsers here (kept in their own functions below).
EXTENSIONS: list[Callable[[argparse._SubParsersAction], None]] = []


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.quiet and args.verbose:
        parser.error("-q/--quiet and -v/--verbose exclude each other; give one")
    with _messages_to_stderr(quiet=args.quiet, verbose=args.verbose):
        return _run(args)


def _run(args: argparse.Namespace) -> int:
    """Run the command; exit code and messages for what the user can fix, and for bugs."""
    try:
        _check_outputs(args)
        # The bar is closed (where it stands) before any error below is printed.
        args.progress = ProgressReport(args.command, quiet=args.quiet)
        with args.progress:
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
    comparison = compare(scenario, progress=args.progress)
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

    sweep = sweep_for(scenario, step=args.step, progress=args.progress)
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
    _add_scenario_file(p)
    _add_json_and_html(p, "the HTML briefing")
    p.add_argument("--csv", metavar="OUT", help="write the comparison table as CSV")
    p = sub.add_parser("sweep", help="dial the control slowly up and down; find the jumps")
    _add_scenario_file(p)
    p.add_argument(
        "--step",
        type=float,
        metavar="X",
        help="control step (default: the control range's width / {planner.sweep:DEFAULT_STEPS})",
    )
    _add_json_and_html(p, "an HTML figure of the loop")


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
        LOG.warning(
            "serving on %s, beyond this machine; requests naming hosts other than %s are refused "
            "(add names with --host-name).",
            args.host,
            ", ".join(allowed),
        )

    def ready(port: int) -> None:
        LOG.info("Lake recovery planner: http://%s:%s/ (Ctrl+C stops)", args.host, port)

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
    p.add_argument(
        "dir",
        nargs="?",
        metavar="DIR",
        help="folder of scenario files (default: the bundled demos)",
    )
    p.add_argument("--host", default="127.0.0.1", metavar="H", help="address to listen on")
    p.add_argument("--port", type=int, default=8050, metavar="P", help="port to listen on")
    p.add_argument(
        "--workers",
        type=int,
        metavar="N",
        help="worker processes (default: one per core, up to 4, on Linux; 1 elsewhere)",
    )
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
        progress=args.progress,
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
    from planner.search import FAMILY_KINDS, save_found, search, search_json, search_text

    scenario = load_scenario(args.file)
    result = search(
        scenario,
        relax_to=args.relax_to,
        by_year=args.by_year,
        families=args.family or FAMILY_KINDS,
        source=args.file,
        progress=args.progress,
    )
    print(json.dumps(search_json(result), indent=2) if args.json else search_text(result))
    if args.save_to:
        if result.cheapest is None:
            raise InputError([Problem(args.file, "schedules", "no admissible schedule to save")])
        _, saved = save_found(scenario, result.cheapest, args.save_to, overwrite=args.force)
        LOG.info("wrote %s with the schedule %r", args.save_to, saved.name)
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
    relax_to = (
        "control value after the hold (default: the relax_to of the first overshoot schedule "
        "inside the bistable window, else the window's middle)"
    )
    p = sub.add_parser("frontier", help="least hold below the recovery threshold, for each depth")
    _add_scenario_file(p)
    p.add_argument("--relax-to", type=float, metavar="X", help=relax_to)
    p.add_argument(
        "--depths",
        metavar="D1,D2,...",
        help="depths below the recovery threshold (default: {planner.frontier:DEFAULT_DEPTHS} "
        "depths spaced evenly in logarithm, from {planner.frontier:SMALLEST_DEPTH} of the control "
        "range's width to the deepest achievable cut)",
    )
    p.add_argument(
        "--hold-years",
        "--durations",
        dest="hold_years",
        metavar="Y1,Y2,...",
        help="holds at the floor (years): the least depth for each (--durations: old name)",
    )
    p.add_argument(
        "--family",
        choices=("overshoot", "staircase"),
        default="overshoot",
        help="the family of schedules whose frontier is drawn",
    )
    p.add_argument(
        "--start-year",
        type=float,
        default=0.0,
        metavar="Y",
        help="year the descent to the floor begins",
    )
    p.add_argument(
        "--ramp-years",
        type=float,
        metavar="R",
        help="years of each ramp, down and up; 0 for instant jumps (default: at the scenario's "
        "largest yearly change, or {planner.frontier:DEFAULT_RAMP_YEARS} yr each when it sets "
        "none)",
    )
    _add_json_and_html(p, "an HTML figure of the frontier")
    p = sub.add_parser("search", help="cheapest recovering schedule; money against time")
    _add_scenario_file(p)
    p.add_argument(
        "--by-year",
        type=float,
        metavar="Y",
        help="the target must be met by year Y (default: no deadline)",
    )
    p.add_argument("--relax-to", type=float, metavar="X", help=relax_to)
    p.add_argument(
        "--family",
        action="append",
        choices=("overshoot", "staircase"),
        help="a family of schedules to search (repeatable; default: every family)",
    )
    _add_json_and_html(p, "an HTML page with the figures")
    p.add_argument(
        "--save-to",
        metavar="NEW.toml",
        help="write the scenario plus the cheapest schedule (a new file)",
    )


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
        progress=args.progress,
    )
    print(json.dumps(fit_json(fit), indent=2) if args.json else fit_text(fit))
    if args.out:
        save_scenario(fit.fitted_scenario, args.out, overwrite=args.force)
        LOG.info("wrote %s (the fitted scenario). %s", args.out, fit.priors_note)
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


def _add_record_file(parser: argparse.ArgumentParser, columns: str) -> None:
    """The monitoring record and its time column, alike on every command that reads one."""
    parser.add_argument(
        "data",
        metavar="DATA.csv",
        help=f"monitoring CSV: {columns}; a column is named as in its header, with or without "
        'its unit (TP or "TP [g P / m2]")',
    )
    parser.add_argument(
        "--time-column", metavar="NAME", help="the time column (default: the first column)"
    )


def _monitoring_commands(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("fit", help="fit the model to a monitoring record; thresholds, intervals")
    _add_record_file(p, "time, load and observed columns")
    p.add_argument(
        "--scenario", required=True, metavar="BASE.toml", help="the model and the first guess"
    )
    p.add_argument(
        "--fit",
        metavar="P1,P2,...",
        help="parameters to fit, e.g. s,r,m (default: every parameter but the control and, in "
        "the built-in recycling models, the steepness q)",
    )
    p.add_argument("--out", metavar="FITTED.toml", help="write the fitted scenario (a new file)")
    p.add_argument("--log", action="store_true", help="fit the logarithms of the observations")
    p.add_argument(
        "--bootstrap",
        type=int,
        metavar="N",
        help="bootstrap replicates; 0 for none (default: {planner.calibration:DEFAULT_BOOTSTRAP})",
    )
    p.add_argument("--seed", type=int, default=0, metavar="S", help="seed of the bootstrap draws")
    p.add_argument(
        "--control-column",
        metavar="NAME",
        help="the load column (default: the one named like the control parameter, else "
        "{planner.calibration:DEFAULT_CONTROL_COLUMN})",
    )
    p.add_argument(
        "--state",
        action="append",
        metavar="VARIABLE=COLUMN",
        help="the column observing a model variable (repeatable; default: the column named like "
        "the variable, or the only data column left for the target variable)",
    )
    _add_json_and_html(p, "an HTML page with the figures")
    p = sub.add_parser("signals", help="early-warning indicators of one monitored series")
    _add_record_file(
        p, "time and one or more data columns of any real values (anomalies and logs too)"
    )
    p.add_argument("--column", metavar="NAME", help="the series (default: the only data column)")
    p.add_argument(
        "--window",
        type=float,
        metavar="F",
        help="share of the series in each rolling window "
        "(default: {planner.signals:DEFAULT_WINDOW})",
    )
    p.add_argument(
        "--bandwidth",
        type=float,
        metavar="YEARS",
        help="bandwidth of the Gaussian detrending kernel (default: "
        "{planner.signals:DEFAULT_BANDWIDTH_SHARE} of the record's length)",
    )
    p.add_argument(
        "--before",
        type=float,
        metavar="TIME",
        help="use only times before this (default: the whole record)",
    )
    _add_json_and_html(p, "an HTML page with the figures")


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
        progress=args.progress,
        source=args.file,
    )
    print(json.dumps(ensemble_json(ensemble), indent=2) if args.json else ensemble_text(ensemble))
    if args.html:
        _write(args, "html", ensemble_briefing(ensemble))
    return EXIT_OK


def _ensemble_command(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "ensemble", help="chance of recovery under uncertain parameters and noisy loads"
    )
    _add_scenario_file(p)
    p.add_argument(
        "--members",
        type=int,
        metavar="N",
        help="ensemble members (default: the scenario's [uncertainty] members, "
        "{planner.scenario.uncertainty:Uncertainty.members} when it sets none)",
    )
    p.add_argument(
        "--seed",
        type=int,
        metavar="S",
        help="seed of the random draws (default: the scenario's [uncertainty] seed, "
        "{planner.scenario.uncertainty:Uncertainty.seed} when it sets none)",
    )
    p.add_argument(
        "--scheduler",
        default="local",
        metavar="local|processes|tcp://HOST:PORT",
        help="where to run: local (this process), processes (2 local Dask worker processes) or "
        "the address of a running Dask scheduler",
    )
    p.add_argument(
        "--chunk",
        type=int,
        metavar="M",
        help="members simulated together, which bounds memory "
        "(default: {planner.ensemble:DEFAULT_CHUNK})",
    )
    _add_json_and_html(p, "an HTML page with the figures")


EXTENSIONS.append(_ensemble_command)


if __name__ == "__main__":
    sys.exit(main())
