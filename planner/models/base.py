"""Model specifications as sympy expressions, compiled once to vectorised numpy functions.

Every model, built-in or written by the user as formulas, is a :class:`ModelSpec`: its plain
metadata (:class:`~planner.models.info.ModelInfo`: state variables, parameters) plus one sympy
right-hand side per variable. :func:`compile_model` turns a spec plus the name of the control
parameter into numpy functions for the right-hand side, its Jacobian in the state and its
derivative in the control; :class:`System` binds parameter values and is what every numerical
routine (continuation, integration, ensembles) calls.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from functools import cache, cached_property

import numpy as np
import sympy

from planner.models.info import ModelInfo, ParameterInfo

__all__ = ["CompiledModel", "ModelInfo", "ModelSpec", "ParameterInfo", "System", "compile_model"]

Array = np.ndarray
ZERO_STATE = 1e-300


@dataclass(frozen=True)
class ModelSpec(ModelInfo):
    """A model as symbolic equations: d(variable)/dt = equation, for each variable in order."""

    equations: tuple[sympy.Expr, ...] = field(kw_only=True)

    @classmethod
    def from_info(cls, info: ModelInfo, equations: Sequence[sympy.Expr]) -> ModelSpec:
        """The spec of a model whose metadata is ``info``, with one equation per variable."""
        if len(equations) != len(info.variables):
            raise ValueError(f"{len(info.variables)} variables but {len(equations)} equations")
        plain = {name: getattr(info, name) for name in ModelInfo.__dataclass_fields__}
        return cls(**plain, equations=tuple(equations))


def _evaluate(function: Callable[..., object], args: list[object], shape: tuple[int, ...]) -> Array:
    """Call a compiled function; callers judge non-finite results (e.g. a branch leaving the
    physical range), so numpy's floating-point warnings are silenced here."""
    with np.errstate(all="ignore"):
        return _broadcast_stack(function(*args), shape)


def _broadcast_stack(values: Sequence[object], shape: tuple[int, ...]) -> Array:
    """Stack lambdified outputs that may be scalars (constant entries) into one array."""
    if not shape:  # a single point: the common case inside integrators, keep it cheap
        return np.array(values, dtype=float)
    return np.stack([np.broadcast_to(np.asarray(v, dtype=float), shape) for v in values])


@dataclass(frozen=True)
class CompiledModel:
    """Numpy functions of (state..., parameters...) for one spec and one control parameter."""

    spec: ModelSpec
    control: str
    _rhs: Callable[..., object]
    _jac: Callable[..., object]
    _dfdu: Callable[..., object]
    _d2f: Callable[..., object]
    _d2fdxdu: Callable[..., object]
    _linear: Callable[..., object]

    @property
    def n_variables(self) -> int:
        return len(self.spec.variables)

    def bind(self, parameters: Mapping[str, float | Array]) -> System:
        """Fix every non-control parameter; the control stays free (it is an argument)."""
        missing = [p for p in self.spec.parameter_names if p not in parameters]
        if missing:
            raise KeyError(f"parameters without a value: {', '.join(missing)}")
        values = tuple(
            None if name == self.control else _number(parameters[name])
            for name in self.spec.parameter_names
        )
        return System(self, values)


def _number(value):
    """A scalar parameter as a numpy float: arithmetic past the float range then gives inf (a
    state the engine judges diverged) instead of raising OverflowError as Python floats do."""
    return np.float64(value) if np.ndim(value) == 0 else value


@cache
def compile_model(spec: ModelSpec, control: str) -> CompiledModel:
    """Compile a spec once per control parameter (cached): rhs, Jacobian, d/du, second derivatives.

    The second derivatives of each equation in the state (a Hessian per equation) serve fold
    analysis (the quadratic coefficient of the normal form).
    """
    if control not in spec.parameter_names:
        raise KeyError(f"control {control!r} is not a parameter of model {spec.kind!r}")
    state_symbols = [sympy.Symbol(v) for v in spec.variables]
    parameter_symbols = [sympy.Symbol(p) for p in spec.parameter_names]
    arguments = [*state_symbols, *parameter_symbols]
    rhs = list(spec.equations)
    jac = [sympy.diff(f, x) for f in rhs for x in state_symbols]
    dfdu = [sympy.diff(f, sympy.Symbol(control)) for f in rhs]
    d2f = [sympy.diff(f, x, y) for f in rhs for x in state_symbols for y in state_symbols]
    d2fdxdu = [sympy.diff(entry, sympy.Symbol(control)) for entry in jac]
    compile_list = lambda exprs: sympy.lambdify(arguments, exprs, modules="numpy", cse=True)  # noqa: E731
    return CompiledModel(
        spec=spec,
        control=control,
        _rhs=compile_list(rhs),
        _jac=compile_list(jac),
        _dfdu=compile_list(dfdu),
        _d2f=compile_list(d2f),
        _d2fdxdu=compile_list(d2fdxdu),
        _linear=compile_list([*rhs, *jac, *dfdu]),
    )


@dataclass(frozen=True)
class System:
    """A compiled model with its parameters fixed; the control ``u`` is passed per call.

    Shapes: ``x`` is (n, *batch) and ``u`` broadcasts against ``batch``. ``rhs`` returns
    (n, *batch), ``jac`` (n, n, *batch), ``dfdu`` (n, *batch). Parameter values may themselves be
    arrays over the batch (ensemble members).
    """

    model: CompiledModel
    parameter_values: tuple[object, ...]

    @cached_property
    def _scalar_parameters(self) -> bool:
        return all(np.ndim(value) == 0 for value in self.parameter_values)

    @property
    def n(self) -> int:
        return self.model.n_variables

    @property
    def variables(self) -> tuple[str, ...]:
        return self.model.spec.variables

    def _arguments(
        self, x: Array, u: float | Array, derivative: bool = False
    ) -> tuple[list[object], tuple[int, ...]]:
        x = np.asarray(x, dtype=float)
        if derivative and self.model.spec.nonnegative_state:
            # Derivatives of P**q/(m**q + P**q) compile to forms such as P**q/P, which are
            # 0/0 at P = 0 exactly; a state of 1e-300 gives their limit instead.
            x = np.where(x == 0.0, ZERO_STATE, x)
        params = [u if value is None else value for value in self.parameter_values]
        if x.ndim == 1 and self._scalar_parameters and np.ndim(u) == 0:
            return [*x, *params], ()
        shape = np.broadcast_shapes(x.shape[1:], *(np.shape(p) for p in params))
        return [*x, *params], shape

    def rhs(self, x: Array, u: float | Array) -> Array:
        args, shape = self._arguments(x, u)
        return _evaluate(self.model._rhs, args, shape)

    def jac(self, x: Array, u: float | Array) -> Array:
        args, shape = self._arguments(x, u, derivative=True)
        n = self.n
        return _evaluate(self.model._jac, args, shape).reshape(n, n, *shape)

    def dfdu(self, x: Array, u: float | Array) -> Array:
        args, shape = self._arguments(x, u)
        return _evaluate(self.model._dfdu, args, shape)

    def linearised(self, x: Array, u: float | Array) -> tuple[Array, Array, Array]:
        """Right-hand side, Jacobian and d/du in one call (continuation needs all three)."""
        args, shape = self._arguments(x, u, derivative=True)
        n = self.n
        values = _evaluate(self.model._linear, args, shape)
        return values[:n], values[n : n + n * n].reshape(n, n, *shape), values[n + n * n :]

    def hessians(self, x: Array, u: float | Array) -> Array:
        """Second derivatives d2 f_i / dx_j dx_k, shape (n, n, n, *batch)."""
        args, shape = self._arguments(x, u, derivative=True)
        n = self.n
        return _evaluate(self.model._d2f, args, shape).reshape(n, n, n, *shape)

    def jac_u(self, x: Array, u: float | Array) -> Array:
        """Derivative of the Jacobian in the control, shape (n, n, *batch)."""
        args, shape = self._arguments(x, u, derivative=True)
        n = self.n
        return _evaluate(self.model._d2fdxdu, args, shape).reshape(n, n, *shape)

    def with_parameters(self, **overrides: float | Array) -> System:
        """A copy with some non-control parameters replaced (actions, ensembles)."""
        names = self.model.spec.parameter_names
        values = list(self.parameter_values)
        for name, value in overrides.items():
            index = names.index(name)
            if values[index] is None:
                raise ValueError(f"{name!r} is the control; pass it as u instead")
            values[index] = value
        return System(self.model, tuple(values))

    def parameter(self, name: str) -> object:
        return self.parameter_values[self.model.spec.parameter_names.index(name)]
