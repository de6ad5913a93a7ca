"""The model library: built-in specs by kind, and specs built from the user's formulas."""

from __future__ import annotations

import re
from collections.abc import Mapping

import sympy

from planner.errors import FormulaError
from planner.models import recycling, recycling_sediment
from planner.models.base import ModelSpec, ParameterInfo
from planner.models.formula import ALLOWED_FUNCTIONS, parse_formula

BUILTIN_MODELS: dict[str, ModelSpec] = {
    spec.kind: spec for spec in (recycling.SPEC, recycling_sediment.SPEC)
}
MAX_FORMULA_VARIABLES = 4
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]{0,31}$")
_RESERVED = set(ALLOWED_FUNCTIONS) | {"pi"}


def check_name(name: str) -> str | None:
    """Why ``name`` cannot be a variable or parameter name, or None when it can."""
    if not _NAME.match(name):
        return "names start with a letter and hold only letters, digits and '_' (at most 32)"
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
            parsed.append(parse_formula(text, symbols))
        except FormulaError as error:
            raise FormulaError(variable, str(error)) from None
    return ModelSpec(
        kind="formula",
        variables=variables,
        parameters=tuple(ParameterInfo(name) for name in parameter_names),
        equations=tuple(parsed),
        source="user formulas",
    )
