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
from typing import Any

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


OUTPUT_OPTIONS = ("html", "pdf", "csv", "figure", "parquet", "members_parquet", "out", "save_to")
"""Options that name a file to write: checked before the work starts, never silently
replaced (``--force`` replaces them)."""
PARQUET_OPTIONS = ("parquet", "members_parquet")


def _write(args: argparse.Namespace, option: str, content: str | bytes) -> None:
    """Write the file named by ``option`` atomically; an existing one only with --force."""
    from planner.textfiles import write_user_text

    path = getattr(args, option)
    write_user_text(path, content, overwrite=args.force)
    LOG.info("wrote %s", path)


def _write_page(args: argparse.Namespace, text: str) -> None:
    """``--html`` and ``--pdf``: the page, and the same page printed by the system Chromium."""
    if args.html:
        _write(args, "html", text)
    if args.pdf:
        from planner.briefing import print_pdf

        _write(args, "pdf", print_pdf(text))


def _check_outputs(args: argparse.Namespace) -> None:
    """Every output file asked for can be written, before any work (a long fit or search would
    otherwise fail only at its end): its folder, an existing file without --force, and for an
    image or a Parquet table its format and the libraries that write it."""
    from planner.textfiles import check_output

    for option in OUTPUT_OPTIONS:
        path = getattr(args, option, None)
        if path:
            name = "--" + option.replace("_", "-")
            _check_format(path, option, name)
            check_output(path, name, overwrite=args.force)


def _check_format(path: str, option: str, name: str) -> None:
    """An image's suffix (.png, .svg, .pdf) and kaleido with its Chromium; pyarrow for Parquet:
    else an InputError naming the file and the option."""
    from planner import api

    if option == "figure":
        try:
            api.image_format(path)
        except ValueError as error:
            raise InputError([Problem(path, name, str(error))]) from None
        missing = api.image_export_missing()
    elif option in PARQUET_OPTIONS:
        missing = api.parquet_missing()
    elif option == "pdf":
        from planner.briefing import pdf_printer_missing

        missing = pdf_printer_missing()
    else:
        return
    if missing:
        raise InputError([Problem(path, name, missing)])


def _export(args: argparse.Namespace, result: Any, figure: Any = None) -> None:
    """``--figure`` and ``--parquet``: the result's figure (``figure`` when drawn already) as
    an image, its table (``to_frame()``) as Parquet; ``--members-parquet``: its members' table
    (``to_frame("members")``)."""
    from planner import api

    if getattr(args, "figure", None):
        drawn = result.figure() if figure is None else figure
        _write(args, "figure", api.figure_image(drawn, api.image_format(args.figure)))
    if getattr(args, "parquet", None):
        _write(args, "parquet", api.frame_parquet(result.to_frame()))
    if getattr(args, "members_parquet", None):
        _write(args, "members_parquet", api.frame_parquet(result.to_frame("members")))


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
    from planner import api
    from planner.report import check_text

    print(check_text(api.load(args.file), args.file))
    return EXIT_OK


@command("schema")
def _schema(args: argparse.Namespace) -> int:
    from planner.scenario import json_schema

    print(json.dumps(json_schema(), indent=2))
    return EXIT_OK


@command("diagram")
def _diagram(args: argparse.Namespace) -> int:
    from planner import api
    from planner.briefing import diagram_briefing
    from planner.report import diagram_json, diagram_text

    found = api.diagram(args.file, progress=args.progress)
    scenario, diagram, standing = found.scenario, found.diagram, found.standing
    if args.json:
        print(json.dumps(diagram_json(scenario, diagram, standing), indent=2))
    else:
        print(diagram_text(scenario, diagram, standing))
    if args.html or args.pdf:
        _write_page(args, diagram_briefing(scenario, diagram, standing, source=args.file))
    _export(args, found)
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


NOT_WRITTEN = "(default: not written)"


def _add_outputs(
    parser: argparse.ArgumentParser,
    *,
    html: str,
    figure: str,
    table: str,
    csv: bool = False,
) -> None:
    """The output options, spelled and described alike on every command that has them:
    ``--json``, ``--html OUT``, ``--csv OUT`` (where the table has a CSV), ``--parquet OUT``
    (the command's table: its result's ``to_frame()``) and ``--figure OUT`` (its result's
    ``figure()``). Files are checked before any work and replaced only with ``--force``."""
    parser.add_argument(
        "--json", action="store_true", help="print one JSON object instead of the text summary"
    )
    parser.add_argument("--html", metavar="OUT", help=f"write {html} {NOT_WRITTEN}")
    parser.add_argument(
        "--pdf",
        metavar="OUT",
        help=f"write the --html page as a PDF, printed by the system Chromium {NOT_WRITTEN}",
    )
    if csv:
        parser.add_argument("--csv", metavar="OUT", help=f"write {table} as CSV {NOT_WRITTEN}")
    _add_parquet(parser, "--parquet", table)
    parser.add_argument(
        "--figure",
        metavar="OUT",
        help=f"write {figure} as an image: PNG, SVG or PDF by OUT's suffix (needs the export "
        f"extra and Chromium) {NOT_WRITTEN}",
    )


def _add_parquet(parser: argparse.ArgumentParser, option: str, table: str) -> None:
    parser.add_argument(
        option,
        metavar="OUT",
        help=f"write {table} as Parquet, each column typed (needs the export extra) {NOT_WRITTEN}",
    )


def _add_seed(parser: argparse.ArgumentParser, draws: str, **default: Any) -> None:
    """``--seed S``, alike on every command that draws random numbers; ``draws`` says which
    and, when the default is not a plain value, where it comes from."""
    parser.add_argument(
        "--seed", type=int, metavar="S", help=f"seed of the random draws: {draws}", **default
    )


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
    _add_outputs(
        p,
        html="an HTML hysteresis diagram",
        figure="the hysteresis diagram",
        table="the equilibrium curve (a row per point)",
    )
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
    from planner import api
    from planner.briefing import comparison_briefing
    from planner.report import comparison_json, comparison_rows, comparison_text, table_csv

    comparison = api.compare(args.file, progress=args.progress)
    if args.json:
        print(json.dumps(comparison_json(comparison), indent=2))
    else:
        print(comparison_text(comparison))
    if args.csv:
        _write(args, "csv", table_csv(*comparison_rows(comparison)))
    if args.html or args.pdf:
        _write_page(args, comparison_briefing(comparison, source=args.file))
    _export(args, comparison)
    return EXIT_OK


@command("sweep")
def _sweep(args: argparse.Namespace) -> int:
    from planner import api
    from planner.briefing import sweep_briefing
    from planner.report import sweep_json, sweep_text

    swept = api.hysteresis_sweep(
        args.file, step=args.step, step_name="--step", progress=args.progress
    )
    scenario, sweep = swept.scenario, swept.sweep
    print(
        json.dumps(sweep_json(scenario, sweep), indent=2)
        if args.json
        else sweep_text(scenario, sweep)
    )
    if args.html or args.pdf:
        _write_page(args, sweep_briefing(scenario, sweep, source=args.file))
    _export(args, swept)
    return EXIT_OK


def _more_commands(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("compare", help="run every schedule: verdicts, metrics, costs, briefing")
    _add_scenario_file(p)
    _add_outputs(
        p,
        html="the HTML briefing",
        figure="the schedules on the equilibrium curve",
        table="the comparison table (a row per schedule)",
        csv=True,
    )
    p = sub.add_parser("sweep", help="dial the control slowly up and down; find the jumps")
    _add_scenario_file(p)
    p.add_argument(
        "--step",
        type=float,
        metavar="X",
        help="control step (default: the control range's width / {planner.sweep:DEFAULT_STEPS})",
    )
    _add_outputs(
        p,
        html="an HTML figure of the loop",
        figure="the loop",
        table="the sweep (a row per step, up and down)",
    )


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
    from planner import api
    from planner.briefing import frontier_briefing
    from planner.frontier import frontier_json, frontier_text

    depths = _number_list(args.depths, "--depths")
    holds = _number_list(args.hold_years, "--hold-years")
    scenario = api.load(args.file)
    frontier = api.overshoot_frontier(
        scenario,
        relax_to=args.relax_to,
        depths=depths,
        hold_years=holds,
        family=args.family,
        start_year=args.start_year,
        ramp_years=args.ramp_years,
        source=args.file,
        progress=args.progress,
    )
    print(json.dumps(frontier_json(frontier), indent=2) if args.json else frontier_text(frontier))
    if args.html or args.pdf:
        _write_page(args, frontier_briefing(scenario, frontier, source=args.file))
    _export(args, frontier)
    return EXIT_OK


@command("search")
def _search(args: argparse.Namespace) -> int:
    from planner import api
    from planner.briefing import search_briefing
    from planner.search import save_found, search_json, search_text

    found = api.cheapest_schedule(
        args.file,
        relax_to=args.relax_to,
        by_year=args.by_year,
        families=args.family,
        progress=args.progress,
    )
    scenario, result = found.scenario, found.result
    print(json.dumps(search_json(result), indent=2) if args.json else search_text(result))
    if args.save_to:
        if result.cheapest is None:
            raise InputError([Problem(args.file, "schedules", "no admissible schedule to save")])
        _, saved = save_found(scenario, result.cheapest, args.save_to, overwrite=args.force)
        LOG.info("wrote %s with the schedule %r", args.save_to, saved.name)
    if args.html or args.pdf:
        frontier = api.overshoot_frontier(scenario, relax_to=result.relax_to, source=args.file)
        _write_page(args, search_briefing(scenario, result, frontier, source=args.file))
    _export(args, found)
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
    _add_outputs(
        p,
        html="an HTML figure of the frontier",
        figure="the frontier",
        table="the frontier table (a row per depth)",
    )
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
    _add_outputs(
        p,
        html="an HTML page with the figures",
        figure="money against time (the cost / time Pareto front)",
        table="every schedule tried (a row each)",
    )
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
    from planner import api
    from planner.briefing import fit_briefing
    from planner.calibration import fit_json, fit_text
    from planner.scenario import save_scenario

    states = _assignments(args.state, "--state")
    fit = api.fit(
        args.data,
        args.scenario,
        time_column=args.time_column,
        control_column=args.control_column,
        states=states,
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
    if args.html or args.pdf:
        _write_page(args, fit_briefing(fit, source=args.scenario))
    _export(args, fit)
    return EXIT_OK


@command("signals")
def _signals(args: argparse.Namespace) -> int:
    from planner import api
    from planner.briefing import Section, page
    from planner.signals import signals_json, signals_text

    signals = api.early_warnings(
        args.data,
        args.column,
        time_column=args.time_column,
        window=args.window,
        bandwidth=args.bandwidth,
        before=args.before,
    )
    print(json.dumps(signals_json(signals), indent=2) if args.json else signals_text(signals))
    figure = signals.figure() if args.html or args.pdf or args.figure else None
    if args.html or args.pdf:
        _write_page(
            args,
            page(
                f"Early-warning indicators: {args.data}",
                [
                    Section("Indicators", figure=figure),
                    Section("Summary", text=signals_text(signals, caution=False)),
                ],
            ),
        )
    _export(args, signals, figure)
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
    _add_seed(p, "the bootstrap's resampling", default=0)
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
    _add_outputs(
        p,
        html="an HTML page with the figures",
        figure="the record and the fitted model",
        table="the fitted values and their intervals (a row per parameter, state, threshold)",
    )
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
    _add_outputs(
        p,
        html="an HTML page with the figures",
        figure="the indicators",
        table="the series, its trend and the indicators (a row per time)",
    )


EXTENSIONS.append(_monitoring_commands)


@command("ensemble")
def _ensemble(args: argparse.Namespace) -> int:
    from planner import api
    from planner.ensemble_report import ensemble_briefing, ensemble_json, ensemble_text

    ensemble = api.chance_of_recovery(
        args.file,
        members=args.members,
        seed=args.seed,
        scheduler=args.scheduler,
        chunk_size=args.chunk,
        progress=args.progress,
    )
    print(json.dumps(ensemble_json(ensemble), indent=2) if args.json else ensemble_text(ensemble))
    if args.html or args.pdf:
        _write_page(args, ensemble_briefing(ensemble, source=args.file))
    _export(args, ensemble)
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
    _add_seed(
        p,
        "the members' parameters, loads and noise (default: the scenario's [uncertainty] "
        "seed, {planner.scenario.uncertainty:Uncertainty.seed} when it sets none)",
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
    _add_outputs(
        p,
        html="an HTML page with the figures",
        figure="the chance of meeting the target by each year",
        table="the summary (a row per schedule)",
    )
    _add_parquet(
        p,
        "--members-parquet",
        "every member's drawn parameters and outcome (a row per member and schedule)",
    )


EXTENSIONS.append(_ensemble_command)


@command("demos")
def _demos(args: argparse.Namespace) -> int:
    from planner.demos import copy_demos, demo_folder, demo_names, demo_path
    from planner.scenario import load_scenario

    if args.copy_to:  # every target is checked before the first is written
        for path in copy_demos(args.copy_to, overwrite=args.force):
            LOG.info("wrote %s", path)
    names = demo_names()
    width = max(map(len, names), default=0)
    for name in names:
        print(f"{name:<{width}}  {load_scenario(demo_path(name)).name}")
    if not args.copy_to:
        LOG.info("in %s (copy them for editing with --copy-to DIR)", demo_folder())
    return EXIT_OK


def _demos_command(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demos", help="list the bundled demo scenarios; copy them for editing")
    p.add_argument(
        "--copy-to",
        metavar="DIR",
        help="copy the demos and their monitoring record into DIR, created if its parent "
        "exists (default: not copied, only listed)",
    )
    p.add_argument(
        "--force",
        action="store_true",
        help="replace output files that exist already (default: keep them and stop)",
    )


EXTENSIONS.append(_demos_command)


if __name__ == "__main__":
    sys.exit(main())
