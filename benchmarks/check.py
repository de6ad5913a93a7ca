"""Wall-clock time of `planner check FILE` on each demo, against the floor of any Python check.

Each figure is the median (and the best) of REPEAT runs of a fresh process (wall clock, and
the processor time the run took, which a busy shared machine hardly changes), as a user or an
editor plugin runs it: with Python's bytecode cache on, as for an installed package (kept in a
private temporary folder, so the tree is left as it is, and filled by one unmeasured run first;
a shell that sets PYTHONDONTWRITEBYTECODE would otherwise compile every module on every run).
The floor is a process that only imports tomllib and pydantic and reads and parses the file: no
checker written in Python can start faster. The target for `planner check` is 0.4 s.

Besides the bundled demos, two demos are checked with their model written as the user's
formulas (the same equations as the built-in kinds), which scenario validation checks without
sympy, and one formula the sympy-free check leaves to sympy (the square root of a product with
a numeric factor): that line shows what checking any formula model cost when validation built
the formulas with sympy.

Run: python benchmarks/check.py
"""

from __future__ import annotations

import os
import resource
import statistics
import subprocess
import sys
import tempfile
import time
import tomllib
from pathlib import Path

import tomli_w

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
TARGET = 0.4  # seconds
REPEAT = 9

FORMULA_MODELS = {
    "alder-mere.toml": {"P": "L - s*P + r*P**q/(m**q + P**q)"},
    "brellow-reservoir.toml": {
        "X": "L - (s + h)*X + r*M*X**q/(m**q + X**q)",
        "M": "s*X - b*M - r*M*X**q/(m**q + X**q)",
    },
}
"""Demos rewritten with their built-in model as formulas (Carpenter, Ludwig & Brock 1999;
Carpenter 2005)."""

SYMPY_FALLBACK = ("alder-mere.toml", {"P": "L - s*P + r*P**q/(m**q + P**q) - 0.001*sqrt(2*P)"})
"""A formula the sympy-free check does not decide, so validation builds it with sympy."""


def check_command(path: Path) -> list[str]:
    """The installed console script when there is one (what users run), else the module."""
    script = Path(sys.executable).with_name("planner")
    if script.exists():
        return [str(script), "check", str(path)]
    return [sys.executable, "-m", "planner.cli", "check", str(path)]


def floor_command(path: Path) -> list[str]:
    code = f"import tomllib, pydantic; tomllib.loads(open({str(path)!r}, encoding='utf-8').read())"
    return [sys.executable, "-c", code]


def cached_environment(cache: Path) -> dict[str, str]:
    """This process's environment with the bytecode cache on, written below ``cache``."""
    environment = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}
    return {**environment, "PYTHONPYCACHEPREFIX": str(cache)}


def run_times(command: list[str], environment: dict[str, str]) -> tuple[list[float], list[float]]:
    """Wall-clock and processor seconds (user plus system) of REPEAT runs of ``command``,
    after one unmeasured run. Processor time hardly depends on what else the machine runs."""
    walls, processor = [], []
    for run in range(REPEAT + 1):
        before = resource.getrusage(resource.RUSAGE_CHILDREN)
        start = time.perf_counter()
        subprocess.run(command, check=True, stdout=subprocess.DEVNULL, env=environment)
        wall = time.perf_counter() - start
        after = resource.getrusage(resource.RUSAGE_CHILDREN)
        if run:
            walls.append(wall)
            processor.append(after.ru_utime - before.ru_utime + after.ru_stime - before.ru_stime)
    return walls, processor


def formula_scenario(folder: Path, demo: str, equations: dict[str, str], label: str) -> Path:
    """The demo ``demo`` with its model replaced by ``equations`` (same parameters)."""
    data = tomllib.loads((SCENARIOS / demo).read_text(encoding="utf-8"))
    parameters = data["model"]["parameters"]
    data["model"] = {"kind": "formula", "equations": equations, "parameters": parameters}
    path = folder / f"{Path(demo).stem}-{label}.toml"
    path.write_text(tomli_w.dumps(data), encoding="utf-8")
    return path


def report(name: str, path: Path, environment: dict[str, str], with_target: bool = True) -> None:
    check, processor = run_times(check_command(path), environment)
    floor = statistics.median(run_times(floor_command(path), environment)[0])
    median = statistics.median(check)
    verdict = ("met" if median < TARGET else "MISSED") if with_target else "-"
    print(
        f"{name:<38}{median:>8.3f}{min(check):>8.3f}{statistics.median(processor):>8.3f}"
        f"{floor:>8.3f}{median / floor:>8.1f}x{verdict:>8}"
    )


def main() -> None:
    print(f"`planner check`, {REPEAT} fresh processes each; target: median < {TARGET:.2f} s")
    print(
        f"{'scenario':<38}{'median':>8}{'best':>8}{'cpu':>8}{'floor':>8}{'ratio':>9}{'target':>8}"
    )
    with tempfile.TemporaryDirectory() as folder:
        environment = cached_environment(Path(folder) / "bytecode")
        for path in sorted(SCENARIOS.glob("*.toml")):
            report(path.name, path, environment)
        for demo, equations in FORMULA_MODELS.items():
            path = formula_scenario(Path(folder), demo, equations, "formula")
            report(f"{path.stem} (formulas)", path, environment)
        demo, equations = SYMPY_FALLBACK
        path = formula_scenario(Path(folder), demo, equations, "fallback")
        report(f"{path.stem} (sympy build)", path, environment, with_target=False)
    print("seconds: median and best wall clock of the whole process, median processor time")
    print(
        "(user + system: what the run costs whatever else the machine does); ratio = median / floor"
    )
    print(f"load average while measuring: {os.getloadavg()[0]:.1f} on {os.cpu_count()} cores")
    print("floor: python -c 'import tomllib, pydantic' plus reading and parsing the file")
    print("sympy build: a formula left to sympy, as every formula model was checked before")


if __name__ == "__main__":
    main()
