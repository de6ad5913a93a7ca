"""Malformed scenario files: each one is refused with problems that name the file and a field,
or accepted as a usable scenario; never a traceback, never a hang.

Fuzzing user input this way is common practice, no source. The demo scenarios are the seeds;
each example mutates one of them (as data, then as TOML text) a few times.
"""

from __future__ import annotations

import copy
import datetime
import math
import random
import signal
import subprocess
import sys
import tomllib
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from pathlib import Path

import tomli_w
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from planner.errors import MAX_PROBLEMS, InputError
from planner.report import check_text
from planner.scenario import Scenario, parse_scenario, scenario_from_data, scenario_to_toml

ROOT = Path(__file__).resolve().parent.parent
DEMOS = sorted((ROOT / "scenarios").glob("*.toml"))
SEEDS = [tomllib.loads(path.read_text(encoding="utf-8")) for path in DEMOS]
SOURCE = "fuzz.toml"
LONGEST_MESSAGE = 1200  # characters of "file: field: reason"; a huge value must not be repeated
HANG_SECONDS = 60  # a hang detector only: one example takes well under a second
LONG = 900_000  # the length of the over-long values in the hardening report
PARALLEL = 4  # `planner check` processes at once


def _odd_value(rng: random.Random) -> object:
    """A value of the wrong type, or of the right type but absurd."""
    depth = rng.choice([2, 5, 13, 40])
    nested: object = 1.0
    for _ in range(depth):
        nested = [nested]
    choices: list[Callable[[], object]] = [
        lambda: rng.choice([True, False]),
        lambda: rng.choice(["", " ", "40", "true", "nan", "path", "L", "P", "é\u200b", "\x1b[31m"]),
        lambda: "x" * rng.choice([61, 5000, LONG]),
        lambda: [rng.choice([1.0, "a", True])] * rng.choice([0, 1, 2, 3, 600]),
        lambda: {rng.choice(["a", "kind", ""]): rng.choice([1, "x", []])},
        lambda: {},
        lambda: rng.choice([math.nan, math.inf, -math.inf, 1e308, -1e308, 5e-324]),
        lambda: rng.choice([-1, 0, -1.0, 0.0, 1, 2**63, 2**64, -(10**30), 10**400]),
        lambda: datetime.date(1979, 5, 27),
        lambda: nested,
    ]
    return rng.choice(choices)()


def _locations(node: object, prefix: tuple = ()) -> Iterator[tuple]:
    """Every location below the root of nested tables and lists."""
    if isinstance(node, dict):
        items = list(node.items())
    elif isinstance(node, list):
        items = list(enumerate(node))
    else:
        return
    for key, value in items:
        yield (*prefix, key)
        yield from _locations(value, (*prefix, key))


def _at(data: object, location: tuple) -> object:
    for key in location:
        data = data[key]  # type: ignore[index]
    return data


def _mutate(data: dict, rng: random.Random) -> None:
    """One random change to scenario data, in place."""
    locations = list(_locations(data))
    if not locations:
        return
    location = rng.choice(locations)
    parent = _at(data, location[:-1])
    action = rng.choice(
        ["delete", "replace", "replace", "unknown key", "kind", "duplicate", "nested", "blocks"]
    )
    if action == "delete":
        del parent[location[-1]]  # type: ignore[attr-defined]
    elif action == "replace":
        parent[location[-1]] = _odd_value(rng)  # type: ignore[index]
    elif action == "unknown key":
        tables = [loc for loc in [(), *locations] if isinstance(_at(data, loc), dict)]
        table = _at(data, rng.choice(tables))
        table[rng.choice(["horizn", "", "kind", "x" * 300, "schedule", "P", "a.b"])] = 1.0
    elif action == "kind":
        tagged = [loc for loc in locations if loc[-1] == "kind"]
        if tagged:
            kinds = ["path", "staircase", "overshoot", "formula", "recycling", "normal", "", "Path"]
            _at(data, rng.choice(tagged)[:-1])["kind"] = rng.choice([*kinds, 7, True, []])
    elif action == "duplicate":
        schedules = data.get("schedules")
        if isinstance(schedules, list) and schedules:
            copies = rng.choice([1, 1, 2, 150])
            for k in range(copies):
                twin = copy.deepcopy(rng.choice(schedules))
                if isinstance(twin, dict) and rng.random() < 0.5:
                    twin["name"] = f"copy {k}"
                schedules.append(twin)
    elif action == "nested":
        parent[location[-1]] = [[[_at(data, location)]]]  # type: ignore[index]
    else:  # a whole block of the wrong type
        block = rng.choice(["model", "control", "state", "target", "schedules", "uncertainty"])
        data[block] = rng.choice([[], {}, "x", 1.0, [{}], [[]]])


def _text_mutation(text: str, rng: random.Random) -> str:
    """A change only TOML text can carry: a byte-order mark, nesting too deep for the parser,
    an integer too long for Python, a cut-off file."""
    choice = rng.randrange(6)
    if choice == 0:
        return "\ufeff" + text
    if choice == 1:
        depth = rng.choice([20, 400, 3000])
        return f"deep = {'[' * depth}{']' * depth}\n{text}"
    if choice == 2:
        depth = rng.choice([20, 400, 3000])
        return f"deep = {'{a = ' * depth}1{' }' * depth}\n{text}"
    if choice == 3:
        return f"huge = {'9' * 5000}\n{text}"
    if choice == 4:
        return text[: rng.randrange(len(text) + 1)]
    return text


def malformed_case(rng: random.Random) -> tuple[dict, str]:
    """A demo scenario mutated one to four times: the data, and TOML text of it (sometimes
    changed further as text)."""
    data = copy.deepcopy(rng.choice(SEEDS))
    for _ in range(rng.randint(1, 4)):
        _mutate(data, rng)
    text = tomli_w.dumps(data)
    if rng.random() < 0.3:
        text = _text_mutation(text, rng)
    return data, text


@contextmanager
def _hang_detector(seconds: int) -> Iterator[None]:
    def _fail(signum, frame):
        raise TimeoutError(f"still running after {seconds} s: a hang")

    if not hasattr(signal, "SIGALRM"):  # not on Windows: run without the detector
        yield
        return
    previous = signal.signal(signal.SIGALRM, _fail)
    signal.alarm(seconds)
    try:
        yield
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)


def _has_boolean(node: object) -> bool:
    if isinstance(node, bool):
        return True
    if isinstance(node, dict):
        return any(_has_boolean(value) for value in node.values())
    if isinstance(node, list):
        return any(_has_boolean(value) for value in node)
    return False


def _outcome(validate: Callable[[], Scenario], data: dict | None = None) -> str:
    """Whether ``validate`` refused or accepted; fails the test on anything but an InputError
    or a usable scenario. No scenario field is a boolean, so ``data`` holding one is never
    accepted (in particular, no boolean passes for a number)."""
    try:
        with _hang_detector(HANG_SECONDS):
            scenario = validate()
    except InputError as error:
        assert 1 <= len(error.problems) <= MAX_PROBLEMS + 1
        for problem in error.problems:
            assert problem.source == SOURCE
            assert problem.field.strip(), problem
            assert problem.reason.strip(), problem
            assert len(str(problem)) <= LONGEST_MESSAGE, str(problem)[:LONGEST_MESSAGE]
            assert "\n" not in str(problem), problem
        return "refused"
    # accepted: what `planner check` prints works, and the scenario reads back as itself
    assert data is None or not _has_boolean(data)
    assert check_text(scenario, SOURCE).startswith(f"{SOURCE}: valid")
    assert parse_scenario(scenario_to_toml(scenario), SOURCE) == scenario
    return "accepted"


@settings(
    max_examples=500,
    deadline=None,
    database=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
)
@given(st.randoms(use_true_random=False))
def test_malformed_scenarios_are_refused_by_field(rng):
    """Common practice, no source: 500 mutated demos, as data and as TOML text."""
    data, text = malformed_case(rng)
    event(f"data {_outcome(lambda: scenario_from_data(data, SOURCE), data)}")
    event(f"text {_outcome(lambda: parse_scenario(text, SOURCE))}")


def test_the_mutations_reach_both_outcomes():
    """The fuzz test above means something only if its cases are mostly refused, and not all
    of them refused for one reason (common practice, no source)."""
    outcomes, fields = [], set()
    for seed in range(60):
        data, _ = malformed_case(random.Random(seed))
        try:
            scenario_from_data(data, SOURCE)
            outcomes.append("accepted")
        except InputError as error:
            outcomes.append("refused")
            fields |= {problem.field.split(".")[0] for problem in error.problems}
    assert outcomes.count("refused") >= 30
    assert len(fields) >= 6, fields


# --------------------------------------------------------------------------------------------
# the real command on a sample of files

ALDER = (ROOT / "scenarios" / "alder-mere.toml").read_text(encoding="utf-8")
NAMED_CASES = {
    "valid demo": ALDER,
    "byte-order mark": "\ufeff" + ALDER,
    "true as the horizon": ALDER.replace("horizon = 40.0", "horizon = true"),
    "text as the horizon": ALDER.replace("horizon = 40.0", 'horizon = "40"'),
    "horizon of 1e308 years": ALDER.replace("horizon = 40.0", "horizon = 1e308"),
    "array nested 5000 deep": ALDER.replace(
        "horizon = 40.0", f"horizon = {'[' * 5000}{']' * 5000}"
    ),
    "table nested 3000 deep": f"deep = {'{a = ' * 3000}1{' }' * 3000}\n{ALDER}",
    "integer of 5000 digits": ALDER.replace("P = 0.71", f"P = {'9' * 5000}"),
    "control of 900 KB": ALDER.replace('parameter = "L"', f'parameter = "{"L" * LONG}"'),
    "kind of 900 KB": ALDER.replace('kind = "path"', f'kind = "{"p" * LONG}"', 1),
    "key of 900 KB": ALDER.replace("horizon = 40.0", f"{'h' * LONG} = 1"),
    "not TOML": ALDER[:500],
    "empty file": "",
}


def test_check_command_exits_0_or_2_without_a_traceback(tmp_path):
    """`planner check` on 20 files (named hazards and random mutants): exit 0 (valid) or 2 (with
    `file: field: reason` lines), never 1 and never a traceback (DESIGN.md section 5 exit codes).
    """
    texts = dict(NAMED_CASES)
    for seed in range(20 - len(texts)):
        texts[f"mutant {seed}"] = malformed_case(random.Random(1000 + seed))[1]
    assert len(texts) == 20
    paths = {}
    for number, (name, text) in enumerate(texts.items()):
        paths[name] = tmp_path / f"case{number}.toml"
        paths[name].write_text(text, encoding="utf-8")
    names = list(texts)
    codes = {}
    for batch in range(0, len(names), PARALLEL):
        runs = {
            name: subprocess.Popen(
                [sys.executable, "-m", "planner.cli", "check", str(paths[name])],
                stdout=subprocess.PIPE,
                stderr=subprocess.PIPE,
            )
            for name in names[batch : batch + PARALLEL]
        }
        for name, run in runs.items():
            out, err = (part.decode() for part in run.communicate(timeout=120))  # hang detector
            codes[name] = run.returncode
            _check_run(name, paths[name], run.returncode, out, err)
    assert codes["valid demo"] == 0
    assert codes["byte-order mark"] == 0
    for name in NAMED_CASES:
        if name not in ("valid demo", "byte-order mark"):
            assert codes[name] == 2, name


def _check_run(name: str, path: Path, code: int, out: str, err: str) -> None:
    assert "Traceback" not in err, (name, err[-2000:])
    assert code in (0, 2), (name, code, err[-2000:])
    if code == 0:
        assert f"{path}: valid" in out, name
        return
    lines = err.splitlines()
    assert lines, name
    for line in lines:
        assert line.startswith(f"{path}: "), (name, line[:200])
        field, _, reason = line.removeprefix(f"{path}: ").partition(": ")
        assert field.strip() and reason.strip(), (name, line[:200])
        assert len(line) <= LONGEST_MESSAGE, (name, line[:200])
