"""Tests for the whitelist formula parser: correct translations, refusals, and robustness."""

from __future__ import annotations

import ast
import math
from dataclasses import dataclass

import numpy as np
import pytest
import sympy
from hypothesis import HealthCheck, assume, given, settings
from hypothesis import strategies as st

from planner.errors import FormulaError
from planner.models.formula import (
    ALLOWED_FUNCTIONS,
    MAX_ARGUMENT_SCALE,
    MAX_DEPTH,
    MAX_DERIVATIVE_WORK,
    MAX_EXPONENT,
    MAX_EXPONENTIAL_NESTING,
    MAX_FORMULA_LENGTH,
    derivative_work,
    parse_formula,
)

NAMES = ("a", "b", "mu", "x", "y", "R", "K")
SYMBOLS = {name: sympy.Symbol(name) for name in NAMES}
a, b, mu, x, y, R, K = (SYMBOLS[name] for name in NAMES)

UNIT_ROUNDOFF = 2.0**-53
"""Relative rounding error of one IEEE 754 double operation."""
WELL_CONDITIONED = 1e-9
"""Largest estimated relative rounding error of the reference for a point to be compared."""
AGREEMENT = 1e-7
"""Relative tolerance between the parsed formula and the reference at a compared point."""


def _same(parsed: sympy.Expr, expected: sympy.Expr) -> bool:
    """Symbolic equality that ignores how sympy happened to order or group the terms."""
    return sympy.simplify(parsed - expected) == 0


# --------------------------------------------------------------------------------------------
# correct translations


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("mu + x**2", mu + x**2),
        ("a - b*x + x**2/(1 + x**2)", a - b * x + x**2 / (1 + x**2)),
        ("R*x*(1 - x/K) - x**2/(1 + x**2)", R * x * (1 - x / K) - x**2 / (1 + x**2)),
        ("-x", -x),
        ("- -x", x),
        ("+x", x),
        ("-x**2", -(x**2)),
        ("(-x)**2", x**2),
        ("2*pi*x", sympy.Float(2 * math.pi) * x),  # constants fold to doubles (math.pi)
        ("x**-2", x ** (-2)),
        ("x**2**3", x**8),
        ("x**0.5", x ** sympy.Float(0.5)),
        ("  mu + x  ", mu + x),
        ("1_000 * x", 1000 * x),
        ("(x**8)**8", x**64),
    ],
)
def test_parses_to_the_expression_built_by_hand(text: str, expected: sympy.Expr) -> None:
    assert _same(parse_formula(text, SYMBOLS), expected)


FUNCTION_FORMULAS = [
    ("exp(-x) + log(a)", lambda p: math.exp(-p["x"]) + math.log(p["a"])),
    ("tanh(x) * sqrt(b)", lambda p: math.tanh(p["x"]) * math.sqrt(p["b"])),
    (
        "sinh(x) + cosh(y) - sin(a) * cos(b)",
        lambda p: math.sinh(p["x"]) + math.cosh(p["y"]) - math.sin(p["a"]) * math.cos(p["b"]),
    ),
    ("min(x, y) - max(x, y, a)", lambda p: min(p["x"], p["y"]) - max(p["x"], p["y"], p["a"])),
    ("abs(x - y)", lambda p: abs(p["x"] - p["y"])),
]


@pytest.mark.parametrize(("text", "reference"), FUNCTION_FORMULAS)
@pytest.mark.parametrize("module", ["math", "numpy"])
def test_functions_compute_what_python_computes(text, reference, module) -> None:
    """reference: Python's math module and built-in abs, min and max, at a few points."""
    parsed = parse_formula(text, SYMBOLS)
    names = ("x", "y", "a", "b")
    function = sympy.lambdify([SYMBOLS[n] for n in names], parsed, modules=module)
    for values in [(0.3, -1.2, 0.5, 2.0), (-2.5, 0.7, 3.0, 0.1), (1.0, 1.0, 1.5, 1.5)]:
        point = dict(zip(names, values, strict=True))
        assert math.isclose(float(function(*values)), reference(point), rel_tol=1e-12)


def test_numbers_become_exact_integers_and_floats() -> None:
    parsed = parse_formula("3 + x", SYMBOLS)
    assert parsed.as_coeff_Add()[0] == sympy.Integer(3)
    assert isinstance(parsed.as_coeff_Add()[0], sympy.Integer)
    assert isinstance(parse_formula("0.25", SYMBOLS), sympy.Float)
    assert parse_formula("1/3", SYMBOLS) == sympy.Rational(1, 3)


def test_returns_a_sympy_expression_that_uses_the_given_symbols() -> None:
    parsed = parse_formula("a*x", SYMBOLS)
    assert isinstance(parsed, sympy.Expr)
    assert parsed.free_symbols == {a, x}


def test_long_sums_are_one_level_of_nesting() -> None:
    """Sums and products chain to the left in Python's tree; they must not hit the depth limit."""
    text = "+".join(["x"] * (MAX_DEPTH * 3))
    assert parse_formula(text, SYMBOLS) == MAX_DEPTH * 3 * x
    assert parse_formula("*".join(["x"] * 60), SYMBOLS) == x**60


def test_allowed_functions_are_the_documented_ones() -> None:
    assert set(ALLOWED_FUNCTIONS) == {
        "exp",
        "log",
        "sqrt",
        "tanh",
        "sinh",
        "cosh",
        "sin",
        "cos",
        "abs",
        "min",
        "max",
    }
    assert ALLOWED_FUNCTIONS["min"].min_args == 2
    assert ALLOWED_FUNCTIONS["max"].max_args is None


# --------------------------------------------------------------------------------------------
# refusals


REFUSALS = [
    ("__import__('os')", "names starting with '_' are not allowed"),
    ("import os", "not a valid formula"),
    ("x.__class__", "attribute access is not allowed"),
    ("x.real", "attribute access is not allowed"),
    ("__builtins__", "names starting with '_' are not allowed"),
    ("lambda x: x", "lambda"),
    ("[x for x in y]", "list comprehensions are not allowed"),
    ("{x for x in y}", "set comprehensions are not allowed"),
    ("{x: x for x in y}", "dict comprehensions are not allowed"),
    ("(x for x in y)", "generator expressions are not allowed"),
    ("'abc'", "strings are not allowed"),
    ('"x" + x', "strings are not allowed"),
    ("b'x'", "strings are not allowed"),
    ("f'{x}'", "f-strings are not allowed"),
    ("foo + x", "unknown name 'foo'; declared names are: K, R, a, b, mu, x, y"),
    ("foo(x)", "unknown function 'foo'; allowed functions: abs, cos, cosh, exp, log, max"),
    ("x(2)", "unknown function 'x'"),
    ("9**9**9", "exponent 387420489 is too large"),
    ("x**1000", "exponent 1000 is too large"),
    ("x**-65", "exponent -65 is too large"),
    ("(x**8)**9", "nested powers combine to an exponent of 72"),
    ("((10**50)**4)**2", "the power would produce a number outside"),
    ("x ^ 2", "use ** for powers, not ^"),
    ("x % 2", "%"),
    ("x // 2", "//"),
    ("x[0]", "indexing and slicing"),
    ("x < 1", "comparisons"),
    ("x if x else y", "conditional expressions"),
    ("x and y", "boolean operators"),
    ("not x", "'not'"),
    ("x, y", "tuples are not allowed"),
    ("[x]", "lists are not allowed"),
    ("(x := 1)", "assignment expressions"),
    ("True", "True and False are not allowed"),
    ("None", "None"),
    ("1j", "complex numbers"),
    ("x" + "+x" * 250, f"the limit is {MAX_FORMULA_LENGTH}"),
    ("", "formula is empty"),
    ("   \n\t", "formula is empty"),
    ("(" * 200 + "x" + ")" * 200, "nested too deeply"),
    ("-" * (MAX_DEPTH + 5) + "x", "nested too deeply"),
    ("exp(" * (MAX_DEPTH + 1) + "x" + ")" * (MAX_DEPTH + 1), "nested too deeply"),
    ("exp(x, y)", "exp takes exactly 1 argument (got 2)"),
    ("min(x)", "min takes at least 2 arguments (got 1)"),
    ("exp(x=1)", "keyword arguments are not allowed"),
    ("exp(*x)", "starred arguments"),
    ("1/0", "formula is undefined (division by zero)"),
    ("x/(y - y)", "formula is undefined"),
    ("log(0)", "formula is undefined"),
    ("sqrt(-1)", "complex-valued"),
    ("1e999", "numbers must be finite"),
    ("1e301", "numbers must be finite and 0 or between 1e-300 and 1e300 in magnitude"),
    ("1e-301", "numbers must be finite and 0 or between 1e-300 and 1e300"),
    ("1e-400 * x", "numbers must be finite and 0 or between 1e-300"),
    ("exp(exp(1e300))", "the constant part 'exp(1e300)' is too large (beyond 1e300"),
    ("max(exp(exp(exp(100))), x)", "the constant part 'exp(exp(100))' is too large"),
    ("exp(-1000) + x", "the constant part 'exp(-1000)' is too small"),
    ("1e300*x*1e300", "is too large (beyond 1e300"),
    ("1e-200*x*1e-200", "is too small (nonzero but below 1e-300"),
    ("log(-1)", "complex-valued"),
    ("(-8)**(1/3)", "complex-valued"),
    ("(-2)**x", "a power with a variable exponent needs a positive base (got -2)"),
    ("0**x", "needs a positive base (got 0)"),
    ("x**40 * x**40", "powers combine to an exponent of 80"),
    ("sin(1e300*x)", "the argument of sin multiplies a name by, or adds, a number of about 1e300"),
    ("cos(x + 1e20)", "the argument of cos multiplies a name by, or adds, a number of about 1e20"),
    ("tanh(1e10*(1e10*x - 1))", "about 1e20 (the limit is 1e15)"),
    ("exp(exp(exp(exp(x))))", "exponentials are nested 4 deep, more than 3"),
    ("x**x**x**x**x", "exponentials are nested 4 deep"),
    (
        "\uff58 + 1",
        "the character '\uff58' (U+FF58 FULLWIDTH LATIN SMALL LETTER X, column 1) looks",
    ),
    ("\U0001d431 + 1", "U+1D431 MATHEMATICAL BOLD SMALL X, column 1) looks like 'x'"),
    (
        "x\u200b + 1",
        "an invisible or non-ASCII space character (U+200B ZERO WIDTH SPACE, column 2)",
    ),
    ("x \u2212 1", "(U+2212 MINUS SIGN, column 3) is not allowed; type '-' instead"),
    ("\u00b5 * x", "U+00B5 MICRO SIGN"),
    ("2(x + 1)", "write * for multiplication"),
    ("2x", "not a valid formula"),
    ("x +", "not a valid formula"),
    ("x\x00", "not a valid formula: a control character (U+0000, column 2)"),
    ("e", "for Euler's number write exp(1)"),
]


@pytest.mark.parametrize(("text", "fragment"), REFUSALS)
def test_refuses_with_a_message_that_says_why(text: str, fragment: str) -> None:
    with pytest.raises(FormulaError) as caught:
        parse_formula(text, SYMBOLS)
    assert fragment in str(caught.value)


def test_overlong_text_is_exactly_one_past_the_limit() -> None:
    text = "x" + "+x" * 250
    assert len(text) == MAX_FORMULA_LENGTH + 1
    parse_formula(text[:-2], SYMBOLS)  # at the limit: accepted


def test_declared_names_starting_with_underscore_are_still_refused() -> None:
    with pytest.raises(FormulaError, match="names starting with '_'"):
        parse_formula("_x + 1", {"_x": sympy.Symbol("_x")})


def test_unknown_name_lists_no_declared_names_when_there_are_none() -> None:
    with pytest.raises(FormulaError, match=r"unknown name 'x'; declared names are: \(none\)"):
        parse_formula("x", {})


@pytest.mark.parametrize("value", [3, 3.0, None, b"x", ["x"]])
def test_non_text_input_is_refused(value: object) -> None:
    with pytest.raises(FormulaError, match="formula must be text"):
        parse_formula(value, SYMBOLS)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    "text",
    ["9**9**9", "((((9**9)**9)**9)**9)**9", "(2*pi)**64**64", "exp(exp(exp(exp(1e300))))"],
)
def test_huge_numbers_are_refused(text: str) -> None:
    """The guards run before sympy evaluates anything (tests/test_hostile_formulas.py checks
    that no such formula hangs)."""
    with pytest.raises(FormulaError):
        parse_formula(text, SYMBOLS)


def test_exponent_at_the_limit_is_accepted() -> None:
    assert parse_formula(f"x**{MAX_EXPONENT}", SYMBOLS) == x**MAX_EXPONENT
    assert parse_formula(f"x**-{MAX_EXPONENT}", SYMBOLS) == x**-MAX_EXPONENT


def test_argument_scale_at_the_limit_is_accepted() -> None:
    parse_formula(f"sin({MAX_ARGUMENT_SCALE:.0e}*x)", SYMBOLS)
    with pytest.raises(FormulaError, match="the argument of sin"):
        parse_formula(f"sin({MAX_ARGUMENT_SCALE * 10:.0e}*x)", SYMBOLS)


def test_exponentials_at_the_nesting_limit_are_accepted() -> None:
    text = "exp(" * MAX_EXPONENTIAL_NESTING + "x" + ")" * MAX_EXPONENTIAL_NESTING
    parse_formula(text, SYMBOLS)
    with pytest.raises(FormulaError, match="exponentials are nested"):
        parse_formula(f"exp({text})", SYMBOLS)


def test_look_alike_letters_would_silently_become_ascii_names() -> None:
    """Why they are refused. reference: Python Software Foundation, The Python Language
    Reference, section 2.3 "Identifiers and keywords": identifiers are converted to the normal
    form NFKC while parsing."""
    for look_alike in ("\uff58", "\U0001d431"):
        assert ast.parse(look_alike, mode="eval").body.id == "x"
        with pytest.raises(FormulaError, match=f"'{look_alike}' .*looks like 'x'"):
            parse_formula(f"{look_alike} + 1", SYMBOLS)


def test_names_with_look_alike_letters_are_refused_naming_the_character() -> None:
    from planner.models import check_name

    assert "U+FF58 FULLWIDTH LATIN SMALL LETTER X" in check_name("\uff58")
    assert "U+1D431 MATHEMATICAL BOLD SMALL X" in check_name("a\U0001d431")
    assert check_name("x\n") is not None
    assert check_name("x_1") is None


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("exp(1)", math.e),
        ("log(10)", math.log(10)),
        ("sqrt(2)", math.sqrt(2)),
        ("2**0.5", math.sqrt(2)),
        ("sin(1e300)", math.sin(1e300)),
        ("cos(3)", math.cos(3)),
        ("tanh(0.5)", math.tanh(0.5)),
        ("cosh(2) - sinh(2)", math.exp(-2)),
        ("exp(690)", math.exp(690)),
        ("max(1, 2.5, -3)", 2.5),
        ("min(1, 2.5, -3)", -3.0),
        ("abs(-2.5)", 2.5),
        ("pi/4", math.pi / 4),
        ("(1/3)**2", 1 / 9),
    ],
)
def test_constant_parts_fold_to_the_values_python_computes(text: str, expected: float) -> None:
    """reference: Python's math module and built-ins (IEEE 754 doubles)."""
    parsed = parse_formula(text, SYMBOLS)
    assert parsed.is_Number
    assert math.isclose(float(parsed), expected, rel_tol=1e-13)


def test_exact_fractions_stay_exact() -> None:
    assert parse_formula("(1/3)**2 + x", SYMBOLS) == sympy.Rational(1, 9) + x


def _abs_min_max(x_value: float, y_value: float) -> float:
    """The formula below in Python's built-in abs, min and max."""
    return abs(x_value - 0.3) + max(x_value * y_value, 0.3) ** 2 - min(x_value, y_value, 0.5)


@pytest.mark.parametrize("point", [(0.7, 0.4), (-1.3, 2.0), (2.0, 0.9)])
def test_abs_min_max_compile_with_derivatives(point: tuple[float, float]) -> None:
    """abs, min and max compile to values, Jacobians and Hessians (sympy's Abs and Max do not:
    their derivatives hold Derivative(re(x), x) and DiracDelta, which numpy cannot print).

    reference: Python's built-in abs, min and max for values; central difference quotients
    for derivatives (common practice, no source), at points away from the kinks.
    """
    from planner.models import compile_model, formula_spec

    spec = formula_spec(
        {"x": "abs(x - a) + max(x*y, a)**2 - min(x, y, b)", "y": "a - y"}, ("a", "b")
    )
    system = compile_model(spec, "a").bind({"a": 0.3, "b": 0.5})
    state = np.array(point)
    step = 1e-6
    assert math.isclose(system.rhs(state, 0.3)[0], _abs_min_max(*point), rel_tol=1e-12)
    for column, shift in enumerate(np.eye(2) * step):
        quotient = (_abs_min_max(*(state + shift)) - _abs_min_max(*(state - shift))) / (2 * step)
        assert math.isclose(system.jac(state, 0.3)[0, column], quotient, rel_tol=1e-6)
        hessian_row = system.hessians(state, 0.3)[0, column]
        jacobian_quotient = (
            system.jac(state + shift, 0.3)[0] - system.jac(state - shift, 0.3)[0]
        ) / (2 * step)
        assert np.allclose(hessian_row, jacobian_quotient, rtol=1e-5, atol=1e-6)


DIFFERENTIATED = [
    "a - b*x + x**8/(1 + x**8)",
    "x*y",
    "exp(x*y)",
    "sin(x)*cos(y)*exp(a*x)",
    "(x + 1)*(x + 2)*(x + 3)*(y + 4)",
    "x**x",
    "x**y**a",
    "max(x, y)*abs(x - a)",
    "log(1 + x**2)/(1 + y**2)",
    "sqrt(x*y + a)",
    "tanh(x*(y - a))**3",
    "1/(1 + exp(-x*y))",
    "a*x/(b + x)",
    "min(x*y, a)",
    "abs(x)**3",
    "sinh(x)*cosh(y)/(x + y)",
    "exp(exp(x))",
    "(x*y + 1)*(x*y + 2)*(x*y + 3)*(x + y)",
]


def _nodes(expr: sympy.Expr) -> int:
    return sum(1 for _ in sympy.preorder_traversal(expr))


@pytest.mark.parametrize("text", DIFFERENTIATED)
def test_derivative_work_is_not_below_the_derivatives_sympy_builds(text: str) -> None:
    """reference: the derivatives sympy itself builds, counted in tree nodes. The estimate
    must not fall below them, or the limit would let slower formulas through."""
    parsed = parse_formula(text, SYMBOLS, states=["x", "y"])
    states = [x, y]
    built = 0
    for control in (a, b):
        size = sum(_nodes(sympy.diff(parsed, s)) for s in states) + _nodes(parsed.diff(control))
        size += sum(_nodes(sympy.diff(parsed, s, t)) for s in states for t in states)
        size += sum(_nodes(sympy.diff(parsed, s, control)) for s in states)
        built = max(built, size)
    assert derivative_work(parsed, set(states)) >= built


def test_long_products_are_refused_as_too_complex_to_differentiate() -> None:
    few = "*".join(f"(x + {i})" for i in range(6))
    parse_formula(few, SYMBOLS, states=["x"])
    many = "*".join(f"(x + {i})" for i in range(40))
    with pytest.raises(FormulaError, match=f"the limit is {MAX_DERIVATIVE_WORK:,}"):
        parse_formula(many, SYMBOLS, states=["x"])


def test_parameters_count_as_one_control_not_as_states() -> None:
    """Only the states and the control are differentiated; a product over parameters costs
    first derivatives only, so it passes when the parameters are not states."""
    text = "x + " + "*".join(f"(a + {i})" for i in range(25))
    parse_formula(text, SYMBOLS, states=["x"])
    with pytest.raises(FormulaError, match="too complex to differentiate"):
        parse_formula(text, SYMBOLS)  # every name a state


def test_the_symbols_mapping_is_not_modified() -> None:
    symbols = dict(SYMBOLS)
    parse_formula("x + pi", symbols)
    assert symbols == SYMBOLS


# --------------------------------------------------------------------------------------------
# robustness on arbitrary text


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=200))
def test_arbitrary_text_parses_or_raises_formula_error(text: str) -> None:
    try:
        result = parse_formula(text, SYMBOLS)
    except FormulaError:
        return
    assert isinstance(result, sympy.Expr)


_FORMULA_ALPHABET = st.sampled_from(list("xyab0123456789.+-*/() ^_e,") + ["**", "exp(", "min("])


@settings(max_examples=300, deadline=None)
@given(st.lists(_FORMULA_ALPHABET, max_size=40).map("".join))
def test_formula_like_text_parses_or_raises_formula_error(text: str) -> None:
    """Text made of formula pieces reaches the tree walker far more often than random text."""
    try:
        result = parse_formula(text, SYMBOLS)
    except FormulaError:
        return
    assert isinstance(result, sympy.Expr)


# --------------------------------------------------------------------------------------------
# agreement with float arithmetic on random expression trees


@dataclass(frozen=True)
class Leaf:
    """A symbol name or a number."""

    value: str | int | float


@dataclass(frozen=True)
class Binary:
    """``left op right`` for op in + - * /."""

    op: str
    left: Tree
    right: Tree


@dataclass(frozen=True)
class Power:
    """``base**exponent`` with a small integer exponent."""

    base: Tree
    exponent: int


@dataclass(frozen=True)
class Negate:
    """Unary minus."""

    operand: Tree


Tree = Leaf | Binary | Power | Negate

_leaves = st.one_of(
    st.sampled_from(["x", "y"]).map(Leaf),
    st.integers(min_value=0, max_value=9).map(Leaf),
    st.sampled_from([0.5, 0.25, 1.5, 2.5, 0.1, 3.75]).map(Leaf),
)


def _extend(children: st.SearchStrategy[Tree]) -> st.SearchStrategy[Tree]:
    """One more level of the random grammar on top of ``children``."""
    return st.one_of(
        st.builds(Binary, st.sampled_from("+-*/"), children, children),
        st.builds(Power, children, st.integers(min_value=-2, max_value=3)),
        st.builds(Negate, children),
    )


_trees = st.recursive(_leaves, _extend, max_leaves=8)


def _render(tree: Tree) -> str:
    """Fully bracketed formula text for the tree."""
    if isinstance(tree, Leaf):
        return repr(tree.value) if not isinstance(tree.value, str) else tree.value
    if isinstance(tree, Binary):
        return f"({_render(tree.left)} {tree.op} {_render(tree.right)})"
    if isinstance(tree, Power):
        return f"({_render(tree.base)})**({tree.exponent})"
    return f"(-{_render(tree.operand)})"


def _depth(tree: Tree) -> int:
    """Bracket nesting of the rendered text, to stay clear of the parser's depth limit."""
    if isinstance(tree, Leaf):
        return 0
    if isinstance(tree, Binary):
        return 1 + max(_depth(tree.left), _depth(tree.right))
    if isinstance(tree, Power):
        return 2 + _depth(tree.base)
    return 1 + _depth(tree.operand)


def _reference(tree: Tree, point: dict[str, float]) -> tuple[float, float]:
    """Value of the tree in Python floats, with a first-order bound on its rounding error.

    Returns (value, error bound). The bound lets the test skip points where the float
    reference itself is unreliable (cancellation), since sympy rearranges the expression and
    so rounds differently.
    """
    if isinstance(tree, Leaf):
        value = point[tree.value] if isinstance(tree.value, str) else float(tree.value)
        return value, 0.0
    if isinstance(tree, Negate):
        value, error = _reference(tree.operand, point)
        return -value, error
    if isinstance(tree, Power):
        base, error = _reference(tree.base, point)
        value = base**tree.exponent  # raises ZeroDivisionError / OverflowError like the grammar
        if tree.exponent == 0:
            return value, 0.0
        if base == 0.0:
            return value, (error ** abs(tree.exponent) if error else 0.0)
        relative = abs(tree.exponent) * (error / abs(base) + UNIT_ROUNDOFF)
        return value, abs(value) * relative + UNIT_ROUNDOFF * abs(value)
    left, left_error = _reference(tree.left, point)
    right, right_error = _reference(tree.right, point)
    if tree.op == "+":
        value = left + right
        error = left_error + right_error
    elif tree.op == "-":
        value = left - right
        error = left_error + right_error
    elif tree.op == "*":
        value = left * right
        error = abs(left) * right_error + abs(right) * left_error + left_error * right_error
    else:
        value = left / right  # raises ZeroDivisionError for a zero denominator
        margin = abs(right) - right_error
        error = (left_error + abs(value) * right_error) / margin if margin > 0 else math.inf
    return value, error + UNIT_ROUNDOFF * abs(value)


@settings(max_examples=200, deadline=None, suppress_health_check=[HealthCheck.filter_too_much])
@given(
    tree=_trees,
    x_value=st.floats(min_value=-10, max_value=10, allow_subnormal=False),
    y_value=st.floats(min_value=-10, max_value=10, allow_subnormal=False),
)
def test_random_expressions_match_float_arithmetic(
    tree: Tree, x_value: float, y_value: float
) -> None:
    """Parsed formulas compute what the text says.

    reference: Python float arithmetic (IEEE 754) on the same random expression tree.
    """
    assume(_depth(tree) <= MAX_DEPTH // 2)
    point = {"x": x_value, "y": y_value}
    try:
        expected, error = _reference(tree, point)
    except (ZeroDivisionError, OverflowError):
        assume(False)
        return
    assume(math.isfinite(expected) and math.isfinite(error))
    assume(error <= WELL_CONDITIONED * abs(expected))
    text = _render(tree)
    try:
        parsed = parse_formula(text, SYMBOLS)
    except FormulaError as refusal:
        # Only the documented limits may refuse a tree from this grammar: sympy cancels exactly,
        # so a denominator that is zero as an expression is refused even where floats round
        # away from zero, merged powers may pass the exponent limit, and constant parts are
        # checked against 1e-300 .. 1e300 however they are grouped.
        reason = str(refusal)
        assert any(part in reason for part in ("undefined", "exponent", "constant part")), reason
        assume(False)
        return
    function = sympy.lambdify([x, y], parsed, modules="math")
    got = float(function(x_value, y_value))
    assert math.isclose(got, expected, rel_tol=AGREEMENT, abs_tol=1e-12), (text, got, expected)
