"""Model library: sympy specs compiled once to vectorised numpy functions."""

from planner.models.base import CompiledModel, ModelSpec, ParameterInfo, System, compile_model
from planner.models.library import BUILTIN_MODELS, MAX_FORMULA_VARIABLES, check_name, formula_spec

__all__ = [
    "BUILTIN_MODELS",
    "MAX_FORMULA_VARIABLES",
    "CompiledModel",
    "ModelSpec",
    "ParameterInfo",
    "System",
    "check_name",
    "compile_model",
    "formula_spec",
]
