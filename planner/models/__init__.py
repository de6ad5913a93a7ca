"""Model library: sympy specs compiled once to vectorised numpy functions.

The plain metadata (:class:`ModelInfo`, :class:`ParameterInfo`, :data:`BUILTIN_INFO`) loads
without sympy, so validating a scenario file stays quick; the names that need sympy or numpy
load on first use.
"""

from __future__ import annotations

import importlib
from typing import TYPE_CHECKING

from planner.models.info import MAX_FORMULA_VARIABLES, ModelInfo, ParameterInfo
from planner.models.kinds import BUILTIN_INFO

if TYPE_CHECKING:
    from planner.models.base import CompiledModel, ModelSpec, System, compile_model
    from planner.models.library import BUILTIN_MODELS, check_name, formula_spec

_LAZY = {
    "CompiledModel": "planner.models.base",
    "ModelSpec": "planner.models.base",
    "System": "planner.models.base",
    "compile_model": "planner.models.base",
    "BUILTIN_MODELS": "planner.models.library",
    "check_name": "planner.models.formula",
    "formula_spec": "planner.models.library",
}
"""Public names whose modules import sympy (and numpy), by the module that defines them."""


def __getattr__(name: str) -> object:
    if name not in _LAZY:
        raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
    value = getattr(importlib.import_module(_LAZY[name]), name)
    globals()[name] = value
    return value


def __dir__() -> list[str]:
    return sorted({*globals(), *_LAZY})


__all__ = [
    "BUILTIN_INFO",
    "BUILTIN_MODELS",
    "MAX_FORMULA_VARIABLES",
    "CompiledModel",
    "ModelInfo",
    "ModelSpec",
    "ParameterInfo",
    "System",
    "check_name",
    "compile_model",
    "formula_spec",
]
