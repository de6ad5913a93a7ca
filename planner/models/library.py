"""The model library: built-in specs by kind, and specs built from the user's formulas."""

from __future__ import annotations

from collections.abc import Mapping

import sympy

from planner.models.base import ModelSpec
from planner.models.formula import check_name, parse_formula, read_equations
from planner.models.info import MAX_FORMULA_VARIABLES, formula_info
from planner.models.kinds import BUILTIN_INFO, builtin_equations

__all__ = ["BUILTIN_MODELS", "MAX_FORMULA_VARIABLES", "check_name", "formula_spec"]

BUILTIN_MODELS: dict[str, ModelSpec] = {
    kind: ModelSpec.from_info(info, builtin_equations(kind)) for kind, info in BUILTIN_INFO.items()
}


def formula_spec(equations: Mapping[str, str], parameter_names: tuple[str, ...]) -> ModelSpec:
    """Build a spec from ``{variable: right-hand side}`` text through the whitelist parser.

    Raises FormulaError whose first argument is the variable whose formula failed. Validation
    without sympy (:func:`planner.models.formula.check_equations`) raises the same errors.
    """
    variables = tuple(equations)
    symbols = {name: sympy.Symbol(name) for name in (*variables, *parameter_names)}
    parsed = read_equations(equations, lambda text: parse_formula(text, symbols, states=variables))
    return ModelSpec.from_info(formula_info(variables, tuple(parameter_names)), parsed)
