"""Whitelist parser that turns one user-written right-hand side into a sympy expression.

Users type formulas such as ``a - b*x + x**2/(1 + x**2)`` into scenario files. That text is
untrusted, so it is never handed to Python's evaluator nor to sympy's string parser (both can
run arbitrary code). Instead the text is split into a syntax tree with :func:`ast.parse` (pure
parsing, nothing runs) and the tree is walked here; each node is either translated into the
matching sympy object or refused with a message that says what is wrong and what is allowed.

Besides the whitelist, a few guards keep a hostile or mistyped formula from exhausting time or
memory: a length limit, a nesting limit, a limit on constant exponents (``9**9**9`` would
otherwise ask for a number with hundreds of millions of digits), a bound on the size of
numbers that powers and functions may produce, and a refusal of formulas that are undefined
(``1/0``) or complex-valued (``sqrt(-1)``), which no real-valued lake model can use.
"""

from __future__ import annotations

import ast
import math
import operator
import warnings
from collections.abc import Callable, Mapping
from types import MappingProxyType
from typing import NamedTuple

import mpmath
import sympy

from planner.errors import FormulaError

MAX_FORMULA_LENGTH = 500
"""Longest formula (in characters, after stripping surrounding whitespace) that is accepted."""

MAX_EXPONENT = 64
"""Largest |exponent| allowed when an exponent is a numeric constant, also after sympy merges
nested powers such as ``(x**8)**8`` into one."""

MAX_DEPTH = 40
"""Deepest nesting of brackets or of syntax-tree nodes; keeps every recursion shallow."""

MAX_CONSTANT = 1e300
"""Largest magnitude of a number written in a formula; beyond it floats stop being useful."""

MAX_NUMBER_DIGITS = 300
"""Largest decimal order of magnitude (either way, large or tiny) of a number that a power may
produce or that may be passed to a function. Keeps exact integer powers and arbitrary-precision
function evaluations cheap."""

_SEGMENT_CHARS = 40
"""How much of the offending formula text a refusal message quotes."""

_LOG10_2 = math.log10(2.0)
_DIGITS_RANGE = f"outside 1e-{MAX_NUMBER_DIGITS} .. 1e{MAX_NUMBER_DIGITS} in magnitude"


class FunctionSpec(NamedTuple):
    """A function a formula may call: the sympy callable and how many arguments it takes.

    ``max_args`` is None when any number of arguments from ``min_args`` upward is accepted.
    """

    function: Callable[..., sympy.Expr]
    min_args: int
    max_args: int | None


ALLOWED_FUNCTIONS: Mapping[str, FunctionSpec] = MappingProxyType(
    {
        "exp": FunctionSpec(sympy.exp, 1, 1),
        "log": FunctionSpec(sympy.log, 1, 1),
        "sqrt": FunctionSpec(sympy.sqrt, 1, 1),
        "tanh": FunctionSpec(sympy.tanh, 1, 1),
        "sinh": FunctionSpec(sympy.sinh, 1, 1),
        "cosh": FunctionSpec(sympy.cosh, 1, 1),
        "sin": FunctionSpec(sympy.sin, 1, 1),
        "cos": FunctionSpec(sympy.cos, 1, 1),
        "abs": FunctionSpec(sympy.Abs, 1, 1),
        "min": FunctionSpec(sympy.Min, 2, None),
        "max": FunctionSpec(sympy.Max, 2, None),
    }
)
"""Every function a formula may call, by the name the user writes."""

_CONSTANTS: Mapping[str, sympy.Expr] = MappingProxyType({"pi": sympy.pi})
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


def parse_formula(text: str, symbols: Mapping[str, sympy.Symbol]) -> sympy.Expr:
    """Parse one right-hand-side formula into a sympy expression using only a whitelist.

    ``symbols`` maps every name the formula may use (state variables and parameters) to its
    sympy symbol. Allowed are numbers, declared names, the constant ``pi``, the operators
    ``+ - * / **`` (and unary ``+``/``-``) and calls to :data:`ALLOWED_FUNCTIONS`. Anything
    else raises :class:`FormulaError` with a message that says what was refused and why, so
    the user can fix the scenario file without reading code.
    """
    if not isinstance(text, str):
        raise FormulaError(f"formula must be text, got {type(text).__name__}")
    source = text.strip()
    if not source:
        raise FormulaError("formula is empty")
    if len(source) > MAX_FORMULA_LENGTH:
        raise FormulaError(
            f"formula is too long ({len(source)} characters; the limit is {MAX_FORMULA_LENGTH})"
        )
    _check_bracket_depth(source)
    tree = _syntax_tree(source)
    return _Builder(source, symbols).build(tree)


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
    except ValueError as error:  # e.g. NUL characters in the text
        raise FormulaError(f"not a valid formula: {error}") from None
    except (RecursionError, MemoryError):
        raise FormulaError("formula is nested too deeply or too complex to parse") from None


class _Builder:
    """Walks one syntax tree and builds the sympy expression, refusing anything off the list."""

    def __init__(self, source: str, symbols: Mapping[str, sympy.Symbol]) -> None:
        self._source = source
        self._symbols = symbols

    def build(self, tree: ast.Expression) -> sympy.Expr:
        """Translate the whole tree and check the result is a defined, real-valued expression."""
        if not isinstance(tree, ast.Expression):  # pragma: no cover - ast.parse in eval mode
            raise FormulaError("not a valid formula: expected a single expression")
        result = self._node(tree.body, 0)
        if not isinstance(result, sympy.Expr):  # pragma: no cover - every branch builds an Expr
            raise FormulaError("formula does not describe a number")
        return result

    # ----------------------------------------------------------------------------------------
    # dispatch

    def _node(self, node: ast.AST, depth: int) -> sympy.Expr:
        """Build one node, enforcing the nesting limit and refusing unknown node types."""
        if depth > MAX_DEPTH:
            raise FormulaError(f"formula is nested too deeply (more than {MAX_DEPTH} levels)")
        if isinstance(node, ast.Constant):
            result = self._constant(node)
        elif isinstance(node, ast.Name):
            result = self._name(node)
        elif isinstance(node, ast.BinOp):
            result = self._binary(node, depth)
        elif isinstance(node, ast.UnaryOp):
            result = self._unary(node, depth)
        elif isinstance(node, ast.Call):
            result = self._call(node, depth)
        else:
            reason = _REFUSED_CONSTRUCTS.get(
                type(node), f"{type(node).__name__} expressions are not allowed"
            )
            raise self._refuse(reason, node)
        self._check_defined(result, node)
        return result

    # ----------------------------------------------------------------------------------------
    # leaves

    def _constant(self, node: ast.Constant) -> sympy.Expr:
        """Numbers become exact sympy Integers or Floats; every other literal is refused."""
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
            return sympy.Integer(value)
        if isinstance(value, float):
            if not math.isfinite(value) or abs(value) > MAX_CONSTANT:
                raise self._refuse(self._constant_range_message(), node)
            return sympy.Float(value)
        raise self._refuse(f"the literal {value!r} is not allowed", node)

    @staticmethod
    def _constant_range_message() -> str:
        """The one message for every out-of-range literal, so users see the same limit."""
        return f"numbers must be finite and at most {MAX_CONSTANT:g} in magnitude"

    def _name(self, node: ast.Name) -> sympy.Expr:
        """A name is a declared symbol or a known constant; anything else is a user mistake."""
        name = node.id
        _refuse_private(name)
        if name in self._symbols:
            return self._symbols[name]
        if name in _CONSTANTS:
            return _CONSTANTS[name]
        declared = ", ".join(sorted(self._symbols)) or "(none)"
        hint = ""
        if name == "e":
            hint = "; for Euler's number write exp(1)"
        elif name in ALLOWED_FUNCTIONS:
            hint = f"; {name} is a function, call it as {name}(...)"
        raise FormulaError(f"unknown name {name!r}; declared names are: {declared}{hint}")

    # ----------------------------------------------------------------------------------------
    # operators

    def _binary(self, node: ast.BinOp, depth: int) -> sympy.Expr:
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
    ) -> sympy.Expr:
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
            result = self._apply(_BINARY_ACTIONS[type(op)], node, result, operand)
            self._check_defined(result, node)
        return result

    def _unary(self, node: ast.UnaryOp, depth: int) -> sympy.Expr:
        """Unary minus negates, unary plus is a no-op; other unary operators are refused."""
        if isinstance(node.op, ast.USub):
            return -self._node(node.operand, depth + 1)
        if isinstance(node.op, ast.UAdd):
            return self._node(node.operand, depth + 1)
        reason = _REFUSED_OPERATORS.get(
            type(node.op), f"the operator {type(node.op).__name__} is not allowed"
        )
        raise self._refuse(reason, node)

    def _power(self, base: sympy.Expr, exponent: sympy.Expr, node: ast.AST) -> sympy.Expr:
        """Build ``base**exponent`` after checking it cannot create a gigantic number.

        Only constant exponents are checked: a symbolic exponent leaves the power unevaluated.
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
        return self._apply(sympy.Pow, node, base, exponent)

    # ----------------------------------------------------------------------------------------
    # function calls

    def _call(self, node: ast.Call, depth: int) -> sympy.Expr:
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
        for argument in arguments:
            if _number_digits(argument) > MAX_NUMBER_DIGITS:
                raise self._refuse(f"the argument of {name} is a number {_DIGITS_RANGE}", node)
        return self._apply(spec.function, node, *arguments)

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
    # helpers

    def _apply(
        self, action: Callable[..., sympy.Expr], node: ast.AST, *args: sympy.Expr
    ) -> sympy.Expr:
        """Run one sympy constructor, turning sympy's own refusals into FormulaError.

        sympy raises e.g. ValueError for ``min(sqrt(-1), 1)``; callers of the parser should
        only ever see FormulaError for bad input.
        """
        try:
            return action(*args)
        except FormulaError:  # pragma: no cover - sympy never raises it, kept for clarity
            raise
        except (ArithmeticError, TypeError, ValueError, RecursionError) as error:
            raise self._refuse(f"cannot be computed ({error})", node) from None

    def _check_defined(self, expr: sympy.Expr, node: ast.AST) -> None:
        """Refuse undefined (1/0, log(0)) or complex-valued (sqrt(-1)) parts as soon as built."""
        if expr.has(sympy.zoo, sympy.nan, sympy.oo, -sympy.oo):
            raise self._refuse("formula is undefined (division by zero?)", node)
        if expr.has(sympy.I) or (not expr.free_symbols and expr.is_extended_real is False):
            raise self._refuse("formula is complex-valued (root or log of a negative?)", node)

    def _refuse(self, reason: str, node: ast.AST) -> FormulaError:
        """Build the error for ``reason``, quoting the offending part of the formula."""
        segment = ast.get_source_segment(self._source, node)
        if not segment:
            return FormulaError(reason)
        if len(segment) > _SEGMENT_CHARS:
            segment = segment[: _SEGMENT_CHARS - 3] + "..."
        return FormulaError(f"{reason}, in {segment!r}")


_BINARY_ACTIONS: Mapping[type[ast.operator], Callable[[sympy.Expr, sympy.Expr], sympy.Expr]] = (
    MappingProxyType(
        {
            ast.Add: operator.add,
            ast.Sub: operator.sub,
            ast.Mult: operator.mul,
            ast.Div: operator.truediv,
        }
    )
)
"""The sympy operation for each operator of a sum or product chain."""


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


def _short(number: sympy.Expr) -> str:
    """A number as text, shortened so a message never quotes hundreds of digits."""
    text = str(number)
    return text if len(text) <= _SEGMENT_CHARS else text[: _SEGMENT_CHARS - 3] + "..."


def _magnitude(number: sympy.Expr) -> float:
    """|number| as a float (inf when it does not fit), without building big intermediate values."""
    try:
        return abs(float(number))
    except (OverflowError, TypeError, ValueError):
        return math.inf


def _number_digits(expr: sympy.Expr) -> float:
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


def _digits_of_number(number: sympy.Expr) -> float:
    """Decimal order of magnitude of a sympy Number, large or tiny: 1e-5 and 1e5 both give 5."""
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


def _exponent_reach(expr: sympy.Expr) -> float:
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
