"""Wall-clock time of `planner check FILE` on each demo, against the floor of any Python check.

Each figure is the best of 5 runs of a fresh process, as a user or an editor plugin runs it.
The floor is a process that only imports tomllib and pydantic and reads and parses the file:
no checker written in Python can start faster. The target for `planner check` is 0.4 s.

Run: python benchmarks/check.py
"""

from __future__ import annotations

import subprocess
import sys
import time
from pathlib import Path

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
TARGET = 0.4  # seconds
REPEAT = 5


def check_command(path: Path) -> list[str]:
    """The installed console script when there is one (what users run), else the module."""
    script = Path(sys.executable).with_name("planner")
    if script.exists():
        return [str(script), "check", str(path)]
    return [sys.executable, "-m", "planner.cli", "check", str(path)]


def floor_command(path: Path) -> list[str]:
    code = f"import tomllib, pydantic; tomllib.loads(open({str(path)!r}, encoding='utf-8').read())"
    return [sys.executable, "-c", code]


def best_wall_time(command: list[str], repeat: int = REPEAT) -> float:
    best = float("inf")
    for _ in range(repeat):
        start = time.perf_counter()
        subprocess.run(command, check=True, stdout=subprocess.DEVNULL)
        best = min(best, time.perf_counter() - start)
    return best


def main() -> None:
    print(f"`planner check`, best of {REPEAT} fresh processes; target < {TARGET:.2f} s")
    print(f"{'scenario':<26}{'check (s)':>11}{'floor (s)':>11}{'check / floor':>15}{'target':>8}")
    for path in sorted(SCENARIOS.glob("*.toml")):
        check = best_wall_time(check_command(path))
        floor = best_wall_time(floor_command(path))
        verdict = "met" if check < TARGET else "MISSED"
        print(f"{path.name:<26}{check:>11.3f}{floor:>11.3f}{check / floor:>14.1f}x{verdict:>8}")
    print("floor: python -c 'import tomllib, pydantic' plus reading and parsing the file")


if __name__ == "__main__":
    main()
