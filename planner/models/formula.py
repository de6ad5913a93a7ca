"""Whitelist parser for user-written right-hand sides, with one set of checks for two builders.

Users type formulas such as ``a - b*x + x**2/(1 + x**2)`` into scenario files. That text is
untrusted, so it is never handed to Python's evaluator nor to sympy's string parser (both can
run arbitrary code). Instead the text is split into a syntax tree with :func:`ast.parse` (pure
parsing, nothing runs) and the tree is walked here; each node is either translated into the
matching expression or refused with a message that says what is wrong and what is allowed.

Besides the whitelist, guards keep a hostile or mistyped formula from exhausting time or memory,
or from meaning something other than what it shows:

- Plain ASCII only. Python folds look-alike letters (a full-width or a mathematical bold x) into
  ASCII names, so such a letter would silently stand for a declared name; it is refused instead,
  with the character named.
- Limits on length and on nesting (brackets, function calls, nested exponentials).
- Constant folding. Every part of a formula without names is computed once, as a number, while
  the formula is read (exact fractions stay exact; anything else becomes a double). A constant
  that overflows or underflows (beyond 1e300, nonzero below 1e-300), is undefined (``1/0``,
  ``log(0)``) or is complex (``sqrt(-1)``) is refused with the part quoted. sympy therefore
  never holds a symbolic constant such as ``exp(exp(exp(100)))``, which it would otherwise try
  to compare (``max``) or cancel (differences) to ever higher precision, without end.
- Limits on constant exponents (``9**9**9`` would ask for hundreds of millions of digits), on
  the numbers anywhere in the result, and on how strongly an oscillating or exponential function
  scales its argument (``sin(1e300*x)`` is rounding noise that numerical methods chase forever).
- A limit on the estimated size of the first and second derivatives that compiling the formula
  builds (a product of n factors has second derivatives of n**3 terms).

One walk and one set of checks run on either of two algebras, so the two cannot drift apart:

- :func:`parse_formula` builds sympy expressions (:mod:`planner.models.formula_sympy`), which the
  model library differentiates and compiles. It is the reference.
- :func:`check_formula` builds light expressions (:mod:`planner.models.formula_light`) that
  follow sympy's automatic simplification without importing sympy, so that validating a scenario
  (``planner check``) stays quick. Where the light algebra does not model what sympy would do it
  raises :class:`UndecidedError`, and :func:`check_equations` then builds the formulas with sympy.

This module imports neither sympy nor numpy.
"""

from __future__ import annotations

import ast
import math
import re
import unicodedata
import warnings
from collections.abc import Callable, Collection, Mapping, Sequence
from functools import reduce
from types import MappingProxyType
from typing import TYPE_CHECKING, Any, NamedTuple, TypeVar

import mpmath

from planner.errors import FormulaError
from planner.models.formula_light import LIGHT, UndecidedError

if TYPE_CHECKING:
    import sympy

Expression = Any
"""A sympy expression or a light one (:mod:`planner.models.formula_light`): the walker and the
checks read both through the same attributes (``is_Add``, ``args``, ``free_symbols``, ...)."""

Algebra = Any
"""Where expressions are built: :data:`planner.models.formula_sympy.SYMPY` (the reference) or
:data:`planner.models.formula_light.LIGHT`."""

_Parsed = TypeVar("_Parsed")

MAX_FORMULA_LENGTH = 500
"""Longest formula (in characters, after stripping surrounding whitespace) that is accepted."""

MAX_EXPONENT = 64
"""Largest |exponent| allowed when an exponent is a numeric constant, also after sympy merges
nested powers such as ``(x**8)**8`` or products such as ``x**40*x**40`` into one."""

MAX_DEPTH = 40
"""Deepest nesting of brackets or of syntax-tree nodes; keeps every recursion shallow."""

MAX_CONSTANT = 1e300
"""Largest magnitude of a number written in a formula or computed from its constant parts;
beyond it doubles (which overflow near 1.8e308) stop being useful."""

MIN_CONSTANT = 1e-300
"""Smallest magnitude of a nonzero number written or computed; below it doubles lose precision
(subnormals) and then round to zero, which would silently change the formula."""

MAX_NUMBER_DIGITS = 300
"""Largest decimal order of magnitude (either way, large or tiny) of a number that a power may
produce. Checked before sympy multiplies out a power, which it does exactly for integers."""

MAX_ARGUMENT_SCALE = 1e15
"""Largest factor by which the argument of sin, cos, tanh, exp, sinh or cosh may scale a name
(or largest number it may hold). Near 1e15 the rounding error of the argument (about 0.1 for
1e15*x at x = 1) approaches a period of sin, so sin(1e300*x) is rounding noise, and exp(1e20*x)
overflows for any x above 7e-18; continuation and integration would chase such a function with
ever smaller steps. Common practice, no source."""

MAX_EXPONENTIAL_NESTING = 3
"""Deepest nesting of exponentials: exp, sinh, cosh and powers with a non-constant exponent.
Four nested exponentials overflow doubles for every argument above about 0.63; a tower is also
what makes derivatives grow fastest. Common practice, no source."""

MAX_DERIVATIVE_WORK = 25_000
"""Largest estimated size (nodes of the expression trees) of the first and second derivatives
that compiling a formula builds (:func:`derivative_work`). A product of n factors has second
derivatives of about n**3 nodes, which sympy needs minutes to build for n near 40; near this
limit compiling one formula took one to three seconds on a laptop core, while lake models
written by hand stay below a tenth of it. Common practice, no source."""

_SEGMENT_CHARS = 40
"""How much of the offending formula text a refusal message quotes."""


def _power_of_ten(value: float) -> str:
    """A power of ten as written in formulas: 1e300, 1e-300, 1e15."""
    return f"1e{round(math.log10(value))}"


_LIMIT_RANGE = (
    f"0 or between {_power_of_ten(MIN_CONSTANT)} and {_power_of_ten(MAX_CONSTANT)} in magnitude"
)
_DIGITS_RANGE = f"outside 1e-{MAX_NUMBER_DIGITS} .. 1e{MAX_NUMBER_DIGITS} in magnitude"
_MAX_FRACTION_BITS = 1000
"""Largest numerator or denominator (in bits, about 300 digits) of an exact fraction."""
_UNDEFINED = "formula is undefined (division by zero or log of zero?)"
_COMPLEX = "formula is complex-valued (root or log of a negative?)"

_MP = mpmath.MPContext()
"""A private mpmath context at double precision (53 bits) for folding constants: its numbers
never overflow, so a too-large result is seen and refused rather than turned into inf, and the
global context (which other code may change) is left alone."""

_ASCII_HINTS: Mapping[str, str] = MappingProxyType(
    {
        "\u2212": "-",  # minus sign
        "\u2013": "-",  # en dash
        "\u00d7": "*",  # multiplication sign
        "\u00b7": "*",  # middle dot
        "\u22c5": "*",  # dot operator
        "\u00f7": "/",  # division sign
        "\u00b2": "**2",  # superscript two
        "\u00b3": "**3",  # superscript three
        "\u03c0": "pi",  # Greek small letter pi
    }
)
"""What to type instead of common non-ASCII symbols pasted from documents."""


# --------------------------------------------------------------------------------------------
# the whitelist


def _analytic(function: Callable[..., Any]) -> Callable[..., Any]:
    """``function`` of the private mpmath context, applied to checked Numbers."""
    return lambda *numbers: function(*(_to_mpf(number) for number in numbers))


def _to_mpf(number: Expression) -> Any:
    """A checked Number (at most 1e300 in magnitude) as an mpf of the private context."""
    return _MP.mpf(float(number))


class FunctionSpec(NamedTuple):
    """A function a formula may call.

    ``analytic`` computes the result when every argument is a number (an mpmath number of the
    private context); None for abs, min and max, whose expressions (in either algebra) compute
    themselves from numbers, exactly. ``max_args`` is None when any number of arguments from
    ``min_args`` upward is accepted; ``scaled`` marks functions whose argument scale is limited
    (:data:`MAX_ARGUMENT_SCALE`).
    """

    min_args: int
    max_args: int | None
    analytic: Callable[..., Any] | None
    scaled: bool = False


ALLOWED_FUNCTIONS: Mapping[str, FunctionSpec] = MappingProxyType(
    {
        "exp": FunctionSpec(1, 1, _analytic(_MP.exp), scaled=True),
        "log": FunctionSpec(1, 1, _analytic(_MP.log)),
        "sqrt": FunctionSpec(1, 1, _analytic(_MP.sqrt)),
        "tanh": FunctionSpec(1, 1, _analytic(_MP.tanh), scaled=True),
        "sinh": FunctionSpec(1, 1, _analytic(_MP.sinh), scaled=True),
        "cosh": FunctionSpec(1, 1, _analytic(_MP.cosh), scaled=True),
        "sin": FunctionSpec(1, 1, _analytic(_MP.sin), scaled=True),
        "cos": FunctionSpec(1, 1, _analytic(_MP.cos), scaled=True),
        "abs": FunctionSpec(1, 1, None),
        "min": FunctionSpec(2, None, None),
        "max": FunctionSpec(2, None, None),
    }
)
"""Every function a formula may call, by the name the user writes."""

_EXPONENTIALS = frozenset({"exp", "sinh", "cosh"})
"""Functions that count as one level of exponential nesting (:data:`MAX_EXPONENTIAL_NESTING`)."""

_PIECEWISE_LINEAR = frozenset({"abs", "max", "min"})
"""Functions whose second derivatives vanish (:func:`derivative_work`)."""


def _function_name(expr: Expression) -> str | None:
    """The formula name of a function node in either algebra (``exp``, ``max``...), else None."""
    name = getattr(expr, "display", None)
    return name if isinstance(name, str) else None


_CONSTANTS: Mapping[str, float] = MappingProxyType({"pi": math.pi})
"""Named constants usable without declaring them (a declared name of the same spelling wins)."""

_ADDITIVE = (ast.Add, ast.Sub)
_MULTIPLICATIVE = (ast.Mult, ast.Div)

_REFUSED_OPERATORS: Mapping[type[ast.AST], str] = MappingProxyType(
    {
        ast.BitXor: "use ** for powers, not ^",
        ast.Mod: "the remainder operator % is not allowed",
        ast.FloorDiv: "floor division // is not allowed; use /",
        ast.MatMult: "the matrix operator @ is not allowed",
        ast.LShift: "the shift operator << is not allowed",
        ast.RShift: "the shift operator >> is not allowed",
        ast.BitOr: "the operator | is not allowed",
        ast.BitAnd: "the operator & is not allowed",
        ast.Invert: "the operator ~ is not allowed",
        ast.Not: "the operator 'not' is not allowed",
    }
)
"""Operators Python knows but formulas do not, with the message that explains the refusal."""

_REFUSED_CONSTRUCTS: Mapping[type[ast.AST], str] = MappingProxyType(
    {
        ast.Attribute: "attribute access is not allowed",
        ast.Lambda: "lambda functions are not allowed",
        ast.ListComp: "list comprehensions are not allowed",
        ast.SetComp: "set comprehensions are not allowed",
        ast.DictComp: "dict comprehensions are not allowed",
        ast.GeneratorExp: "generator expressions are not allowed",
        ast.Subscript: "indexing and slicing (x[...]) are not allowed",
        ast.Slice: "indexing and slicing (x[...]) are not allowed",
        ast.Compare: "comparisons (<, >, ==, ...) are not allowed",
        ast.BoolOp: "boolean operators (and, or) are not allowed",
        ast.IfExp: "conditional expressions (... if ... else ...) are not allowed",
        ast.Starred: "starred expressions (*x) are not allowed",
        ast.NamedExpr: "assignment expressions (:=) are not allowed",
        ast.JoinedStr: "f-strings are not allowed",
        ast.FormattedValue: "f-strings are not allowed",
        ast.List: "lists are not allowed",
        ast.Tuple: "tuples are not allowed (is there a stray comma?)",
        ast.Set: "sets are not allowed",
        ast.Dict: "dicts are not allowed",
        ast.Await: "'await' is not allowed",
        ast.Yield: "'yield' is not allowed",
        ast.YieldFrom: "'yield' is not allowed",
    }
)
"""Python constructs that are never part of a formula, with the message naming each."""


# --------------------------------------------------------------------------------------------
# entry points and text checks


def parse_formula(
    text: str, symbols: Mapping[str, sympy.Symbol], states: Collection[str] | None = None
) -> sympy.Expr:
    """Parse one right-hand-side formula into a sympy expression using only a whitelist.

    ``symbols`` maps every name the formula may use (state variables and parameters) to its
    sympy symbol; ``states`` names the state variables among them (None: every name), which
    the model library differentiates, once and twice, besides one parameter (the control).
    Allowed are numbers, declared names, the constant ``pi``, the operators ``+ - * / **``
    (and unary ``+``/``-``) and calls to :data:`ALLOWED_FUNCTIONS`. Anything else raises
    :class:`FormulaError` with a message that says what was refused and why, so the user can
    fix the scenario file without reading code. Constant parts come back as numbers (exact
    fractions or doubles). Imports sympy.
    """
    from planner.models.formula_sympy import SYMPY

    return _read(text, symbols, states, SYMPY)


def check_formula(
    text: str, names: Collection[str], states: Collection[str] | None = None
) -> Expression:
    """Check one formula as :func:`parse_formula` would, without sympy.

    ``names`` are the declared names, ``states`` as for :func:`parse_formula`. Raises the
    :class:`FormulaError` that :func:`parse_formula` raises, with the same message; where
    :func:`parse_formula` returns a sympy expression, returns the light expression of the same
    shape. Raises :class:`UndecidedError` where the light algebra does not model sympy's result
    (then only :func:`parse_formula` can tell).
    """
    return _read(text, {name: LIGHT.symbol(name) for name in names}, states, LIGHT)


def _read(
    text: str,
    symbols: Mapping[str, Expression],
    states: Collection[str] | None,
    algebra: Algebra,
) -> Expression:
    """The text checks, the walk and the size of the derivatives, in ``algebra``."""
    if not isinstance(text, str):
        raise FormulaError(f"formula must be text, got {type(text).__name__}")
    source = text.strip()
    if not source:
        raise FormulaError("formula is empty")
    if len(source) > MAX_FORMULA_LENGTH:
        raise FormulaError(
            f"formula is too long ({len(source)} characters; the limit is {MAX_FORMULA_LENGTH})"
        )
    if (problem := unusual_character(source)) is not None:
        raise FormulaError(f"not a valid formula: {problem}")
    _check_bracket_depth(source)
    tree = _syntax_tree(source)
    try:
        result = _Builder(source, symbols, algebra).build(tree)
    except RecursionError:  # pragma: no cover - the depth limits keep recursion shallow
        raise FormulaError("formula is nested too deeply or too complex") from None
    names = symbols if states is None else [name for name in states if name in symbols]
    differentiated = {symbols[name] for name in names}
    work = derivative_work(result, differentiated)
    if work > MAX_DERIVATIVE_WORK:
        raise FormulaError(
            f"formula is too complex to differentiate: its derivatives would hold about "
            f"{work:,} terms (the limit is {MAX_DERIVATIVE_WORK:,}); use fewer factors in "
            "long products or fewer nested functions"
        )
    return result


def read_equations(equations: Mapping[str, str], read: Callable[[str], _Parsed]) -> list[_Parsed]:
    """``read`` applied to each right-hand side in order; a refusal is raised again as
    ``FormulaError(variable, reason)``, naming the variable whose formula failed."""
    parsed = []
    for variable, text in equations.items():
        try:
            parsed.append(read(text))
        except FormulaError as error:
            raise FormulaError(variable, str(error)) from None
    return parsed


def check_equations(equations: Mapping[str, str], parameter_names: Sequence[str]) -> None:
    """Check a formula model's right-hand sides as the model library builds them
    (:func:`planner.models.library.formula_spec`), raising the same
    ``FormulaError(variable, reason)``, without sympy when the light algebra decides every
    formula; otherwise the formulas are built with sympy, the reference."""
    variables = tuple(equations)
    names = (*variables, *parameter_names)
    try:
        read_equations(equations, lambda text: check_formula(text, names, variables))
    except UndecidedError:
        from planner.models.library import formula_spec

        formula_spec(equations, tuple(parameter_names))


_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]{0,31}")
_RESERVED = frozenset({*ALLOWED_FUNCTIONS, *_CONSTANTS})


def check_name(name: str) -> str | None:
    """Why ``name`` cannot be a variable or parameter name, or None when it can."""
    if not _NAME.fullmatch(name):
        rule = "names start with a letter and hold only letters, digits and '_' (at most 32)"
        odd = unusual_character(name)
        return rule if odd is None else f"{odd}; {rule}"
    if name in _RESERVED:
        return f"{name!r} is a function or constant name; choose another"
    return None


def unusual_character(text: str) -> str | None:
    """Why ``text`` cannot be part of a formula or a name because of one of its characters, or
    None when every character is printable ASCII (or a tab or line break).

    Python reads identifiers after Unicode NFKC normalisation, so a full-width ``ｘ`` or a
    mathematical bold ``𝐱`` would silently become the name ``x``; invisible characters (zero
    width spaces) would hide what a formula says. The message names the first such character,
    its code point and column, and what to type instead.
    """
    for column, char in enumerate(text, start=1):
        if " " <= char <= "~" or char in "\t\n\r":
            continue
        code = f"U+{ord(char):04X}"
        name = unicodedata.name(char, "")
        label = f"{code} {name}" if name else code
        where = f"({label}, column {column})"
        category = unicodedata.category(char)
        if category == "Cc":
            return f"a control character {where} is not allowed; delete it"
        if category in ("Cf", "Zs", "Zl", "Zp"):
            return (
                f"an invisible or non-ASCII space character {where} is not allowed; delete it "
                "or type a plain space"
            )
        if char in _ASCII_HINTS:
            return (
                f"the character {char!r} {where} is not allowed; "
                f"type {_ASCII_HINTS[char]!r} instead"
            )
        folded = unicodedata.normalize("NFKC", char)
        if folded != char and folded.isascii() and folded.isprintable():
            return (
                f"the character {char!r} {where} looks like {folded!r} but is a different "
                f"character; formulas and names use plain ASCII, type {folded!r} instead"
            )
        return (
            f"the character {char!r} {where} is not allowed; formulas and names use plain "
            "ASCII letters, digits, operators and brackets"
        )
    return None


def _check_bracket_depth(source: str) -> None:
    """Refuse text whose brackets nest deeper than MAX_DEPTH, before the parser recurses into it."""
    depth = 0
    for char in source:
        if char in "([{":
            depth += 1
            if depth > MAX_DEPTH:
                raise FormulaError(
                    f"formula is nested too deeply (more than {MAX_DEPTH} levels of brackets)"
                )
        elif char in ")]}":
            depth -= 1


def _syntax_tree(source: str) -> ast.Expression:
    """Split the text into Python's expression syntax tree; this parses and never runs code."""
    try:
        with warnings.catch_warnings(action="ignore"):
            return ast.parse(source, mode="eval")
    except SyntaxError as error:
        where = f" (column {error.offset})" if error.offset else ""
        raise FormulaError(f"not a valid formula: {error.msg}{where}") from None
    except ValueError as error:  # pragma: no cover - unusual_character refuses NUL first
        raise FormulaError(f"not a valid formula: {error}") from None
    except (RecursionError, MemoryError):
        raise FormulaError("formula is nested too deeply or too complex to parse") from None


# --------------------------------------------------------------------------------------------
# the tree walker


class _Builder:
    """Walks one syntax tree and builds the expression in ``algebra``, refusing anything off
    the list.

    Invariant: every constant part of an expression built here is a Number within
    :data:`MIN_CONSTANT` .. :data:`MAX_CONSTANT` (or zero); sympy never sees a symbolic constant.
    """

    def __init__(self, source: str, symbols: Mapping[str, Expression], algebra: Algebra) -> None:
        self._source = source
        self._symbols = symbols
        self._algebra = algebra
        self._heights: dict[Expression, int] = {}

    def build(self, tree: ast.Expression) -> Expression:
        """Translate the whole tree into one expression."""
        if not isinstance(tree, ast.Expression):  # pragma: no cover - ast.parse in eval mode
            raise FormulaError("not a valid formula: expected a single expression")
        result = self._node(tree.body, 0)
        if not isinstance(result, self._algebra.Expr):  # pragma: no cover - always an Expr
            raise FormulaError("formula does not describe a number")
        return result

    # ----------------------------------------------------------------------------------------
    # dispatch

    def _node(self, node: ast.AST, depth: int) -> Expression:
        """Build one node, enforcing the nesting limit and refusing unknown node types."""
        if depth > MAX_DEPTH:
            raise FormulaError(f"formula is nested too deeply (more than {MAX_DEPTH} levels)")
        if isinstance(node, ast.Constant):
            return self._constant(node)
        if isinstance(node, ast.Name):
            return self._name(node)
        if isinstance(node, ast.BinOp):
            return self._binary(node, depth)
        if isinstance(node, ast.UnaryOp):
            return self._unary(node, depth)
        if isinstance(node, ast.Call):
            return self._call(node, depth)
        reason = _REFUSED_CONSTRUCTS.get(
            type(node), f"{type(node).__name__} expressions are not allowed"
        )
        raise self._refuse(reason, node)

    # ----------------------------------------------------------------------------------------
    # leaves

    def _constant(self, node: ast.Constant) -> Expression:
        """Numbers become exact Integers or Floats; every other literal is refused."""
        value = node.value
        if isinstance(value, bool):
            raise self._refuse("True and False are not allowed", node)
        if isinstance(value, (str, bytes)):
            raise self._refuse("strings are not allowed", node)
        if isinstance(value, complex):
            raise self._refuse("complex numbers (with j) are not allowed", node)
        if isinstance(value, int):
            if abs(value) > MAX_CONSTANT:
                raise self._refuse(self._constant_range_message(), node)
            return self._algebra.integer(value)
        if isinstance(value, float):
            written_as_zero = value == 0.0 and not any(
                digit in "123456789" for digit in self._mantissa(node)
            )
            if (
                not math.isfinite(value)
                or abs(value) > MAX_CONSTANT
                or (abs(value) < MIN_CONSTANT and not written_as_zero)
            ):
                raise self._refuse(self._constant_range_message(), node)
            return self._algebra.real(value)
        raise self._refuse(f"the literal {value!r} is not allowed", node)

    def _mantissa(self, node: ast.Constant) -> str:
        """The digits of a float literal before its exponent (``1.5`` of ``1.5e-400``)."""
        text = ast.get_source_segment(self._source, node) or ""
        return text.lower().partition("e")[0]

    @staticmethod
    def _constant_range_message() -> str:
        """The one message for every out-of-range literal, so users see the same limit."""
        return f"numbers must be finite and {_LIMIT_RANGE}"

    def _name(self, node: ast.Name) -> Expression:
        """A name is a declared symbol or a known constant; anything else is a user mistake."""
        name = node.id
        _refuse_private(name)
        if name in self._symbols:
            return self._symbols[name]
        if name in _CONSTANTS:
            return self._algebra.real(_CONSTANTS[name])
        declared = ", ".join(sorted(self._symbols)) or "(none)"
        hint = ""
        if name == "e":
            hint = "; for Euler's number write exp(1)"
        elif name in ALLOWED_FUNCTIONS:
            hint = f"; {name} is a function, call it as {name}(...)"
        raise FormulaError(f"unknown name {name!r}; declared names are: {declared}{hint}")

    # ----------------------------------------------------------------------------------------
    # operators

    def _binary(self, node: ast.BinOp, depth: int) -> Expression:
        """Dispatch a binary operator: sum and product chains, powers, or a refusal."""
        if isinstance(node.op, _ADDITIVE):
            return self._chain(node, _ADDITIVE, depth)
        if isinstance(node.op, _MULTIPLICATIVE):
            return self._chain(node, _MULTIPLICATIVE, depth)
        if isinstance(node.op, ast.Pow):
            base = self._node(node.left, depth + 1)
            exponent = self._node(node.right, depth + 1)
            return self._power(base, exponent, node)
        reason = _REFUSED_OPERATORS.get(
            type(node.op), f"the operator {type(node.op).__name__} is not allowed"
        )
        raise self._refuse(reason, node)

    def _chain(
        self, node: ast.BinOp, group: tuple[type[ast.operator], ...], depth: int
    ) -> Expression:
        """Build ``a + b - c + ...`` (or ``a * b / c ...``) as one level of nesting.

        Python nests such chains to the left, one tree level per operator, so a plain sum of
        many terms would trip the depth limit. Walking the chain in a loop keeps the depth
        meaning "brackets and function calls", which is what a user would count.
        """
        pending: list[tuple[ast.operator, ast.expr]] = []
        current: ast.expr = node
        while isinstance(current, ast.BinOp) and isinstance(current.op, group):
            pending.append((current.op, current.right))
            current = current.left
        result = self._node(current, depth + 1)
        for op, right in reversed(pending):
            operand = self._node(right, depth + 1)
            if isinstance(op, ast.Div) and operand.is_Number and operand.is_zero:
                raise self._refuse("formula is undefined (division by zero)", node)
            result = self._combine(_BINARY_ACTIONS[type(op)], node, result, operand)
        return result

    def _unary(self, node: ast.UnaryOp, depth: int) -> Expression:
        """Unary minus negates, unary plus is a no-op; other unary operators are refused."""
        if isinstance(node.op, ast.USub):
            return self._combine(_negate, node, self._node(node.operand, depth + 1))
        if isinstance(node.op, ast.UAdd):
            return self._node(node.operand, depth + 1)
        reason = _REFUSED_OPERATORS.get(
            type(node.op), f"the operator {type(node.op).__name__} is not allowed"
        )
        raise self._refuse(reason, node)

    def _power(self, base: Expression, exponent: Expression, node: ast.AST) -> Expression:
        """Build ``base**exponent`` after checking it cannot create a gigantic number.

        The checks run before sympy sees the power, because sympy evaluates integer powers of
        numbers exactly and merges nested powers, and either could take unbounded time.
        """
        if exponent.is_Number:
            size = _magnitude(exponent)
            if size > MAX_EXPONENT:
                raise self._refuse(
                    f"exponent {_short(exponent)} is too large (the limit is |exponent| <= "
                    f"{MAX_EXPONENT})",
                    node,
                )
            combined = _exponent_reach(base) * size
            if combined > MAX_EXPONENT:
                raise self._refuse(
                    f"nested powers combine to an exponent of {combined:g}, more than the limit "
                    f"{MAX_EXPONENT}",
                    node,
                )
            if _number_digits(base) * size > MAX_NUMBER_DIGITS:
                raise self._refuse(f"the power would produce a number {_DIGITS_RANGE}", node)
        elif base.is_Number and not base.is_positive:
            raise self._refuse(
                f"a power with a variable exponent needs a positive base (got {_short(base)})",
                node,
            )
        if base.is_Number and exponent.is_Number:
            return self._fold(lambda: _constant_power(base, exponent), node)
        result = self._combine(self._algebra.power, node, base, exponent)
        self._check_nesting(result, node)
        return result

    # ----------------------------------------------------------------------------------------
    # function calls

    def _call(self, node: ast.Call, depth: int) -> Expression:
        """Call a whitelisted function by name, with the right number of positional arguments."""
        name = self._function_name(node)
        spec = ALLOWED_FUNCTIONS[name]
        if node.keywords:
            raise self._refuse(f"keyword arguments are not allowed; write {name}(...)", node)
        if any(isinstance(arg, ast.Starred) for arg in node.args):
            raise self._refuse("starred arguments (*args) are not allowed", node)
        count = len(node.args)
        if count < spec.min_args or (spec.max_args is not None and count > spec.max_args):
            raise self._refuse(f"{name} takes {_arity(spec)} (got {count})", node)
        arguments = [self._node(arg, depth + 1) for arg in node.args]
        if all(argument.is_Number for argument in arguments):
            return self._fold(lambda: self._value(name, arguments), node)
        if spec.scaled:
            scale = _scale_log10(arguments[0])
            if scale > math.log10(MAX_ARGUMENT_SCALE):
                raise self._refuse(
                    f"the argument of {name} multiplies a name by, or adds, a number of about "
                    f"1e{scale:.0f} (the limit is {_power_of_ten(MAX_ARGUMENT_SCALE)}); "
                    f"{name} of it would be rounding noise or overflow",
                    node,
                )
        result = self._combine(lambda *args: self._apply(name, args), node, *arguments)
        self._check_nesting(result, node)
        return result

    def _apply(self, name: str, arguments: Sequence[Expression]) -> Expression:
        """The expression of ``name(*arguments)``; max and min of several arguments become a
        balanced tree of two-argument calls (a chain would nest as deep as there are
        arguments, and compiling recurses that deep), numbers combined first and repeated
        arguments counted once."""
        function = self._algebra.function(name)
        if name not in ("max", "min"):
            return function(*arguments)
        numbers = [argument for argument in arguments if argument.is_Number]
        level = list(dict.fromkeys(argument for argument in arguments if not argument.is_Number))
        if numbers:
            level.append(reduce(function, numbers))
        while len(level) > 1:
            paired = [function(*level[i : i + 2]) for i in range(0, len(level) - 1, 2)]
            level = paired + level[len(paired) * 2 :]
        return level[0]

    def _value(self, name: str, numbers: Sequence[Expression]) -> Any:
        """``name`` of checked numbers: an mpmath number for the analytic functions; abs, min
        and max compute themselves exactly."""
        analytic = ALLOWED_FUNCTIONS[name].analytic
        return self._apply(name, numbers) if analytic is None else analytic(*numbers)

    def _function_name(self, node: ast.Call) -> str:
        """Return the called function's name, refusing anything but a whitelisted plain name."""
        func = node.func
        if isinstance(func, ast.Attribute):
            raise self._refuse(_REFUSED_CONSTRUCTS[ast.Attribute], func)
        if not isinstance(func, ast.Name):
            if isinstance(func, ast.Constant) and not isinstance(func.value, (str, bytes)):
                raise self._refuse(
                    "a number cannot be called; write * for multiplication, as in 2*(x + 1)",
                    node,
                )
            raise self._refuse("only functions called by name are allowed", node)
        _refuse_private(func.id)
        if func.id in ALLOWED_FUNCTIONS:
            return func.id
        allowed = ", ".join(sorted(ALLOWED_FUNCTIONS))
        hint = ""
        if func.id in self._symbols:
            hint = f"; {func.id} is a declared name, write {func.id}*(...) to multiply"
        raise FormulaError(f"unknown function {func.id!r}; allowed functions: {allowed}{hint}")

    # ----------------------------------------------------------------------------------------
    # building, folding and checking

    def _combine(
        self, action: Callable[..., Expression], node: ast.AST, *args: Expression
    ) -> Expression:
        """Apply one operation: folded to a number when every operand is one, else built by
        the algebra and checked (numbers in range, no merged huge exponent, constants folded)."""
        if all(arg.is_Number for arg in args):
            return self._fold(lambda: action(*args), node)
        try:
            result = action(*args)
        except (ArithmeticError, TypeError, ValueError) as error:
            raise self._refuse(f"cannot be computed ({error})", node) from None
        return self._checked(result, node)

    def _fold(self, compute: Callable[[], Any], node: ast.AST) -> Expression:
        """Compute a constant part and return it as a checked Number."""
        try:
            value = compute()
        except ZeroDivisionError:
            raise self._refuse("formula is undefined (division by zero)", node) from None
        except (ArithmeticError, TypeError, ValueError) as error:
            raise self._refuse(f"cannot be computed ({error})", node) from None
        return self._number(value, node)

    def _number(self, value: Any, node: ast.AST) -> Expression:
        """A folded value (an mpmath number of the private context or a Number) as a Number,
        refused when undefined, complex or out of range."""
        if isinstance(value, _MP.mpc):
            if value.imag != 0:
                raise self._refuse(_COMPLEX, node)
            value = value.real
        if isinstance(value, _MP.mpf):
            if not _MP.isfinite(value):
                raise self._refuse(_UNDEFINED, node)
            if value != 0:
                self._check_magnitude(abs(value), node)
            return self._algebra.real(float(value))
        if self._algebra.is_imaginary_unit(value):
            raise self._refuse(_COMPLEX, node)
        if not (value.is_Rational or value.is_Float):  # nan (0/0), oo, zoo (1/0)
            raise self._refuse(_UNDEFINED, node)
        if not value.is_zero:
            self._check_magnitude(_magnitude(value), node)
        if value.is_Rational and max(value.p.bit_length(), value.q.bit_length()) > (
            _MAX_FRACTION_BITS
        ):
            raise self._refuse(
                "the exact fraction has more than 300 digits; write it as a decimal", node
            )
        return value

    def _check_magnitude(self, size: Any, node: ast.AST) -> None:
        """Refuse a nonzero constant part whose magnitude ``size`` is out of range."""
        if size > MAX_CONSTANT:
            raise FormulaError(
                f"the constant part {self._segment(node)!r} is too large (beyond "
                f"{_power_of_ten(MAX_CONSTANT)} in magnitude)"
            )
        if size < MIN_CONSTANT:
            raise FormulaError(
                f"the constant part {self._segment(node)!r} is too small (nonzero but below "
                f"{_power_of_ten(MIN_CONSTANT)} in magnitude)"
            )

    def _evaluate(self, expr: Expression, node: ast.AST) -> Expression:
        """Value of a constant expression that sympy formed from checked numbers, computed
        bottom-up with every intermediate number checked."""
        if expr.is_Number or (expr.is_Atom and not expr.is_NumberSymbol):
            return self._number(expr, node)
        self._algebra.constant(expr)
        if expr.is_NumberSymbol:
            return self._number(_MP.mpf(float(expr)), node)
        values = [self._evaluate(arg, node) for arg in expr.args]
        if expr.is_Add:
            return reduce(lambda a, b: self._fold(lambda: a + b, node), values)
        if expr.is_Mul:
            return reduce(lambda a, b: self._fold(lambda: a * b, node), values)
        if expr.is_Pow:
            return self._fold(lambda: _constant_power(*values), node)
        name = _function_name(expr)
        if name not in ALLOWED_FUNCTIONS:
            raise self._refuse(f"cannot be computed as a number ({expr.func})", node)
        return self._fold(lambda: self._value(name, values), node)

    def _checked(self, expr: Expression, node: ast.AST) -> Expression:
        """Check an expression the algebra built from checked parts; fold constants it formed.

        sympy reports the first problem in its order of arguments. The light algebra orders
        arguments differently, so it looks at every part and, when they hold different
        problems, leaves the verdict to sympy.
        """
        if not expr.free_symbols:
            return self._evaluate(expr, node)
        constants: dict[Expression, Expression] = {}
        problems: list[FormulaError] = []
        stack = [expr]
        while stack:
            part = stack.pop()
            try:
                if part.is_Atom:
                    if not part.is_Symbol:
                        self._evaluate(part, node)
                elif not part.free_symbols:
                    constants[part] = self._evaluate(part, node)
                else:
                    if part.is_Pow and part.exp.is_Number and abs(part.exp) > MAX_EXPONENT:
                        raise self._refuse(
                            f"powers combine to an exponent of {_short(part.exp)}, more than "
                            f"the limit {MAX_EXPONENT}",
                            node,
                        )
                    stack.extend(part.args)
            except FormulaError as problem:
                if self._algebra.ordered:
                    raise
                problems.append(problem)
        if problems:
            if len({str(problem) for problem in problems}) > 1:
                raise UndecidedError("several problems in one step")
            raise problems[0]
        if not constants:
            return expr
        try:
            return self._algebra.xreplace(expr, constants)
        except (ArithmeticError, TypeError, ValueError) as error:  # pragma: no cover
            raise self._refuse(f"cannot be computed ({error})", node) from None

    def _check_nesting(self, expr: Expression, node: ast.AST) -> None:
        """Refuse exponentials nested deeper than MAX_EXPONENTIAL_NESTING."""
        height = self._exponential_height(expr)
        if height > MAX_EXPONENTIAL_NESTING:
            raise self._refuse(
                f"exponentials are nested {height} deep, more than {MAX_EXPONENTIAL_NESTING} "
                "(exp, sinh, cosh and powers with a variable exponent count)",
                node,
            )

    def _exponential_height(self, expr: Expression) -> int:
        """How many exponentials are nested in ``expr`` (remembered per sub-expression)."""
        if expr.is_Atom:
            return 0
        known = self._heights.get(expr)
        if known is not None:
            return known
        inner = max(self._exponential_height(arg) for arg in expr.args)
        exponential = _function_name(expr) in _EXPONENTIALS or (
            expr.is_Pow and not expr.exp.is_Number
        )
        height = inner + 1 if exponential else inner
        self._heights[expr] = height
        return height

    def _segment(self, node: ast.AST) -> str:
        """The formula text of ``node``, shortened for a message."""
        segment = ast.get_source_segment(self._source, node) or self._source
        if len(segment) > _SEGMENT_CHARS:
            segment = segment[: _SEGMENT_CHARS - 3] + "..."
        return segment

    def _refuse(self, reason: str, node: ast.AST) -> FormulaError:
        """Build the error for ``reason``, quoting the offending part of the formula."""
        return FormulaError(f"{reason}, in {self._segment(node)!r}")


def _negate(value: Expression) -> Expression:
    return -value


_BINARY_ACTIONS: Mapping[type[ast.operator], Callable[[Expression, Expression], Expression]] = (
    MappingProxyType(
        {
            ast.Add: lambda a, b: a + b,
            ast.Sub: lambda a, b: a - b,
            ast.Mult: lambda a, b: a * b,
            ast.Div: lambda a, b: a / b,
        }
    )
)
"""The operation for each operator of a sum or product chain (both algebras' operators)."""


def _constant_power(base: Expression, exponent: Expression) -> Any:
    """``base**exponent`` of two checked numbers: exact for a rational base and an integer
    exponent (the power guards bound its size), else in double precision (mpmath)."""
    if base.is_zero and exponent.is_negative:
        raise ZeroDivisionError
    if base.is_Rational and exponent.is_Integer:
        return base**exponent
    return _MP.power(_to_mpf(base), _to_mpf(exponent))


def _scale_log10(expr: Expression) -> float:
    """log10 of the largest factor by which ``expr`` scales its names, or of the largest number
    it holds: 20 for 1e20*x, for x + 1e20 and for (1e10*x)**2. Numbers inside other functions
    do not count; each function's own argument is checked when it is built."""
    if expr.is_Number:
        return math.log10(abs(float(expr))) if not expr.is_zero else -math.inf
    if expr.is_Add:
        return max(_scale_log10(term) for term in expr.args)
    if expr.is_Mul:
        # fsum rounds once, whatever the order in which an algebra keeps the factors
        return math.fsum(_scale_log10(factor) for factor in expr.args)
    if expr.is_Pow and expr.exp.is_Number:
        return _scale_log10(expr.base) * float(expr.exp)
    return 0.0


def _refuse_private(name: str) -> None:
    """Refuse names like ``__import__``: they are how escapes from sandboxes usually begin."""
    if name.startswith("_"):
        raise FormulaError(f"names starting with '_' are not allowed (got {name!r})")


def _arity(spec: FunctionSpec) -> str:
    """Describe how many arguments a function takes, for error messages."""
    if spec.max_args is None:
        return f"at least {spec.min_args} arguments"
    if spec.min_args == spec.max_args:
        plural = "" if spec.min_args == 1 else "s"
        return f"exactly {spec.min_args} argument{plural}"
    return f"{spec.min_args} to {spec.max_args} arguments"  # pragma: no cover - none yet


def _short(number: Expression) -> str:
    """A number as text, shortened so a message never quotes hundreds of digits."""
    text = str(number)
    return text if len(text) <= _SEGMENT_CHARS else text[: _SEGMENT_CHARS - 3] + "..."


def _magnitude(number: Expression) -> float:
    """|number| as a float (inf when it does not fit), without building big intermediate values."""
    try:
        return abs(float(number))
    except (OverflowError, TypeError, ValueError):
        return math.inf


def _number_digits(expr: Expression) -> float:
    """Upper estimate of the decimal order of magnitude of the numbers inside ``expr``.

    Only the parts sympy multiplies out automatically count: numeric factors of a product and
    numeric bases of powers. A number inside a sum or a function stays where it is when the
    whole is raised to a power, so it cannot grow.
    """
    if expr.is_Number:
        return _digits_of_number(expr)
    if expr.is_Mul:
        return sum(_number_digits(factor) for factor in expr.args)
    if expr.is_Pow and expr.exp.is_Number:
        return _number_digits(expr.base) * _magnitude(expr.exp)
    return 0.0


def _digits_of_number(number: Expression) -> float:
    """Decimal order of magnitude of a Number, large or tiny: 1e-5 and 1e5 both give 5."""
    if number.is_Rational:
        numerator, denominator = number.as_numer_denom()
        numerator = abs(int(numerator))
        # math.log10 accepts integers of any size without converting them to float first.
        return max(math.log10(numerator) if numerator else 0.0, math.log10(int(denominator)))
    if number.is_Float:
        value = mpmath.mpf(number)
        if not mpmath.isfinite(value):
            return math.inf
        if value == 0:
            return 0.0
        return abs(float(mpmath.log10(abs(value))))
    return math.inf  # infinities and nan


def _exponent_reach(expr: Expression) -> float:
    """The factor by which sympy would multiply a constant exponent applied to ``expr``.

    sympy merges ``(x**8)**8`` into ``x**64`` and distributes a power over a product, so the
    exponent the user wrote is not the one that ends up being computed. Numbers count as zero
    (their growth is bounded by :func:`_number_digits`); any other non-power counts as one.
    """
    if expr.is_Number:
        return 0.0
    if expr.is_Mul:
        return max(_exponent_reach(factor) for factor in expr.args)
    if expr.is_Pow and expr.exp.is_Number:
        return _magnitude(expr.exp) * _exponent_reach(expr.base)
    return 1.0


# --------------------------------------------------------------------------------------------
# how much work differentiating a formula takes


_TERM_OVERHEAD = 2
"""Nodes each product-rule or chain-rule term adds besides its factors (the product itself and a
numeric coefficient). Sizes are whole numbers, so the estimate is exact and does not depend on
the order in which an algebra keeps the arguments of a sum or product."""


class _DerivativeSizes(NamedTuple):
    """Estimated node counts of an expression and of its derivatives: ``first[v]`` of d/dv,
    ``second[(v, w)]`` of d2/dv dw (only pairs with a differentiated name come up)."""

    size: int
    first: dict[Expression, int]
    second: dict[tuple[Expression, Expression], int]


def derivative_work(expr: Expression, states: Collection[Expression]) -> int:
    """Estimated total size of the derivatives the model library builds from ``expr``.

    Those are d/ds and d2/ds ds' for the states s, d/du and d2/ds du for the control u (any
    other name: the worst one counts). The estimate follows the product rule and the chain
    rule: the derivative of a product of n factors is n products of n factors, each further
    derivative multiplies by n again; it ignores cancellation, so it is an upper estimate.
    """
    sizes = _derivative_sizes(expr, frozenset(states), {})
    controls = [name for name in sizes.first if name not in states] or [None]
    state_work = sum(sizes.first.get(s, 0) for s in states) + sum(
        (1 if v == w else 2) * size
        for (v, w), size in sizes.second.items()
        if v in states and w in states
    )
    control_work = max(
        sizes.first.get(u, 0)
        + sum(size for (v, w), size in sizes.second.items() if u in (v, w) and v != w)
        for u in controls
    )
    return state_work + control_work


def _derivative_sizes(
    expr: Expression, states: frozenset[Expression], memo: dict[Expression, _DerivativeSizes]
) -> _DerivativeSizes:
    """Sizes of ``expr`` and its derivatives, bottom-up (see :func:`derivative_work`)."""
    known = memo.get(expr)
    if known is not None:
        return known
    if expr.is_Symbol:
        result = _DerivativeSizes(1, {expr: 1}, {})
    elif expr.is_Atom:
        result = _DerivativeSizes(1, {}, {})
    else:
        parts = [_derivative_sizes(arg, states, memo) for arg in expr.args]
        if expr.is_Add:
            result = _sum_sizes(parts)
        elif expr.is_Mul:
            result = _product_sizes(parts, states)
        else:
            if expr.is_Pow and expr.exp.is_Number:
                parts = parts[:1]  # a constant exponent is no argument to differentiate
            piecewise_linear = _function_name(expr) in _PIECEWISE_LINEAR
            growth = 2 if expr.is_Pow and len(parts) == 2 else 1
            result = _function_sizes(parts, states, not piecewise_linear, growth)
    memo[expr] = result
    return result


def _ordered(v: Expression, w: Expression) -> tuple[Expression, Expression]:
    """The pair (v, w) in one fixed order, so d2/dv dw and d2/dw dv share an entry."""
    return (v, w) if v.name <= w.name else (w, v)


def _add_cross_terms(
    second: dict[tuple[Expression, Expression], int],
    left: _DerivativeSizes,
    right: _DerivativeSizes,
    states: frozenset[Expression],
    base: int,
) -> None:
    """Count the terms d(left)/dv * d(right)/dw (``base`` nodes besides the two derivatives)
    into the second derivatives d2/dv dw, for every pair of names with a state among them."""
    for v, left_size in left.first.items():
        for w, right_size in right.first.items():
            if v in states or w in states:
                key = _ordered(v, w)
                second[key] = second.get(key, 0) + base + left_size + right_size


def _sum_sizes(parts: list[_DerivativeSizes]) -> _DerivativeSizes:
    """A sum differentiates term by term."""
    first: dict[Expression, int] = {}
    second: dict[tuple[Expression, Expression], int] = {}
    for part in parts:
        for name, size in part.first.items():
            first[name] = first.get(name, 1) + size
        for pair, size in part.second.items():
            second[pair] = second.get(pair, 1) + size
    return _DerivativeSizes(1 + sum(part.size for part in parts), first, second)


def _product_sizes(
    parts: list[_DerivativeSizes], states: frozenset[Expression]
) -> _DerivativeSizes:
    """Product rule: d(f g h) = f' g h + f g' h + f g h'; each term is nearly the whole."""
    whole = 1 + sum(part.size for part in parts)
    first: dict[Expression, int] = {}
    for part in parts:
        for name, size in part.first.items():
            first[name] = first.get(name, 0) + whole - part.size + size + _TERM_OVERHEAD
    second: dict[tuple[Expression, Expression], int] = {}
    for i, left in enumerate(parts):
        for j, right in enumerate(parts):
            if i == j:
                for pair, size in left.second.items():
                    extra = whole - left.size + size + _TERM_OVERHEAD
                    second[pair] = second.get(pair, 0) + extra
                continue
            base = whole - left.size - right.size + _TERM_OVERHEAD
            _add_cross_terms(second, left, right, states, base)
    return _DerivativeSizes(whole, first, second)


def _function_sizes(
    parts: list[_DerivativeSizes], states: frozenset[Expression], curved: bool, growth: int
) -> _DerivativeSizes:
    """Chain rule for g(u1, u2, ...): dg = sum g_i(u) du_i, and once more for d2g.

    Each g_i(u) is about ``growth`` times as large as g(u) itself (two for a power with a
    variable exponent, b**e*(e'*log(b) + e*b'/b)), plus a coefficient. For a piecewise linear
    g (abs, min, max) the second derivatives g_ij vanish, and with them the cross terms.
    """
    whole = 1 + sum(part.size for part in parts)
    outer = growth * whole + _TERM_OVERHEAD
    first: dict[Expression, int] = {}
    second: dict[tuple[Expression, Expression], int] = {}
    for left in parts:
        for name, size in left.first.items():
            first[name] = first.get(name, 0) + outer + size
        for pair, size in left.second.items():
            second[pair] = second.get(pair, 0) + outer + size
        for right in parts if curved else ():
            _add_cross_terms(second, left, right, states, growth * outer)
    return _DerivativeSizes(whole, first, second)
