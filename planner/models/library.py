"""The model library: built-in specs by kind, and specs built from the user's formulas."""

from __future__ import annotations

import re
from collections.abc import Mapping

import sympy

from planner.errors import FormulaError
from planner.models.base import ModelSpec
from planner.models.formula import ALLOWED_FUNCTIONS, parse_formula, unusual_character
from planner.models.info import MAX_FORMULA_VARIABLES, formula_info
from planner.models.kinds import BUILTIN_INFO, builtin_equations

__all__ = ["BUILTIN_MODELS", "MAX_FORMULA_VARIABLES", "check_name", "formula_spec"]

BUILTIN_MODELS: dict[str, ModelSpec] = {
    kind: ModelSpec.from_info(info, builtin_equations(kind)) for kind, info in BUILTIN_INFO.items()
}
_NAME = re.compile(r"[A-Za-z][A-Za-z0-9_]{0,31}")
_RESERVED = set(ALLOWED_FUNCTIONS) | {"pi"}


def check_name(name: str) -> str | None:
    """Why ``name`` cannot be a variable or parameter name, or None when it can."""
    if not _NAME.fullmatch(name):
        rule = "names start with a letter and hold only letters, digits and '_' (at most 32)"
        odd = unusual_character(name)
        return rule if odd is None else f"{odd}; {rule}"
    if name in _RESERVED:
        return f"{name!r} is a function or constant name; choose another"
    return None


def formula_spec(equations: Mapping[str, str], parameter_names: tuple[str, ...]) -> ModelSpec:
    """Build a spec from ``{variable: right-hand side}`` text through the whitelist parser.

    Raises FormulaError whose first argument is the variable whose formula failed.
    """
    variables = tuple(equations)
    symbols = {name: sympy.Symbol(name) for name in (*variables, *parameter_names)}
    parsed = []
    for variable, text in equations.items():
        try:
            parsed.append(parse_formula(text, symbols, states=variables))
        except FormulaError as error:
            raise FormulaError(variable, str(error)) from None
    return ModelSpec.from_info(formula_info(variables, tuple(parameter_names)), parsed)
