"""The `planner` command: parse arguments, call the planner, print. No numerics here.

Exit codes: 0 success, 2 invalid input (each problem names file, field and reason), 1 internal
error (a bug: please report it with the traceback).
"""

from __future__ import annotations

import argparse
import json
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


def _write(path: str, text: str) -> None:
    target = Path(path)
    try:
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(text, encoding="utf-8")
    except OSError as error:
        raise InputError([Problem(path, "(output)", f"cannot write: {error.strerror}")]) from None
    print(f"wrote {target}", file=sys.stderr)


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
            args.html,
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
    return parser


# Later commands add their sub-parsers here (kept in their own functions below).
EXTENSIONS: list[Callable[[argparse._SubParsersAction], None]] = []


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    try:
        return COMMANDS[args.command](args)
    except InputError as error:
        for problem in error.problems:
            print(str(problem), file=sys.stderr)
        return EXIT_INPUT
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception:  # a bug: show it plainly
        traceback.print_exc()
        print("internal error: this is a bug in the planner, not in your input", file=sys.stderr)
        return EXIT_INTERNAL


if __name__ == "__main__":
    sys.exit(main())


@command("compare")
def _compare(args: argparse.Namespace) -> int:
    from planner.briefing import comparison_briefing
    from planner.outcomes import compare
    from planner.report import comparison_json, comparison_rows, comparison_text
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    comparison = compare(scenario, progress=_progress())
    if args.json:
        print(json.dumps(comparison_json(comparison), indent=2))
    else:
        print(comparison_text(comparison))
    if args.csv:
        import pandas as pd

        header, rows = comparison_rows(comparison)
        _write(args.csv, pd.DataFrame(rows, columns=list(header)).to_csv(index=False))
    if args.html:
        _write(args.html, comparison_briefing(comparison))
    return EXIT_OK


@command("sweep")
def _sweep(args: argparse.Namespace) -> int:
    from planner.briefing import Section, page
    from planner.equilibria import diagram_for
    from planner.figures import sweep_figure
    from planner.report import sweep_json, sweep_text
    from planner.scenario import load_scenario

    scenario = load_scenario(args.file)
    if args.step is not None and not args.step > 0:
        raise InputError([Problem("--step", "step", "must be a positive number")])
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
            args.html,
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
