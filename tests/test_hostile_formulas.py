"""Hostile formulas: each is refused with a FormulaError that says why, or accepted and then
compiles (Jacobians, Hessians, the engine's specialised functions) and evaluates; none hangs and
none raises anything else.

Fuzzing untrusted input this way is common practice, no source. The named cases are the ones
from the hardening report (towers of exp that hung `check` and `diagram`, sin(1e300*x),
look-alike letters) and their relatives. Formulas run in child processes: a hang inside C code
(an exact integer power, say) cannot be interrupted by a signal, but a child can be killed.
"""

from __future__ import annotations

import json
import os
import signal
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

FORMULA_SECONDS = 20
"""Hang detector for one formula (parse, compile, evaluate), far above the second or so that the
slowest accepted formula takes. Common practice, no source."""
BATCH_SECONDS = 300
"""Hang detector for a whole child process (also catches hangs inside C code), far above the
ten seconds or so that each batch takes. Common practice, no source."""
CLI_SECONDS = 120
"""Hang detector for one `planner` run (the report saw them killed at 150 s), far above the
second or two each takes. Common practice, no source."""
FUZZ_EXAMPLES = 60
"""Random trees per run: a few seconds of work; over many runs they meet the whole grammar."""

ROOT = Path(__file__).resolve().parent.parent
PARAMETERS = {"a": 0.3, "b": 0.5}
POINTS = ((0.7, 0.4), (-1.3, 2.0), (0.0, 0.0))
"""States (x, y) at which accepted formulas are evaluated: inside, outside and at the edge of
the domains of log and sqrt."""

ACCEPTED = None
"""Marks a harmless formula that must be accepted (and compile and evaluate)."""

HOSTILE: list[tuple[str, str | None]] = [
    # towers of exp and huge constants (the hardening report's first cases)
    ("max(exp(exp(exp(100))), x)", "the constant part 'exp(exp(100))' is too large"),
    ("exp(exp(exp(100))) - exp(exp(exp(99)))", "the constant part 'exp(exp(100))' is too large"),
    ("min(exp(exp(exp(100))), exp(exp(exp(99))), x)", "is too large (beyond 1e300"),
    ("exp(exp(exp(exp(1e300))))", "the constant part 'exp(1e300)' is too large"),
    ("9**9**9", "exponent 387420489 is too large"),
    ("((((9**9)**9)**9)**9)**9", "the power would produce a number outside"),
    ("(2*pi)**64**64", "is too large (the limit is |exponent| <= 64)"),
    ("10**64 * 10**64 * 10**64 * 10**64 * 10**64", "is too large (beyond 1e300"),
    ("1e300*x*1e300", "is too large (beyond 1e300"),
    ("1e-200*x*1e-200", "is too small (nonzero but below 1e-300"),
    ("1/(1e-300*1e-300)", "is too small"),
    ("exp(709)*x", "the constant part 'exp(709)' is too large"),
    ("cosh(1e3)", "the constant part 'cosh(1e3)' is too large"),
    ("sinh(-1e3) + x", "the constant part 'sinh(-1e3)' is too large"),
    ("exp(-1000) + x", "the constant part 'exp(-1000)' is too small"),
    ("1e308", "numbers must be finite and 0 or between 1e-300 and 1e300"),
    ("1e999 * x", "numbers must be finite"),
    ("1e-400 + x", "numbers must be finite"),
    ("x**1e300", "is too large (the limit is |exponent| <= 64)"),
    ("x**64 * x**64", "powers combine to an exponent of 128"),
    ("(x**8)**9", "nested powers combine to an exponent of 72"),
    ("((10**50)**4)**2", "the power would produce a number outside"),
    ("(1e200*x)**2", "the power would produce a number outside"),
    ("exp(690)*x", ACCEPTED),
    # arguments that make evaluation rounding noise or hopelessly stiff
    ("sin(1e300*x)", "the argument of sin multiplies a name by, or adds, a number of about 1e300"),
    ("cos(1e16*x)", "about 1e16 (the limit is 1e15)"),
    ("tanh(1e300*(x - 1))", "the argument of tanh"),
    ("exp(1e20*x)", "the argument of exp"),
    ("sin(x + 1e20)", "about 1e20"),
    ("sin(1e10*(1e10*x))", "about 1e20"),
    ("sin(x/1e-20)", "about 1e20"),
    ("sin(1e15*x)", ACCEPTED),
    ("sin(1e300)", ACCEPTED),
    # nesting and size
    ("exp(exp(exp(exp(x))))", "exponentials are nested 4 deep, more than 3"),
    ("x**x**x**x**x", "exponentials are nested 4 deep"),
    ("2**2**2**2**x", "exponentials are nested 4 deep"),
    ("exp(exp(exp(x)))", ACCEPTED),
    ("x**x**x", ACCEPTED),
    ("exp(" * 41 + "x" + ")" * 41, "nested too deeply (more than 40 levels of brackets)"),
    ("(" * 200 + "x" + ")" * 200, "nested too deeply"),
    ("-" * 100 + "x", "nested too deeply"),
    ("sin(" * 40 + "x" + ")" * 40, "too complex to differentiate"),
    ("sin(" * 20 + "x" + ")" * 20, ACCEPTED),
    ("*".join(f"(x+{i})" for i in range(70)), "too complex to differentiate"),
    ("/".join(f"(x+{i})" for i in range(40)), "too complex to differentiate"),
    ("*".join(f"(x*y+a*{i})" for i in range(25)), "too complex to differentiate"),
    ("+".join(["x"] * 250), ACCEPTED),
    ("x" + "+x" * 250, "formula is too long (501 characters; the limit is 500)"),
    ("+".join(f"sin({i}*x)" for i in range(1, 40)), ACCEPTED),
    ("max(x, " + ", ".join(f"y*{i}" for i in range(60)) + ")", ACCEPTED),
    # look-alike letters, invisible and control characters
    ("\uff58 + a", "'\uff58' (U+FF58 FULLWIDTH LATIN SMALL LETTER X, column 1) looks like 'x'"),
    ("\U0001d431 + a", "(U+1D431 MATHEMATICAL BOLD SMALL X, column 1) looks like 'x'"),
    ("a*\U0001d431", "looks like 'x'"),
    ("x\u200b + a", "invisible or non-ASCII space character (U+200B ZERO WIDTH SPACE, column 2)"),
    ("x\u200d+a", "(U+200D ZERO WIDTH JOINER, column 2)"),
    ("\ufeffx + a", "(U+FEFF ZERO WIDTH NO-BREAK SPACE, column 1)"),
    ("x\u00a0+ a", "(U+00A0 NO-BREAK SPACE, column 2)"),
    ("\u0430 + x", "(U+0430 CYRILLIC SMALL LETTER A, column 1) is not allowed"),
    ("x \u2212 a", "(U+2212 MINUS SIGN, column 3) is not allowed; type '-' instead"),
    ("x\u00b2", "(U+00B2 SUPERSCRIPT TWO, column 2) is not allowed; type '**2' instead"),
    ("\u212f**x", "(U+212F SCRIPT SMALL E, column 1) looks like 'e'"),
    ("x\x00", "a control character (U+0000, column 2)"),
    ("x\x1b[31m", "a control character (U+001B, column 2)"),
    # undefined and complex-valued
    ("1/(x-x)", "formula is undefined (division by zero)"),
    ("x/0.0", "formula is undefined (division by zero)"),
    ("0**-1", "formula is undefined (division by zero)"),
    ("log(0)", "formula is undefined"),
    ("log(x - x)", "formula is undefined"),
    ("sqrt(-1)", "complex-valued"),
    ("(-1)**0.5", "complex-valued"),
    ("log(-1)*x", "complex-valued"),
    ("(-2)**x", "a power with a variable exponent needs a positive base (got -2)"),
    ("0**x", "needs a positive base (got 0)"),
    ("exp(x)*exp(-x) - 1", ACCEPTED),
    ("x**0", ACCEPTED),
    # code instead of a formula
    ("__import__('os').system('true')", "attribute access is not allowed"),
    ("__import__('os')", "names starting with '_' are not allowed"),
    ("().__class__.__bases__[0]", "not allowed"),
    ("(lambda: 1)()", "only functions called by name are allowed"),
    ("exec('1')", "unknown function 'exec'"),
    ("x if x else 1e300**2", "conditional expressions"),
    # harmless formulas that used to compile badly or not at all
    ("max(x - 1, 0)*a + abs(x - b) - min(x, a, b)", ACCEPTED),
    ("abs(abs(x) - abs(y))**3 + max(x*y, a)**2", ACCEPTED),
    ("a - b*x + x**8/(1 + x**8)", ACCEPTED),
]


# --------------------------------------------------------------------------------------------
# what a child process does with one formula


def outcome(text: str) -> dict[str, object]:
    """Parse ``text`` as the right-hand side of x in a two-variable model, then compile and
    evaluate it when accepted. Returns {"outcome": "refused" | "accepted" | "crashed", ...}."""
    import numpy as np

    from planner.errors import FormulaError
    from planner.integrate.codegen import specialise
    from planner.models import compile_model, formula_spec

    try:
        spec = formula_spec({"x": text, "y": "a - b*y"}, tuple(PARAMETERS))
    except FormulaError as error:
        variable, reason = error.args
        return {"outcome": "refused", "field": variable, "message": reason}
    except Exception as error:  # anything else is the failure looked for
        return {"outcome": "crashed", "stage": "parse", "error": repr(error)[:500]}
    stage = "compile"
    # numpy scalars, not Python floats: 1e15**(a + 100) overflows to inf in numpy but raises
    # OverflowError in Python float arithmetic, which is the engine's to handle, not the parser's
    parameters = {name: np.float64(value) for name, value in PARAMETERS.items()}
    control = parameters["a"]
    try:
        system = compile_model(spec, "a").bind(parameters)
        stage = "evaluate"
        with np.errstate(all="ignore"):
            for point in POINTS:
                state = np.array(point)
                system.linearised(state, control)
                system.hessians(state, control)
                system.jac_u(state, control)
            batch = np.array(POINTS).T
            system.rhs(batch, control)
            stage = "specialise"
            functions, values = specialise(system)
            functions.batched_rhs(*batch, control, *values)
            functions.batched_jac(*batch, control, *values)
    except Exception as error:  # anything else is the failure looked for
        return {"outcome": "crashed", "stage": stage, "error": repr(error)[:500]}
    return {"outcome": "accepted"}


def _hang_alarm(signum: int, frame: object) -> None:
    raise TimeoutError(f"no answer within {FORMULA_SECONDS} s")


def guarded_outcome(text: str) -> dict[str, object]:
    """:func:`outcome` with a hang detector (SIGALRM; a child process runs one at a time)."""
    signal.signal(signal.SIGALRM, _hang_alarm)
    signal.alarm(FORMULA_SECONDS)
    try:
        return outcome(text)
    except TimeoutError as error:
        return {"outcome": "hung", "error": str(error)}
    finally:
        signal.alarm(0)


def _run_named(texts: list[str]) -> None:
    """Child: one JSON line per formula, preceded by a line naming it (for a killed child)."""
    for index, text in enumerate(texts):
        print(json.dumps({"start": index}), flush=True)
        print(json.dumps({"index": index, **guarded_outcome(text)}), flush=True)


# --------------------------------------------------------------------------------------------
# random expression trees of the allowed functions, with hostile constants


HOSTILE_NUMBERS = [
    "0",
    "1",
    "2",
    "0.5",
    "100",
    "709",
    "710",
    "1e15",
    "1e16",
    "1e100",
    "1e300",
    "1e-300",
    "1e-200",
    "9",
]
_leaves = st.sampled_from(["x", "y", "a", "b", "pi", *HOSTILE_NUMBERS])
_unary = st.sampled_from(["exp", "log", "sqrt", "tanh", "sinh", "cosh", "sin", "cos", "abs", "-"])


def _extend(children: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
    """One more level of the grammar: a function, an operator, or min/max of 2 to 4 parts."""
    unary = st.builds(lambda f, u: f"-({u})" if f == "-" else f"{f}({u})", _unary, children)
    binary = st.builds(
        lambda left, op, right: f"({left}){op}({right})",
        children,
        st.sampled_from(["+", "-", "*", "/", "**"]),
        children,
    )
    extreme = st.builds(
        lambda name, parts: f"{name}({', '.join(parts)})",
        st.sampled_from(["min", "max"]),
        st.lists(children, min_size=2, max_size=4),
    )
    return st.one_of(unary, binary, extreme)


hostile_trees = st.recursive(_leaves, _extend, max_leaves=12)


def _run_fuzz() -> None:
    """Child: random trees through :func:`guarded_outcome`; exits non-zero on a failure."""

    @settings(
        max_examples=FUZZ_EXAMPLES,
        deadline=None,
        database=None,
        suppress_health_check=[HealthCheck.too_slow],
    )
    @given(hostile_trees)
    def every_tree_is_refused_or_works(text: str) -> None:
        result = guarded_outcome(text)
        assert result["outcome"] in ("refused", "accepted"), (text, result)
        if result["outcome"] == "refused":
            assert result["field"] == "x" and result["message"], (text, result)

    every_tree_is_refused_or_works()
    print(json.dumps({"fuzz": "passed"}), flush=True)


# --------------------------------------------------------------------------------------------
# the tests (in the parent process)


def _child(mode: str) -> subprocess.Popen[str]:
    return subprocess.Popen(
        [sys.executable, __file__, mode],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        encoding="utf-8",
        cwd=ROOT,
        env={**os.environ, "PYTHONIOENCODING": "utf-8"},
    )


def _communicate(child: subprocess.Popen[str], stdin: str, texts: list[str]) -> tuple[str, str]:
    """Output of a child; on a hang, kill it and fail naming the formula it was working on."""
    try:
        return child.communicate(stdin, timeout=BATCH_SECONDS)
    except subprocess.TimeoutExpired:
        child.kill()
        out, err = child.communicate()
        started = [json.loads(line) for line in out.splitlines() if '"start"' in line]
        last = texts[started[-1]["start"]] if started and texts else "(unknown)"
        pytest.fail(f"no answer within {BATCH_SECONDS} s; working on {last!r}\n{err[-2000:]}")


def test_there_are_enough_hostile_cases() -> None:
    assert len(HOSTILE) >= 50
    assert sum(expected is not ACCEPTED for _, expected in HOSTILE) >= 50


def test_hostile_formulas_are_refused_or_work_and_none_hangs() -> None:
    """Each named formula: refused with a message holding the expected fragment (and naming
    the field x), or, when harmless, accepted and compiled and evaluated; never a hang or
    another exception. A second child runs random trees meanwhile (hypothesis)."""
    texts = [text for text, _ in HOSTILE]
    named = _child("named")
    fuzz = _child("fuzz")
    out, err = _communicate(named, json.dumps(texts), texts)
    fuzz_out, fuzz_err = _communicate(fuzz, "", [])
    assert named.returncode == 0, err[-3000:]
    results = {}
    for line in out.splitlines():
        record = json.loads(line)
        if "index" in record:
            results[record["index"]] = record
    assert sorted(results) == list(range(len(texts)))
    for index, (text, expected) in enumerate(HOSTILE):
        result = results[index]
        if expected is ACCEPTED:
            assert result["outcome"] == "accepted", (text, result)
        else:
            assert result["outcome"] == "refused", (text, result)
            assert result["field"] == "x", (text, result)
            assert expected in result["message"], (text, result["message"])
            assert "Traceback" not in result["message"]
    assert fuzz.returncode == 0, (fuzz_out[-3000:], fuzz_err[-3000:])
    assert '"fuzz": "passed"' in fuzz_out


# --------------------------------------------------------------------------------------------
# end to end: `planner check` on a scenario with a hostile formula


SEED = ROOT / "scenarios" / "alder-mere.toml"
"""A demo scenario whose built-in model is replaced by the user's formula for its variable P."""

CLI_CASES = [
    ("check", "max(exp(exp(exp(100))), P)", "the constant part 'exp(exp(100))' is too large"),
    ("diagram", "exp(exp(exp(100))) - exp(exp(exp(99)))", "is too large (beyond 1e300"),
    ("check", "L - s*P + 0.01*sin(1e300*P)", "the argument of sin multiplies a name by"),
    ("check", "L - s*\uff30 + r*P**q/(m**q + P**q)", "U+FF30 FULLWIDTH LATIN CAPITAL LETTER P"),
    ("check", "L - s*\U0001d40f + r*P**q/(m**q + P**q)", "U+1D40F MATHEMATICAL BOLD CAPITAL P"),
    ("check", "*".join(f"(P+{i})" for i in range(60)), "too complex to differentiate"),
    ("check", "L - s*P + r*P**q/(m**q + P**q)", None),  # valid: shows the run can exit 0
]


def _formula_scenario(formula: str) -> str:
    """The seed scenario as TOML text with ``formula`` as the right-hand side of P."""
    data = tomllib.loads(SEED.read_text(encoding="utf-8"))
    parameters = data["model"]["parameters"]
    data["model"] = {"kind": "formula", "equations": {"P": formula}, "parameters": parameters}
    return tomli_w.dumps(data)


def test_planner_check_refuses_hostile_formulas_naming_the_field(tmp_path: Path) -> None:
    """`python -m planner.cli check FILE` (and `diagram`, which hung in the report) exits 2 with
    `FILE: model.equations.P: reason` (exit codes: DESIGN.md section 5), within the hang
    detector; the valid file exits 0."""
    runs = []
    for number, (command, formula, expected) in enumerate(CLI_CASES):
        path = tmp_path / f"hostile{number}.toml"
        path.write_text(_formula_scenario(formula), encoding="utf-8")
        child = subprocess.Popen(
            [sys.executable, "-m", "planner.cli", command, str(path)],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            cwd=ROOT,
            env={**os.environ, "PYTHONIOENCODING": "utf-8"},
        )
        runs.append((child, path, formula, expected))
    for child, path, formula, expected in runs:
        try:
            out, err = (part.decode("utf-8") for part in child.communicate(timeout=CLI_SECONDS))
        except subprocess.TimeoutExpired:
            child.kill()
            child.communicate()
            pytest.fail(f"no answer within {CLI_SECONDS} s for {formula!r}")
        assert "Traceback" not in err, (formula, err[-2000:])
        if expected is None:
            assert child.returncode == 0, (formula, err[-2000:])
            continue
        assert child.returncode == 2, (formula, child.returncode, err[-2000:])
        lines = err.strip().splitlines()
        assert len(lines) == 1, (formula, lines)
        assert lines[0].startswith(f"{path}: model.equations.P: "), (formula, lines[0])
        assert expected in lines[0], (formula, lines[0])


def test_the_fuzz_grammar_reaches_accepted_and_refused_formulas() -> None:
    """The random trees are worth running only if both outcomes occur among them: hypothesis's
    find raises NoSuchExample when no tree of the grammar satisfies the condition."""
    from hypothesis import find

    from planner.errors import FormulaError
    from planner.models import formula_spec

    def accepted(text: str) -> bool:
        try:
            formula_spec({"x": text, "y": "a - y"}, ("a", "b"))
        except FormulaError:
            return False
        return True

    options = settings(database=None, max_examples=2000, deadline=None)
    assert "1e" in find(hostile_trees, lambda t: "1e" in t and accepted(t), settings=options)
    assert "x" in find(hostile_trees, lambda t: "x" in t and not accepted(t), settings=options)


if __name__ == "__main__":
    sys.path.insert(0, str(ROOT))
    if sys.argv[1:] == ["named"]:
        _run_named(json.loads(sys.stdin.read()))
    elif sys.argv[1:] == ["fuzz"]:
        _run_fuzz()
    else:
        raise SystemExit(f"usage: {sys.argv[0]} named|fuzz")
