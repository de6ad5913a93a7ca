"""The sympy-free check of user formulas agrees with the sympy build, formula by formula.

`planner check` validates formula models with :func:`planner.models.formula.check_formula`,
which rebuilds the expressions with light Python objects instead of importing sympy. The
reference is sympy itself (SymPy Development Team, SymPy 1.14, the computer algebra library;
https://www.sympy.org): :func:`planner.models.formula.parse_formula` builds each formula with
sympy, whose automatic simplification decides what is refused (``1/(x - x)`` divides by zero
only because sympy cancels ``x - x``; ``x**40*x**40`` merges into an exponent of 80). Every test
here runs both on the same text and demands the same verdict, the same message (and, for
models, the same field), and for accepted formulas the same expression tree node for node.
Where the light algebra does not model sympy's result it says so (UndecidedError) and the
validator falls back on sympy; those cases are counted and must stay rare.
"""

from __future__ import annotations

import inspect
import json
import os
import subprocess
import sys
import tomllib
from collections import Counter
from pathlib import Path
from typing import Any

import pytest
import sympy
import test_formula_parser as parser_tests
import test_hostile_formulas as hostile_tests
import tomli_w
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from planner.errors import FormulaError
from planner.models.formula import (
    UndecidedError,
    check_equations,
    check_formula,
    parse_formula,
    read_equations,
)
from planner.models.library import formula_spec

ROOT = Path(__file__).resolve().parent.parent
PARSER_NAMES = parser_tests.NAMES
"""The names test_formula_parser.py declares (every one differentiated, as there)."""
MODEL_PARAMETERS = tuple(hostile_tests.PARAMETERS)
"""The parameters of the two-variable model test_hostile_formulas.py puts each formula in."""
RANDOM_EXAMPLES = 400
"""Random formulas per run (several seconds of sympy builds); each run draws new ones."""
MOST_UNDECIDED = 0.05
"""Largest share of random formulas the light algebra may leave to sympy. The grammar below
is built to hit its gaps (roots of products with a numeric factor); on the demo and test
formulas the share is zero. Common practice, no source."""


# --------------------------------------------------------------------------------------------
# what each side makes of a formula


def canonical(expr: Any) -> tuple:
    """An expression tree of either algebra as nested tuples, the arguments of sums and
    products sorted: equal exactly when the two trees have the same shape and numbers (a
    float is compared by its binary digits, and never equals an integer)."""
    if expr.is_Symbol:
        return ("symbol", expr.name)
    if expr.is_Integer:
        return ("integer", int(expr.p))
    if expr.is_Rational:
        return ("rational", int(expr.p), int(expr.q))
    if expr.is_Float:
        sign, mantissa, exponent, bits = expr._mpf_
        return ("float", int(sign), int(mantissa), int(exponent), int(bits))
    parts = [canonical(arg) for arg in expr.args]
    if expr.is_Add or expr.is_Mul:
        return ("add" if expr.is_Add else "mul", tuple(sorted(parts, key=repr)))
    if expr.is_Pow:
        return ("pow", *parts)
    return ("call", expr.display, *parts)


def sympy_outcome(text: object, names: tuple[str, ...], states: tuple[str, ...] | None) -> tuple:
    """What the sympy build (the reference) makes of one formula."""
    symbols = {name: sympy.Symbol(name) for name in names}
    try:
        return ("accepted", canonical(parse_formula(text, symbols, states)))  # type: ignore[arg-type]
    except FormulaError as refusal:
        return ("refused", str(refusal))


def light_outcome(text: object, names: tuple[str, ...], states: tuple[str, ...] | None) -> tuple:
    """What the sympy-free check makes of it, without falling back on sympy."""
    try:
        return ("accepted", canonical(check_formula(text, names, states)))  # type: ignore[arg-type]
    except FormulaError as refusal:
        return ("refused", str(refusal))
    except UndecidedError:
        return ("undecided", None)


def model_outcome(equations: dict[str, str], parameters: tuple[str, ...], side: str) -> object:
    """(variable, reason) of the first refused equation of a model, or None when all pass:
    ``sympy`` builds the spec as the model library does; ``light`` runs the check without
    fallback; ``validator`` runs what scenario validation runs (with the fallback)."""
    variables = tuple(equations)
    names = (*variables, *parameters)
    try:
        if side == "sympy":
            formula_spec(equations, parameters)
        elif side == "light":
            read_equations(equations, lambda text: check_formula(text, names, variables))
        else:
            check_equations(equations, parameters)
    except FormulaError as refusal:
        return refusal.args
    except UndecidedError:
        return "undecided"
    return None


# --------------------------------------------------------------------------------------------
# every formula of the two formula test files


def _parametrized_texts(module: Any) -> list[object]:
    """The first value of every parameter set of every test of ``module`` whose first
    parameter is ``text`` (or ``value``, the non-text input)."""
    texts = []
    for _, function in inspect.getmembers(module, inspect.isfunction):
        for mark in getattr(function, "pytestmark", []):
            if mark.name != "parametrize":
                continue
            argnames = mark.args[0]
            first = argnames[0] if isinstance(argnames, (tuple, list)) else argnames.split(",")[0]
            if first.strip() in ("text", "value"):
                texts += [case[0] if isinstance(case, tuple) else case for case in mark.args[1]]
    return texts


def _inline_parser_texts() -> list[str]:
    """Formulas test_formula_parser.py writes inside its test bodies."""
    from planner.models.formula import MAX_ARGUMENT_SCALE, MAX_DEPTH, MAX_EXPONENT

    nesting = "exp(" * 3 + "x" + ")" * 3
    return [
        "3 + x",
        "0.25",
        "1/3",
        "a*x",
        "+".join(["x"] * (MAX_DEPTH * 3)),
        "*".join(["x"] * 60),
        "x" + "+x" * 249,
        "_x + 1",
        "x",
        f"x**{MAX_EXPONENT}",
        f"x**-{MAX_EXPONENT}",
        f"sin({MAX_ARGUMENT_SCALE:.0e}*x)",
        f"sin({MAX_ARGUMENT_SCALE * 10:.0e}*x)",
        nesting,
        f"exp({nesting})",
        "\uff58 + 1",
        "\U0001d431 + 1",
        "(1/3)**2 + x",
        "abs(x - a) + max(x*y, a)**2 - min(x, y, b)",
        "*".join(f"(x + {i})" for i in range(6)),
        "*".join(f"(x + {i})" for i in range(40)),
        "x + " + "*".join(f"(a + {i})" for i in range(25)),
        "x + pi",
    ]


def _once(values: list[object]) -> list[object]:
    """``values`` without repeats (some are lists, so compared by repr)."""
    return list({repr(value): value for value in values}.values())


NAMED_FORMULAS: list[object] = _once(
    [
        *(text for text, _ in hostile_tests.HOSTILE),
        *_parametrized_texts(parser_tests),
        *parser_tests.DIFFERENTIATED,
        *(text for text, _ in parser_tests.FUNCTION_FORMULAS),
        *_inline_parser_texts(),
    ]
)
"""Every formula of tests/test_hostile_formulas.py and tests/test_formula_parser.py (and the
non-text values the parser must refuse)."""


def test_the_named_formulas_are_collected() -> None:
    assert len(NAMED_FORMULAS) >= 200
    assert "9**9**9" in NAMED_FORMULAS and "1/(x-x)" in NAMED_FORMULAS and None in NAMED_FORMULAS


@pytest.mark.parametrize("text", NAMED_FORMULAS, ids=range(len(NAMED_FORMULAS)))
@pytest.mark.parametrize("states", [None, ("x", "y")], ids=["all-states", "x-y-states"])
def test_named_formulas_get_the_verdict_and_message_sympy_gives(text: object, states) -> None:
    """reference: sympy 1.14 through parse_formula. Same verdict, same message, same tree; the
    light algebra decides every one of these itself."""
    expected = sympy_outcome(text, PARSER_NAMES, states)
    got = light_outcome(text, PARSER_NAMES, states)
    assert got == expected, text


@pytest.mark.parametrize("text", [text for text, _ in hostile_tests.HOSTILE])
def test_hostile_models_fail_on_the_same_field_for_the_same_reason(text: str) -> None:
    """reference: sympy 1.14 through the model library (formula_spec), on the two-variable
    model of test_hostile_formulas.py, with the formula first and second."""
    for equations in ({"x": text, "y": "a - b*y"}, {"y": "a - b*y", "x": text}):
        expected = model_outcome(equations, MODEL_PARAMETERS, "sympy")
        assert model_outcome(equations, MODEL_PARAMETERS, "light") == expected, text
        assert model_outcome(equations, MODEL_PARAMETERS, "validator") == expected, text


@pytest.mark.parametrize("formula", [formula for _, formula, _ in hostile_tests.CLI_CASES])
def test_demo_formulas_of_the_check_command_agree(formula: str) -> None:
    """reference: sympy 1.14; the formulas `planner check` is run on in test_hostile_formulas.py,
    in the demo's parameters."""
    parameters = ("L", "s", "r", "m", "q")
    equations = {"P": formula}
    expected = model_outcome(equations, parameters, "sympy")
    assert model_outcome(equations, parameters, "light") == expected


# --------------------------------------------------------------------------------------------
# random formulas


_NUMBERS = ["0", "1", "2", "3", "0.5", "2.5", "0.1", "1e300", "1e-200", "1e15", "709", "pi", "0.0"]
_EXPONENTS = ["2", "3", "-1", "-2", "0.5", "(1/2)", "(1/3)", "(3/2)", "x", "a", "2.0", "64", "40"]
_EXPONENTS += ["(a + 1)", "(2*a)", "0", "1"]
_FUNCTIONS = ["exp", "log", "sqrt", "tanh", "sinh", "cosh", "sin", "cos", "abs"]
_TWICE = [
    "({u}) - ({u})",
    "({u})/({u})",
    "({u})*({u})",
    "({u})**2*({u})**-2",
    "2*({u}) - ({u})*2",
    "({u})*0.5 + ({u})*0.5",
    "({u})**0.5*({u})**0.5",
    "max({u}, {u})",
    "({u}) + ({u})",
]
"""One part used twice: what makes sympy cancel, collect and merge."""


def _extend(children: st.SearchStrategy[str]) -> st.SearchStrategy[str]:
    """One more level of the grammar."""
    return st.one_of(
        st.builds(
            lambda left, op, right: f"({left}){op}({right})",
            children,
            st.sampled_from("+-*/"),
            children,
        ),
        st.builds(
            lambda base, exponent: f"({base})**{exponent}", children, st.sampled_from(_EXPONENTS)
        ),
        st.builds(lambda name, part: f"{name}({part})", st.sampled_from(_FUNCTIONS), children),
        st.builds(
            lambda name, parts: f"{name}({', '.join(parts)})",
            st.sampled_from(["min", "max"]),
            st.lists(children, min_size=2, max_size=4),
        ),
        st.builds(lambda part: f"-({part})", children),
        st.builds(lambda part, pattern: pattern.format(u=part), children, st.sampled_from(_TWICE)),
    )


random_formulas = st.one_of(
    st.recursive(st.sampled_from(["x", "y", "a", "b", *_NUMBERS]), _extend, max_leaves=10),
    hostile_tests.hostile_trees,
)
"""Random formulas: this file's grammar (sums and products of a part with itself, powers with
numeric, fractional and symbolic exponents) and the hostile grammar of test_hostile_formulas."""


def test_random_formulas_get_the_verdict_and_message_sympy_gives() -> None:
    """reference: sympy 1.14 through parse_formula, on random formulas (hypothesis). Same
    verdict, message and tree whenever the light algebra decides; it decides nearly all, and
    scenario validation (with its fallback) gives sympy's answer on every one."""
    outcomes: Counter[str] = Counter()

    @settings(
        max_examples=RANDOM_EXAMPLES,
        deadline=None,
        database=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large],
    )
    @given(random_formulas)
    def agrees(text: str) -> None:
        expected = sympy_outcome(text, ("x", "y", "a", "b"), ("x", "y"))
        got = light_outcome(text, ("x", "y", "a", "b"), ("x", "y"))
        outcomes[got[0]] += 1
        if got[0] == "undecided":
            equations = {"x": text, "y": "a - b*y"}
            validated = model_outcome(equations, ("a", "b"), "validator")
            assert validated == model_outcome(equations, ("a", "b"), "sympy"), text
        else:
            assert got == expected, text

    agrees()
    total = sum(outcomes.values())
    assert total >= RANDOM_EXAMPLES * 0.9, outcomes
    assert outcomes["accepted"] > 0 and outcomes["refused"] > 0, outcomes
    assert outcomes["undecided"] <= MOST_UNDECIDED * total, outcomes


# --------------------------------------------------------------------------------------------
# the fallback, and what validation imports


def test_an_undecided_formula_is_decided_by_sympy() -> None:
    """reference: sympy 1.14. The square root of a product with a numeric factor is one of the
    light algebra's gaps; validation then builds the formulas with sympy and reports its
    verdict, on the same field."""
    with pytest.raises(UndecidedError):
        check_formula("sqrt(2*x)", ("x", "a"))
    refused = {"x": "a - x", "y": "sqrt(2*y)/(x - x)"}
    expected = model_outcome(refused, ("a",), "sympy")
    assert expected[0] == "y" and "undefined" in expected[1]
    assert model_outcome(refused, ("a",), "validator") == expected
    assert model_outcome({"x": "sqrt(2*x) - a"}, ("a",), "validator") is None


def _formula_scenario(tmp_path: Path, formula: str) -> Path:
    """The Alder Mere demo with its model written as a formula for P."""
    data = tomllib.loads((ROOT / "scenarios" / "alder-mere.toml").read_text(encoding="utf-8"))
    parameters = data["model"]["parameters"]
    data["model"] = {"kind": "formula", "equations": {"P": formula}, "parameters": parameters}
    path = tmp_path / "formula.toml"
    path.write_text(tomli_w.dumps(data), encoding="utf-8")
    return path


LOADED = """
import json, sys
from planner.errors import InputError
from planner.scenario import load_scenario
try:
    load_scenario(sys.argv[1])
    verdict = "valid"
except InputError as error:
    verdict = str(error)
print(json.dumps({"verdict": verdict, "modules": sorted({m.split(".")[0] for m in sys.modules})}))
"""


@pytest.mark.parametrize(
    ("formula", "valid"),
    [("L - s*P + r*P**q/(m**q + P**q)", True), ("L - s*P + 1/(P - P)", False)],
)
def test_validating_a_formula_model_loads_no_sympy(tmp_path: Path, formula: str, valid) -> None:
    """Loading (validating) a formula scenario, valid or not, imports none of the numerical
    libraries; the verdict is the one the sympy build gives (checked above)."""
    path = _formula_scenario(tmp_path, formula)
    result = subprocess.run(
        [sys.executable, "-c", LOADED, str(path)],
        capture_output=True,
        text=True,
        cwd=ROOT,
        env={**os.environ, "PYTHONIOENCODING": "utf-8"},
        check=True,
    )
    record = json.loads(result.stdout)
    assert (record["verdict"] == "valid") is valid, record["verdict"]
    if not valid:
        assert "model.equations.P" in record["verdict"] and "undefined" in record["verdict"]
    loaded = set(record["modules"])
    assert not loaded & {"sympy", "numpy", "scipy", "pandas", "pint"}, loaded
