"""The sympy side of the formula parser: the function classes and the operations that build the
reference expression (what :func:`planner.models.formula.parse_formula` returns and the model
library differentiates and compiles).

The functions are built from classes of this module rather than sympy's own: sympy takes
symbols as complex, so ``Abs`` and ``Max`` differentiate into forms (``Derivative(re(x), x)``,
``DiracDelta``) that no numeric code can be printed from, and asking whether ``tanh(tanh(...))``
is real or zero takes time exponential in the depth. Every model here is real-valued and needs
Jacobians and Hessians; the classes print as sympy's functions.

Importing this module imports sympy; scenario validation uses
:mod:`planner.models.formula_light` instead.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from types import MappingProxyType
from typing import Any, ClassVar

import sympy

# --------------------------------------------------------------------------------------------
# real-valued functions
#
# Each class's ``eval`` classmethod is sympy's hook for folding a call whose argument is
# already a built expression object (a number here); no text is ever evaluated: formulas reach
# these classes only through the whitelist walk in planner/models/formula.py.


class _RealFunction(sympy.Function):
    """A function of real arguments printed to numeric code as a plain sympy primitive.

    Code printers (numpy, math) call ``_numpycode`` / ``_pythoncode`` and so on; each prints
    :meth:`primitive`, e.g. ``Max(a, b)``, which every printer knows. Primitives are built
    unevaluated: sympy's Max would otherwise insist on comparing a constant argument such as
    exp(0.5) (a parameter value the engine substituted) and refuse it. Plain text shows the
    name a formula author writes (``max(a, b)``).
    """

    display: ClassVar[str] = ""

    def primitive(self) -> sympy.Expr:  # pragma: no cover - every subclass overrides it
        raise NotImplementedError

    def _print_primitive(self, printer: Any, **settings: Any) -> str:
        # Bracketed: the printer took this for a function call, which binds tighter than any
        # operator, while the primitive may be a sum ((sign(u) + 1)/2).
        return f"({printer._print(self.primitive(), **settings)})"

    _pythoncode = _numpycode = _mpmathcode = _lambdacode = _print_primitive

    def _sympystr(self, printer: Any) -> str:
        return f"{self.display}({', '.join(printer._print(arg) for arg in self.args)})"


class RealSign(_RealFunction):
    """sign(u): -1, 0 or 1; its derivative is zero (wherever it exists)."""

    nargs = 1
    display = "sign"

    @classmethod
    def eval(cls, value: sympy.Expr) -> sympy.Expr | None:
        return sympy.sign(value) if value.is_Number else None

    def fdiff(self, argindex: int = 1) -> sympy.Expr:
        return sympy.Integer(0)

    def primitive(self) -> sympy.Expr:
        return sympy.sign(self.args[0], evaluate=False)


class UnitStep(_RealFunction):
    """step(u): 0 below zero, 1/2 at zero, 1 above; its derivative is zero (wherever it exists)."""

    nargs = 1
    display = "step"

    @classmethod
    def eval(cls, value: sympy.Expr) -> sympy.Expr | None:
        return (sympy.sign(value) + 1) / 2 if value.is_Number else None

    def fdiff(self, argindex: int = 1) -> sympy.Expr:
        return sympy.Integer(0)

    def primitive(self) -> sympy.Expr:
        return (sympy.sign(self.args[0], evaluate=False) + 1) / 2


class RealAbs(_RealFunction):
    """|u| for real u; derivative sign(u)."""

    nargs = 1
    display = "abs"

    @classmethod
    def eval(cls, value: sympy.Expr) -> sympy.Expr | None:
        return abs(value) if value.is_Number else None

    def fdiff(self, argindex: int = 1) -> sympy.Expr:
        return RealSign(self.args[0])

    def primitive(self) -> sympy.Expr:
        return sympy.Abs(self.args[0], evaluate=False)


class _Extreme(_RealFunction):
    """The larger (``direction`` 1) or smaller (-1) of two real values; the derivative in each
    argument is a step, 1/2 at a tie."""

    nargs = 2
    direction: ClassVar[int] = 1
    sympy_function: ClassVar[Any] = None

    @classmethod
    def eval(cls, first: sympy.Expr, second: sympy.Expr) -> sympy.Expr | None:
        if first == second:
            return first
        if first.is_Number and second.is_Number:
            if sympy.nan in (first, second):
                return sympy.nan
            return first if bool(cls.direction * (first - second) >= 0) else second
        return None

    def fdiff(self, argindex: int = 1) -> sympy.Expr:
        first, second = self.args
        lead = first - second if argindex == 1 else second - first
        return UnitStep(self.direction * lead)

    def primitive(self) -> sympy.Expr:
        return type(self).sympy_function(*self.args, evaluate=False)


class RealMax(_Extreme):
    """max(a, b)."""

    display, direction, sympy_function = "max", 1, sympy.Max


class RealMin(_Extreme):
    """min(a, b)."""

    display, direction, sympy_function = "min", -1, sympy.Min


class _Elementary(_RealFunction):
    """A real function of one real argument: sympy's function of the same name without its
    automatic rewriting and assumption queries. Asked whether ``tanh(tanh(...(x)))`` is real
    or zero, sympy splits every level into real and imaginary parts, which costs time
    exponential in the depth (ten levels took nine seconds, each further level three times
    longer). Nothing is evaluated here either: a constant argument is folded by the parser, and
    one that appears later (a parameter value substituted by the engine) is left to numpy.
    """

    nargs = 1
    sympy_function: ClassVar[Any] = None
    derivative: ClassVar[Callable[[sympy.Expr], sympy.Expr]]

    def fdiff(self, argindex: int = 1) -> sympy.Expr:
        return type(self).derivative(self.args[0])

    def primitive(self) -> sympy.Expr:
        return type(self).sympy_function(self.args[0], evaluate=False)


class RealExp(_Elementary):
    """exp(u)."""

    display, sympy_function = "exp", sympy.exp
    derivative = staticmethod(lambda u: RealExp(u))


class RealLog(_Elementary):
    """log(u), the natural logarithm."""

    display, sympy_function = "log", sympy.log
    derivative = staticmethod(lambda u: 1 / u)


class RealTanh(_Elementary):
    """tanh(u)."""

    display, sympy_function = "tanh", sympy.tanh
    derivative = staticmethod(lambda u: 1 - RealTanh(u) ** 2)


class RealSinh(_Elementary):
    """sinh(u)."""

    display, sympy_function = "sinh", sympy.sinh
    derivative = staticmethod(lambda u: RealCosh(u))


class RealCosh(_Elementary):
    """cosh(u)."""

    display, sympy_function = "cosh", sympy.cosh
    derivative = staticmethod(lambda u: RealSinh(u))


class RealSin(_Elementary):
    """sin(u)."""

    display, sympy_function = "sin", sympy.sin
    derivative = staticmethod(lambda u: RealCos(u))


class RealCos(_Elementary):
    """cos(u)."""

    display, sympy_function = "cos", sympy.cos
    derivative = staticmethod(lambda u: -RealSin(u))


_BUILDERS: Mapping[str, Callable[..., sympy.Expr]] = MappingProxyType(
    {
        "exp": RealExp,
        "log": RealLog,
        "sqrt": sympy.sqrt,
        "tanh": RealTanh,
        "sinh": RealSinh,
        "cosh": RealCosh,
        "sin": RealSin,
        "cos": RealCos,
        "abs": RealAbs,
        "max": RealMax,
        "min": RealMin,
    }
)
"""The sympy expression of each formula function (max and min of two arguments)."""


class SympyAlgebra:
    """The operations the formula walker needs, on sympy expressions: the reference."""

    name: ClassVar[str] = "sympy"
    Expr = sympy.Expr
    ordered: ClassVar[bool] = True
    """True: checks report the first problem in sympy's own order of arguments."""

    symbol = staticmethod(sympy.Symbol)
    integer = staticmethod(sympy.Integer)
    real = staticmethod(sympy.Float)
    power = staticmethod(sympy.Pow)

    @staticmethod
    def function(name: str) -> Callable[..., sympy.Expr]:
        return _BUILDERS[name]

    @staticmethod
    def is_imaginary_unit(value: object) -> bool:
        return value is sympy.I

    @staticmethod
    def constant(expr: sympy.Expr) -> None:
        """A constant part that is not a number (sympy formed it); it is folded."""

    @staticmethod
    def xreplace(expr: sympy.Expr, replacements: dict[sympy.Expr, sympy.Expr]) -> sympy.Expr:
        return expr.xreplace(replacements)


SYMPY = SympyAlgebra()
