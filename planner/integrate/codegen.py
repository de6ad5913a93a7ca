"""Numeric functions specialised to one parameter set: what the engine's steppers call.

The model library compiles each model once with every parameter as an argument (what
continuation needs). Inside an integration most parameters are fixed numbers; substituting them
before compiling folds constants such as ``m**q`` away, and an integer exponent (``P**8.0`` with
q = 8) is printed as repeated squaring, which numpy evaluates several times faster than a general
power. Parameters that vary (the control, per-member draws, pulsed parameters) stay arguments.

Two flavours are generated from the same expressions:
- batched: numpy code over arrays of members, returning stacked (n, m) or (n, n, m) arrays;
- scalar: plain Python floats (math module), for single runs through scipy's LSODA, where numpy's
  per-call overhead on one-element arrays would dominate.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from functools import lru_cache

import numpy as np

from planner.models import System

MAX_SQUARING_EXPONENT = 64  # integer powers up to this are printed as products of squares
CACHE_SIZE = 64


def integer_power(base, exponent: int):
    """``base**exponent`` for an integer exponent 2..MAX_SQUARING_EXPONENT by repeated squaring
    (three multiplications for the eighth power, where numpy's general power is far slower)."""
    result, square, n = None, base, exponent
    while n:
        if n & 1:
            result = square if result is None else result * square
        n >>= 1
        if n:
            square = square * square
    return result


def _numpy_printer():
    from sympy.printing.numpy import NumPyPrinter

    class Printer(NumPyPrinter):
        def _print_Pow(self, expr, rational=False):
            exponent = expr.exp
            if exponent.is_Integer and 2 <= abs(int(exponent)) <= MAX_SQUARING_EXPONENT:
                text = f"integer_power({self._print(expr.base)}, {abs(int(exponent))})"
                return text if int(exponent) > 0 else f"1.0/{text}"
            return super()._print_Pow(expr, rational=rational)

    return Printer({"fully_qualified_modules": False, "inline": True})


def _integer_exponents(expression):
    """Exponents given as floats with integer values (q = 8.0) become integers."""
    import sympy

    def integral(e) -> bool:
        return e.is_Pow and e.exp.is_Float and float(e.exp) == int(e.exp)

    return expression.replace(integral, lambda e: sympy.Pow(e.base, sympy.Integer(int(e.exp))))


@dataclass(frozen=True)
class Specialised:
    """The right-hand side, Jacobian and d/du of one model with some parameters fixed.

    Argument order of every function: the state variables, the control, then ``free``, then
    the hoisted values: ``hoist(*free)`` computes the sub-expressions that depend on the free
    parameters only (``m**q`` with a per-member ``m``), once per stretch instead of per call.
    """

    n: int
    free: tuple[str, ...]
    hoist: Callable[..., list]
    batched_rhs: Callable[..., list]
    batched_jac: Callable[..., list]
    batched_dfdu: Callable[..., list]
    scalar_rhs: Callable[..., list]
    scalar_jac: Callable[..., list]
    arguments: tuple = ()  # the sympy symbols of the argument order above
    rhs_expressions: tuple = ()  # the right-hand side in those symbols (what is compiled)

    @property
    def key(self) -> str:
        """Identifies the expressions and argument order (for compiled-code caches)."""
        return repr((tuple(map(str, self.arguments)), tuple(map(str, self.rhs_expressions))))


def _hoist(expression, parameters: set, found: dict):
    """Replace the largest sub-expressions of ``expression`` that depend on ``parameters`` only
    (no state, no control) by symbols; ``found`` maps each such sub-expression to its symbol."""
    import sympy

    if expression.is_Atom:
        return expression
    symbols = expression.free_symbols
    if symbols and symbols <= parameters:
        if expression not in found:
            found[expression] = sympy.Symbol(f"_hoisted{len(found)}")
        return found[expression]
    return expression.func(*(_hoist(arg, parameters, found) for arg in expression.args))


@lru_cache(maxsize=CACHE_SIZE)
def _specialise(spec, control: str, fixed: tuple[tuple[str, float], ...], free: tuple[str, ...]):
    import sympy

    states = [sympy.Symbol(v) for v in spec.variables]
    free_symbols = [sympy.Symbol(p) for p in free]
    substitutions = {sympy.Symbol(name): sympy.Float(value) for name, value in fixed}
    rhs = [_integer_exponents(e.xreplace(substitutions)) for e in spec.equations]
    jac = [sympy.diff(f, x) for f in rhs for x in states]
    dfdu = [sympy.diff(f, sympy.Symbol(control)) for f in rhs]
    hoisted: dict = {}
    rhs, jac, dfdu = (
        [_hoist(e, set(free_symbols), hoisted) for e in group] for group in (rhs, jac, dfdu)
    )
    arguments = [*states, sympy.Symbol(control), *free_symbols, *hoisted.values()]

    def compile_(expressions, module):
        if module == "numpy":
            return sympy.lambdify(
                arguments,
                expressions,
                modules=[{"integer_power": integer_power}, "numpy"],
                cse=True,
                printer=_numpy_printer(),
            )
        return sympy.lambdify(arguments, expressions, modules="math", cse=True)

    hoist = sympy.lambdify(
        free_symbols,
        list(hoisted.keys()),
        modules=[{"integer_power": integer_power}, "numpy"],
        printer=_numpy_printer(),
    )
    return Specialised(
        n=len(states),
        free=free,
        hoist=hoist,
        batched_rhs=compile_(rhs, "numpy"),
        batched_jac=compile_(jac, "numpy"),
        batched_dfdu=compile_(dfdu, "numpy"),
        scalar_rhs=compile_(rhs, "math"),
        scalar_jac=compile_(jac, "math"),
        arguments=tuple(arguments),
        rhs_expressions=tuple(rhs),
    )


def specialise(system: System, varying: tuple[str, ...] = ()) -> tuple[Specialised, tuple]:
    """Functions of ``system`` with every scalar parameter not named in ``varying`` fixed.

    Returns the functions and the current values of their free parameters (in order).
    """
    spec = system.model.spec
    fixed, free, values = [], [], []
    for name, value in zip(spec.parameter_names, system.parameter_values, strict=True):
        if value is None:
            continue
        if name in varying or np.ndim(value) > 0:
            free.append(name)
            values.append(value)
        else:
            fixed.append((name, float(value)))
    try:
        functions = _specialise(spec, system.model.control, tuple(fixed), tuple(free))
    except (OverflowError, ValueError, RecursionError):
        # sympy evaluates powers of the substituted numbers exactly (a huge parameter raised
        # to another can exceed any size): keep every parameter an argument instead.
        names = tuple(name for name, _ in fixed) + tuple(free)
        values = [np.float64(value) for _, value in fixed] + values
        functions = _specialise(spec, system.model.control, (), names)
    return functions, tuple(values)
