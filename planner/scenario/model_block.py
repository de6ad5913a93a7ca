"""The ``[model]`` block: a built-in model with its parameters, or the user's own formulas."""

from __future__ import annotations

from collections.abc import Mapping
from functools import cached_property
from typing import TYPE_CHECKING, Annotated, Literal

from pydantic import Field, model_validator

from planner.errors import FormulaError, listing
from planner.models.info import MAX_FORMULA_VARIABLES, ModelInfo, formula_info
from planner.models.kinds import BUILTIN_INFO
from planner.scenario._base import FrozenDict, Loc, Strict, raise_problems

if TYPE_CHECKING:
    from planner.models.base import ModelSpec

MAX_FORMULA_PARAMETERS = 50


def _parameter_problems(spec: ModelInfo, parameters: Mapping[str, float]) -> list[tuple[Loc, str]]:
    problems: list[tuple[Loc, str]] = []
    for info in spec.parameters:
        if info.name not in parameters:
            problems.append(
                ((info.name,), f"missing: {info.meaning or 'a parameter'} needs a value")
            )
        elif (why := info.violation(parameters[info.name])) is not None:
            problems.append(((info.name,), why))
    known = set(spec.parameter_names)
    for name in parameters:
        if name not in known:
            allowed = listing(spec.parameter_names)
            problems.append(((name,), f"not a parameter of model {spec.kind!r} (it has {allowed})"))
    return [(("parameters", *loc), reason) for loc, reason in problems]


class BuiltinModel(Strict):
    """A model from the library, chosen by ``kind``; every parameter needs a value."""

    kind: Literal["recycling", "recycling-sediment", "retention", "internal-load"] = Field(
        description="Which built-in lake model: P recycling, with sediment, retention, or "
        "internal load."
    )
    parameters: FrozenDict[str, float] = Field(
        description="Value of every parameter of the model, in the model's units (e.g. per year)."
    )

    @model_validator(mode="after")
    def _check_parameters(self) -> BuiltinModel:
        raise_problems("model", _parameter_problems(self.info, self.parameters), self.parameters)
        return self

    @property
    def info(self) -> ModelInfo:
        """Variables and parameters of the model (no sympy needed)."""
        return BUILTIN_INFO[self.kind]

    @property
    def spec(self) -> ModelSpec:
        """The model's equations (the first use imports sympy)."""
        from planner.models.library import BUILTIN_MODELS

        return BUILTIN_MODELS[self.kind]


class FormulaModel(Strict):
    """The user's own equations: ``d(variable)/dt = expression`` for each key of ``equations``."""

    kind: Literal["formula"] = Field(description='"formula": your own equations.')
    equations: FrozenDict[str, str] = Field(
        min_length=1,
        max_length=MAX_FORMULA_VARIABLES,
        description="For each state variable, its rate of change per year as a formula.",
    )
    parameters: FrozenDict[str, float] = Field(
        min_length=1,
        max_length=MAX_FORMULA_PARAMETERS,
        description="Value of every parameter the formulas use, in your units.",
    )

    @model_validator(mode="after")
    def _check_formulas(self) -> FormulaModel:
        # Whether a formula is defined (1/0, sqrt(-1), x/(x - x)) depends on how sympy
        # simplifies it; check_equations follows sympy's simplification without importing it
        # (and builds the formulas with sympy only where it cannot tell), so checking a file
        # stays quick. The equations themselves are built when a command computes.
        from planner.models.formula import check_equations, check_name

        problems: list[tuple[Loc, str]] = []
        for block, names in (("equations", self.equations), ("parameters", self.parameters)):
            for name in names:
                if (why := check_name(name)) is not None:
                    problems.append(((block, name), why))
        for name in set(self.equations) & set(self.parameters):
            problems.append((("parameters", name), "is also a variable; use distinct names"))
        if not problems:
            try:
                check_equations(self.equations, tuple(self.parameters))
            except FormulaError as error:
                variable, reason = error.args
                problems.append((("equations", variable), reason))
        raise_problems("model", problems, self.equations)
        return self

    @property
    def info(self) -> ModelInfo:
        """Variables (the keys of ``equations``) and parameters of the model."""
        return formula_info(tuple(self.equations), tuple(self.parameters))

    @cached_property
    def spec(self) -> ModelSpec:
        """The parsed equations (sympy)."""
        from planner.models.library import formula_spec

        return formula_spec(self.equations, tuple(self.parameters))


ModelBlock = Annotated[BuiltinModel | FormulaModel, Field(discriminator="kind")]
