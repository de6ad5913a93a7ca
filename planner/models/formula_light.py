"""A light stand-in for the few sympy operations that reading a formula performs, without sympy.

``planner check`` validates a scenario whose model is written as formulas. Whether a formula is
accepted depends on how sympy's automatic simplification rewrites each step (``x - x`` becomes 0,
so ``1/(x - x)`` divides by zero; ``x**40*x**40`` merges into ``x**80``, beyond the exponent
limit; ``1e300*x*1e300`` collects a coefficient of 1e600), so the checks of
:mod:`planner.models.formula` run on the expression sympy would build. Importing sympy takes
longer than the whole of ``check`` may, so this module rebuilds those expressions with plain
Python objects, following the rules sympy applies automatically when it adds, multiplies and
raises to a power (sympy 1.14, ``sympy/core/add.py``, ``mul.py``, ``power.py`` and
``numbers.py``; symbols without assumptions, everything commutative):

- numbers: exact integers and fractions; floats as mpmath binary floats of 53 bits rounded to
  nearest, which is what sympy's ``Float`` is, so every rounding is sympy's own;
- sums collect like terms (``2*x + 3*x`` is ``5*x``) and drop terms whose coefficient cancels;
- products collect powers of one base by the numeric coefficient of their exponents (``x**q *
  x**q`` is ``x**(2*q)``, while ``x**2*x**q`` stays), combine numeric bases that share an exponent
  (``2**x*3**x`` is ``6**x``) and spread a number over a two-term product with a sum
  (``2*(x + 1)`` is ``2*x + 2``);
- powers merge ``(x**a)**n`` for an integer n, or for |a| < 1, and spread an integer power over
  a product.

Wherever sympy would do more than these rules model (roots of numbers, a non-integer power of a
product with a numeric factor, products of a square root of a product with itself, ...), the
operation raises :class:`UndecidedError` and the caller builds the formula with sympy, the
reference.
The expressions compare equal exactly when sympy's do (a ``Float`` never equals an integer), so
the checks, which only read the tree, reach the same verdict with the same message.
"""

# ruff: noqa: N815 - the attribute names of sympy's expressions (is_Add, is_Number, ...), which
# the checks of planner.models.formula read in both algebras

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from typing import ClassVar

from mpmath import libmp

__all__ = ["LIGHT", "Expr", "UndecidedError"]

_PRECISION = 53
"""Bits of a sympy Float made from a Python float (15 decimal digits)."""
_ROUND = libmp.round_nearest
_DIGITS = 15
"""Decimal digits sympy prints for such a Float."""


class UndecidedError(Exception):
    """The light algebra reached a case whose sympy result it does not model."""


# --------------------------------------------------------------------------------------------
# expressions


class Expr:
    """A node of an expression tree, with the attributes of sympy's that the checks read.

    Nodes are immutable and compare by structure: ``key`` is a text that names the node and its
    arguments (sums and products with their arguments sorted), so two nodes are equal exactly
    when sympy's canonical forms would be.
    """

    __slots__ = ("_free", "args", "key")

    is_Number = is_Rational = is_Integer = is_Float = False
    is_Symbol = is_Atom = is_Add = is_Mul = is_Pow = is_NumberSymbol = False
    is_zero: bool | None = None
    is_positive: bool | None = None
    is_negative: bool | None = None

    args: tuple[Expr, ...]
    key: str

    def __init__(self, key: str, args: tuple[Expr, ...] = ()) -> None:
        self.key = key
        self.args = args
        self._free: frozenset[Symbol] | None = None

    def __eq__(self, other: object) -> bool:
        return isinstance(other, Expr) and self.key == other.key

    def __hash__(self) -> int:
        return hash(self.key)

    def __repr__(self) -> str:
        return self.key

    @property
    def free_symbols(self) -> frozenset[Symbol]:
        if self._free is None:
            self._free = frozenset().union(*(arg.free_symbols for arg in self.args))
        return self._free

    # sympy's operators: a - b is Add(a, -b), a / b is Mul(a, Pow(b, -1)) (or Pow(b, -1) for a = 1)
    def __add__(self, other: Expr) -> Expr:
        return add(self, other)

    def __sub__(self, other: Expr) -> Expr:
        return add(self, -other)

    def __mul__(self, other: Expr) -> Expr:
        return mul(self, other)

    def __truediv__(self, other: Expr) -> Expr:
        denominator = power(other, MINUS_ONE)
        return denominator if self is ONE else mul(self, denominator)

    def __neg__(self) -> Expr:
        return _raw_mul((MINUS_ONE, self))  # sympy: Mul._from_args((S.NegativeOne, self))

    def __pow__(self, other: Expr) -> Expr:
        return power(self, other)


class Symbol(Expr):
    """A declared name."""

    __slots__ = ("name",)
    is_Symbol = is_Atom = True

    def __init__(self, name: str) -> None:
        super().__init__(f"s:{name}")
        self.name = name
        self._free = frozenset((self,))


class Add(Expr):
    """A sum; build it with :func:`add`."""

    __slots__ = ()
    is_Add = True

    def __neg__(self) -> Expr:
        return add(*(-term for term in self.args))


class Mul(Expr):
    """A product, its numeric coefficient (if any) first; build it with :func:`mul`."""

    __slots__ = ()
    is_Mul = True

    def __neg__(self) -> Expr:
        first, rest = self.args[0], self.args[1:]
        if not first.is_Number:
            return _raw_mul((MINUS_ONE, *self.args))
        negated = -first
        return _raw_mul(rest) if negated is ONE else _raw_mul((negated, *rest))


class Pow(Expr):
    """``base**exp``; build it with :func:`power`."""

    __slots__ = ()
    is_Pow = True

    @property
    def base(self) -> Expr:
        return self.args[0]

    @property
    def exp(self) -> Expr:
        return self.args[1]


class Function(Expr):
    """A call of one of the formula functions, by the name a formula author writes."""

    __slots__ = ("display",)

    def __init__(self, display: str, args: tuple[Expr, ...]) -> None:
        super().__init__(f"F:{display}({','.join(arg.key for arg in args)})", args)
        self.display = display


def _raw_add(args: Iterable[Expr]) -> Expr:
    terms = sorted(args, key=_sort_key)
    if not terms:
        return ZERO
    if len(terms) == 1:
        return terms[0]
    return Add(f"A({','.join(term.key for term in terms)})", tuple(terms))


def _raw_mul(args: Iterable[Expr]) -> Expr:
    factors = list(args)
    if not factors:
        return ONE
    if len(factors) == 1:
        return factors[0]
    coefficient = [factors[0]] if factors[0].is_Number else []
    rest = sorted(factors[len(coefficient) :], key=_sort_key)
    if any(factor.is_Number for factor in rest):  # pragma: no cover - flatten collects numbers
        raise UndecidedError("a number among the factors")
    ordered = (*coefficient, *rest)
    return Mul(f"M({','.join(factor.key for factor in ordered)})", ordered)


def _raw_pow(base: Expr, exponent: Expr) -> Expr:
    return Pow(f"P({base.key},{exponent.key})", (base, exponent))


def _sort_key(expr: Expr) -> str:
    return expr.key


# --------------------------------------------------------------------------------------------
# numbers


class Number(Expr):
    """A sympy Number: Integer, Rational or Float."""

    __slots__ = ("is_negative", "is_positive", "is_zero")
    is_Number = is_Atom = True

    def __init__(self, key: str) -> None:
        super().__init__(key)
        self._free = frozenset()

    def mpf(self) -> tuple[int, int, int, int]:
        """The value rounded to a 53-bit mpf, as sympy's ``_as_mpf_val(53)``."""
        raise NotImplementedError

    def __float__(self) -> float:
        return libmp.to_float(self.mpf())

    def __bool__(self) -> bool:
        return not self.is_zero

    def __add__(self, other: Expr) -> Expr:
        return _number_add(self, other) if other.is_Number else add(self, other)

    def __sub__(self, other: Expr) -> Expr:
        return _number_add(self, -other) if other.is_Number else add(self, -other)

    def __mul__(self, other: Expr) -> Expr:
        return _number_mul(self, other) if other.is_Number else mul(self, other)

    def __truediv__(self, other: Expr) -> Expr:
        if not other.is_Number:
            return super().__truediv__(other)
        if other.is_zero:
            raise UndecidedError("division of numbers by zero")
        if other.is_Float and not self.is_Float:
            # sympy's Rational / Float is self * (1/other): two roundings
            return _number_mul(self, _float(libmp.mpf_pow_int(other.mpf(), -1, _PRECISION, _ROUND)))
        if self.is_Float or other.is_Float:
            return _float(libmp.mpf_div(self.mpf(), other.mpf(), _PRECISION, _ROUND))
        return rational(self.p * other.q, self.q * other.p)  # type: ignore[attr-defined]

    def __pow__(self, other: Expr) -> Expr:
        if not other.is_Integer:
            return power(self, other)
        return _integer_power(self, other.p)  # type: ignore[attr-defined]

    def __ge__(self, other: int) -> bool:
        return libmp.mpf_ge(self._exact(), libmp.from_int(other))

    def __gt__(self, other: int) -> bool:
        return libmp.mpf_gt(self._exact(), libmp.from_int(other))

    def __lt__(self, other: int) -> bool:
        return libmp.mpf_lt(self._exact(), libmp.from_int(other))

    def _exact(self) -> tuple[int, int, int, int]:
        """The value, exactly for floats and integers (comparisons with plain integers)."""
        return self.mpf()


class Integer(Number):
    __slots__ = ("p",)
    is_Rational = is_Integer = True
    q = 1

    def __init__(self, p: int) -> None:
        super().__init__(f"i:{p}")
        self.p = p
        self.is_zero = p == 0
        self.is_positive = p > 0
        self.is_negative = p < 0

    def mpf(self) -> tuple[int, int, int, int]:
        return libmp.from_int(self.p, _PRECISION, _ROUND)

    def _exact(self) -> tuple[int, int, int, int]:
        return libmp.from_int(self.p)

    def __neg__(self) -> Expr:
        return integer(-self.p)

    def __abs__(self) -> Expr:
        return integer(abs(self.p))

    def __int__(self) -> int:
        return self.p

    def as_numer_denom(self) -> tuple[Expr, Expr]:
        return self, ONE

    def __str__(self) -> str:
        return str(self.p)


class Rational(Number):
    __slots__ = ("p", "q")
    is_Rational = True

    def __init__(self, p: int, q: int) -> None:
        super().__init__(f"r:{p}/{q}")
        self.p, self.q = p, q
        self.is_zero = False
        self.is_positive = p > 0
        self.is_negative = p < 0

    def mpf(self) -> tuple[int, int, int, int]:
        return libmp.from_rational(self.p, self.q, _PRECISION, _ROUND)

    def __ge__(self, other: int) -> bool:
        return self.p >= other * self.q

    def __gt__(self, other: int) -> bool:
        return self.p > other * self.q

    def __lt__(self, other: int) -> bool:
        return self.p < other * self.q

    def __neg__(self) -> Expr:
        return Rational(-self.p, self.q)

    def __abs__(self) -> Expr:
        return Rational(abs(self.p), self.q)

    def __int__(self) -> int:
        return -(-self.p // self.q) if self.p < 0 else self.p // self.q

    def as_numer_denom(self) -> tuple[Expr, Expr]:
        return integer(self.p), integer(self.q)

    def __str__(self) -> str:
        return f"{self.p}/{self.q}"


class Float(Number):
    __slots__ = ("_mpf_",)
    is_Float = True

    def __init__(self, value: tuple[int, int, int, int]) -> None:
        super().__init__(f"f:{value}")
        self._mpf_ = value
        self.is_zero = value == libmp.fzero
        self.is_positive = libmp.mpf_sign(value) > 0
        self.is_negative = libmp.mpf_sign(value) < 0

    def mpf(self) -> tuple[int, int, int, int]:
        return self._mpf_

    def __neg__(self) -> Expr:
        return self if self.is_zero else _float(libmp.mpf_neg(self._mpf_))

    def __abs__(self) -> Expr:
        return _float(libmp.mpf_abs(self._mpf_))

    def __int__(self) -> int:
        return int(libmp.to_int(self._mpf_))

    def __str__(self) -> str:
        text = libmp.to_str(self._mpf_, _DIGITS, strip_zeros=False)
        if text.startswith("-.0"):
            text = "-0." + text[3:]
        elif text.startswith(".0"):
            text = "0." + text[2:]
        return text.removeprefix("+")


ZERO = Integer(0)
ONE = Integer(1)
MINUS_ONE = Integer(-1)
HALF = Rational(1, 2)
_SMALL = {-1: MINUS_ONE, 0: ZERO, 1: ONE}


def integer(p: int) -> Integer:
    """sympy's Integer(p); 0, 1 and -1 are single objects, as sympy's are."""
    return _SMALL[p] if p in _SMALL else Integer(p)


def rational(p: int, q: int) -> Number:
    """sympy's Rational(p, q), in lowest terms (an Integer when q divides p)."""
    if q < 0:
        p, q = -p, -q
    common = math.gcd(p, q)
    p, q = p // common, q // common
    return integer(p) if q == 1 else Rational(p, q)


def real(value: float) -> Float:
    """sympy's Float(value) of a Python float (a zero stays a Float)."""
    return Float(libmp.from_float(value, _PRECISION, _ROUND))


def _float(value: tuple[int, int, int, int]) -> Number:
    """sympy's Float._new: the result of arithmetic, where an exact zero becomes Integer 0."""
    if value == libmp.fzero:
        return ZERO
    if value in (libmp.fnan, libmp.finf, libmp.fninf):  # pragma: no cover - mpf never overflows
        raise UndecidedError("a non-finite float")
    return Float(value)


def _number_add(a: Number, b: Number) -> Number:
    if a.is_Float or b.is_Float:
        return _float(libmp.mpf_add(a.mpf(), b.mpf(), _PRECISION, _ROUND))
    return rational(a.p * b.q + b.p * a.q, a.q * b.q)  # type: ignore[attr-defined]


def _number_mul(a: Number, b: Number) -> Number:
    if a.is_Float or b.is_Float:
        return _float(libmp.mpf_mul(a.mpf(), b.mpf(), _PRECISION, _ROUND))
    return rational(a.p * b.p, a.q * b.q)  # type: ignore[attr-defined]


def _integer_power(base: Number, exponent: int) -> Number:
    """sympy's Number**Integer: exact for integers and fractions, rounded once for floats."""
    if exponent == 0:
        return ONE
    if base.is_Float:
        if base.is_zero and exponent < 0:
            raise UndecidedError("zero to a negative power")
        return _float(libmp.mpf_pow_int(base.mpf(), exponent, _PRECISION, _ROUND))
    if base.is_zero and exponent < 0:
        raise UndecidedError("zero to a negative power")
    p, q = base.p, base.q  # type: ignore[attr-defined]
    if exponent < 0:
        p, q, exponent = q, p, -exponent
    return rational(p**exponent, q**exponent)


# --------------------------------------------------------------------------------------------
# sympy's automatic simplification


def _as_coeff_mul(expr: Expr) -> tuple[Number, Expr]:
    """sympy's ``as_coeff_Mul()``: the numeric coefficient and the rest."""
    if expr.is_Number:
        return expr, ONE  # type: ignore[return-value]
    if expr.is_Mul and expr.args[0].is_Number:
        rest = expr.args[1:]
        return expr.args[0], (rest[0] if len(rest) == 1 else _raw_mul(rest))  # type: ignore[return-value]
    return ONE, expr


def _as_base_exp(expr: Expr) -> tuple[Expr, Expr]:
    """sympy's ``as_base_exp()``: (1/n)**e reads as n**(-e)."""
    if not expr.is_Pow:
        return expr, ONE
    base, exponent = expr.args
    if base.is_Rational and base.p == 1 and base.q != 1:  # type: ignore[attr-defined]
        return integer(base.q), -exponent  # type: ignore[attr-defined]
    return base, exponent


def add(*args: Expr) -> Expr:
    """sympy's ``Add(*args)``: flattened, like terms collected, numbers summed."""
    seq = [arg for arg in args if arg is not ZERO]
    if not seq:
        return ZERO
    if len(seq) == 1:
        return seq[0]
    coefficient: Number = ZERO
    terms: dict[Expr, list[Number]] = {}
    pending = list(seq)
    index = 0
    while index < len(pending):
        item = pending[index]
        index += 1
        if item.is_Number:
            coefficient = _number_add(coefficient, item)  # type: ignore[arg-type]
            continue
        if item.is_Add:
            pending.extend(item.args)
            continue
        if item.is_Pow:
            base, exponent = _as_base_exp(item)
            if base.is_Number and (
                exponent.is_Integer or (exponent.is_Rational and exponent.is_negative)
            ):
                raise UndecidedError("an unevaluated power of a number in a sum")
        numeric, term = _as_coeff_mul(item)
        terms.setdefault(term, []).append(numeric)
    collected = []
    for term, numbers in terms.items():
        factor = _in_order(numbers, _number_add, ZERO)
        if factor.is_zero:
            continue
        if factor is ONE:
            collected.append(term)
        elif term.is_Mul:
            collected.append(_raw_mul((factor, *term.args)))
        elif term.is_Add:  # pragma: no cover - no term is a bare sum
            raise UndecidedError("a sum as a term")
        else:
            collected.append(mul(factor, term))
    if coefficient is not ZERO:
        collected.append(coefficient)
    return _raw_add(collected)


def _in_order(
    numbers: list[Number], operation: Callable[[Number, Number], Number], start: Number
) -> Number:
    """sympy's Add (``_number_add``, from zero) or Mul (``_number_mul``, from one) of numbers,
    combined in the given order; more than two floats would round in sympy's order of
    arguments, which is not modelled."""
    if len(numbers) > 2 and any(number.is_Float for number in numbers):
        raise UndecidedError("three or more floats combined")
    total = start
    for number in numbers:
        total = operation(total, number)
    return total


def _keep_coefficient(coefficient: Number, factors: Expr) -> Expr:
    """sympy's ``_keep_coeff(coefficient, factors)`` for a rational coefficient."""
    if factors is ONE:
        return coefficient
    if coefficient is ONE:
        return factors
    if coefficient is MINUS_ONE:
        return -factors
    if factors.is_Add:  # pragma: no cover - terms of a sum are never sums
        raise UndecidedError("a coefficient kept outside a sum")
    if factors.is_Mul:
        args = list(factors.args)
        if args[0].is_Number:
            args[0] = _number_mul(args[0], coefficient)  # type: ignore[arg-type]
            if args[0] is ONE:
                args.pop(0)
        else:
            args.insert(0, coefficient)
        return _raw_mul(args)
    return coefficient * factors


def mul(*args: Expr) -> Expr:
    """sympy's ``Mul(*args)``: flattened, powers of one base collected, numbers multiplied."""
    seq = [arg for arg in args if arg is not ONE]
    if not seq:
        return ONE
    if len(seq) == 1:
        return seq[0]
    if len(seq) == 2:
        first, second = seq
        if second.is_Rational:
            first, second = second, first
        if first.is_Rational and not first.is_zero:
            numeric, rest = _as_coeff_mul(second)
            if rest.is_Add:
                if numeric is not ONE:  # pragma: no cover - no coefficient sits outside a sum
                    raise UndecidedError("a coefficient outside a sum")
                return add(*(_keep_coefficient(first, term) for term in rest.args))  # type: ignore[arg-type]
    return _mul_flatten(seq)


def _mul_flatten(seq: list[Expr]) -> Expr:
    """The general part of sympy's ``Mul.flatten`` (commutative factors only)."""
    numbers: list[Number] = []
    powers: list[tuple[Expr, Expr]] = []
    numeric_bases: list[tuple[Expr, Expr]] = []
    pending = list(seq)
    index = 0
    while index < len(pending):
        item = pending[index]
        index += 1
        if item.is_Mul:
            pending.extend(item.args)
            continue
        if item.is_Number:
            numbers.append(item)  # type: ignore[arg-type]
            continue
        base, exponent = _as_base_exp(item)
        if item.is_Pow and base.is_Number:
            if exponent.is_Integer:
                numbers.append(_integer_power(base, exponent.p))  # type: ignore[arg-type, attr-defined]
                continue
            if exponent.is_Number:
                raise UndecidedError("a root of a number in a product")
            if base.is_positive:
                numeric_bases.append((base, exponent))
                continue
            raise UndecidedError("a power of a negative number in a product")  # pragma: no cover
        powers.append((base, exponent))
    coefficient = _in_order(numbers, _number_mul, ONE)
    powers = _gather(powers)
    numeric_bases = _gather(numeric_bases)
    factors: list[Expr] = []
    for _ in range(2):
        regathered: list[tuple[Expr, Expr]] = []
        changed = False
        for base, exponent in powers:
            if exponent.is_zero:
                continue
            if exponent is ONE:
                if base.is_Number:  # pragma: no cover - numbers were collected above
                    coefficient = _number_mul(coefficient, base)  # type: ignore[arg-type]
                    continue
                factor = base
            else:
                factor = power(base, exponent)
                if factor.is_Pow and not base.is_Pow:
                    original = base
                    base, exponent = _as_base_exp(factor)
                    if base != original:
                        changed = True
            factors.append(factor)
            regathered.append((base, exponent))
        if changed and len({base for base, _ in regathered}) != len(regathered):
            factors = []
            powers = _gather(regathered)
        else:
            break
    by_exponent: dict[Expr, list[Expr]] = {}
    for base, exponent in numeric_bases:
        by_exponent.setdefault(exponent, []).append(base)
    for exponent, bases in by_exponent.items():
        if not exponent.is_zero:
            factors.append(power(_in_order(bases, _number_mul, ONE), exponent))  # type: ignore[arg-type]
    if coefficient.is_zero:
        return ZERO
    rest = []
    for factor in factors:
        if factor.is_Number:
            coefficient = _number_mul(coefficient, factor)  # type: ignore[arg-type]
        else:
            rest.append(factor)
    if any(factor.is_Mul for factor in rest) and (len(rest) > 1 or coefficient is not ONE):
        raise UndecidedError("a product among the factors of a product")
    if coefficient is not ONE:
        rest.insert(0, coefficient)
    if len(rest) == 2 and rest[0].is_Number and rest[1].is_Add:
        return add(*(rest[0] * term for term in rest[1].args))
    if len(rest) == 1:
        return rest[0]
    return _raw_mul(rest)


def _gather(pairs: list[tuple[Expr, Expr]]) -> list[tuple[Expr, Expr]]:
    """sympy's ``_gather``: powers of one base whose exponents differ only in their numeric
    coefficient are merged (x**2*x**3 is x**5, x**q*x**q is x**(2*q), x**2*x**q stays)."""
    common: dict[Expr, dict[Expr, list[Number]]] = {}
    for base, exponent in pairs:
        numeric, rest = _as_coeff_mul(exponent)
        common.setdefault(base, {}).setdefault(rest, []).append(numeric)
    merged = []
    for base, by_rest in common.items():
        for rest, numbers in by_rest.items():
            merged.append((base, _in_order(numbers, _number_add, ZERO) * rest))
    return merged


def power(base: Expr, exponent: Expr) -> Expr:
    """sympy's ``Pow(base, exponent)`` with automatic simplification."""
    if exponent is ZERO:
        return ONE
    if exponent is ONE:
        return base
    if base.is_Number:
        if exponent.is_Number:
            if exponent.is_Integer:
                return _integer_power(base, exponent.p)  # type: ignore[arg-type, attr-defined]
            raise UndecidedError("a root of a number")
        if base is ONE:
            return ONE
        if not base.is_positive:
            raise UndecidedError("a power of a number that is not positive")
        return _raw_pow(base, exponent)
    if base.is_Mul:
        return _power_of_product(base, exponent)
    if base.is_Pow:
        merged = _power_of_power(base, exponent)
        if merged is not None:
            return merged
    return _raw_pow(base, exponent)


def _power_of_product(base: Expr, exponent: Expr) -> Expr:
    """sympy's ``Mul._eval_power``: an integer power spreads over the factors; any other power
    stays whole unless the product has a numeric factor (which is not modelled)."""
    if exponent.is_Integer:
        product = _mul_flatten([_raw_pow(factor, exponent) for factor in base.args])
        return _mul_flatten([product, _raw_pow(ONE, exponent)])
    if exponent.is_Number and base.args[0].is_Number:
        raise UndecidedError("a non-integer power of a product with a numeric factor")
    return _raw_pow(base, exponent)


def _power_of_power(inner: Expr, exponent: Expr) -> Expr | None:
    """sympy's ``Pow._eval_power`` for (b**e)**exponent with b not a number: merged into
    b**(e*exponent) when exponent is an integer or e a number of magnitude below one."""
    base, inner_exponent = _as_base_exp(inner)
    if base.is_Number:
        if exponent.is_Integer:
            return power(base, inner_exponent * exponent)
        return None
    if exponent.is_Integer or (inner_exponent.is_Number and abs(inner_exponent) < 1):  # type: ignore[arg-type]
        return power(base, inner_exponent * exponent)
    return None


# --------------------------------------------------------------------------------------------
# functions


_EXTREMES = {"max": 1, "min": -1}


def call(name: str, *args: Expr) -> Expr:
    """A formula function applied to built arguments, as the sympy classes of the parser build
    it: nothing is rewritten, except that max and min of equal arguments are that argument and
    of two numbers the larger (or smaller), the first on a tie."""
    if name == "sqrt":
        return power(args[0], HALF)
    if name in _EXTREMES:
        first, second = args
        if first == second:
            return first
        if first.is_Number and second.is_Number:
            difference = _number_mul(integer(_EXTREMES[name]), _number_add(first, -second))  # type: ignore[arg-type]
            return first if not difference.is_negative else second
        return Function(name, (first, second))
    if all(arg.is_Number for arg in args):
        if name == "abs":
            return abs(args[0])  # type: ignore[return-value]
        raise UndecidedError(f"{name} of a number")  # pragma: no cover - the parser folds these
    return Function(name, args)


class LightAlgebra:
    """The operations the formula walker needs, on the light expressions of this module."""

    name: ClassVar[str] = "light"
    Expr = Expr
    ordered: ClassVar[bool] = False
    """False: the order of arguments is not sympy's, so a check that finds more than one
    problem in one step cannot tell which sympy reports first."""

    symbol = staticmethod(Symbol)
    integer = staticmethod(integer)
    real = staticmethod(real)
    power: Callable[[Expr, Expr], Expr] = staticmethod(power)

    @staticmethod
    def function(name: str) -> Callable[..., Expr]:
        return lambda *args: call(name, *args)

    @staticmethod
    def is_imaginary_unit(value: object) -> bool:
        return False

    @staticmethod
    def constant(expr: Expr) -> None:
        """A constant part that is not a number: the light algebra never forms one, sympy may
        (a root of a number split off a product), and then folds it."""
        raise UndecidedError("a constant part that is not a number")

    @staticmethod
    def xreplace(expr: Expr, replacements: dict[Expr, Expr]) -> Expr:
        raise UndecidedError("a constant part that is not a number")  # pragma: no cover


LIGHT = LightAlgebra()
