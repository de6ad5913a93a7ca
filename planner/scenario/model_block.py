"""The ``[model]`` block: a built-in model with its parameters, or the user's own formulas."""

from __future__ import annotations

from functools import cached_property
from typing import Annotated, Literal

from pydantic import Field, model_validator

from planner.errors import FormulaError
from planner.models import (
    BUILTIN_MODELS,
    MAX_FORMULA_VARIABLES,
    ModelSpec,
    check_name,
    formula_spec,
)
from planner.scenario._base import Loc, Strict, raise_problems


def _parameter_problems(spec: ModelSpec, parameters: dict[str, float]) -> list[tuple[Loc, str]]:
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
            allowed = ", ".join(spec.parameter_names)
            problems.append(((name,), f"not a parameter of model {spec.kind!r} (it has {allowed})"))
    return [(("parameters", *loc), reason) for loc, reason in problems]


class BuiltinModel(Strict):
    """A model from the library, chosen by ``kind``; every parameter needs a value."""

    kind: Literal["recycling", "recycling-sediment"]
    parameters: dict[str, float]

    @model_validator(mode="after")
    def _check_parameters(self) -> BuiltinModel:
        raise_problems("model", _parameter_problems(self.spec, self.parameters), self.parameters)
        return self

    @property
    def spec(self) -> ModelSpec:
        return BUILTIN_MODELS[self.kind]


class FormulaModel(Strict):
    """The user's own equations: ``d(variable)/dt = expression`` for each key of ``equations``."""

    kind: Literal["formula"]
    equations: dict[str, str] = Field(min_length=1, max_length=MAX_FORMULA_VARIABLES)
    parameters: dict[str, float] = Field(min_length=1)

    @model_validator(mode="after")
    def _check_formulas(self) -> FormulaModel:
        problems: list[tuple[Loc, str]] = []
        for block, names in (("equations", self.equations), ("parameters", self.parameters)):
            for name in names:
                if (why := check_name(name)) is not None:
                    problems.append(((block, name), why))
        for name in set(self.equations) & set(self.parameters):
            problems.append((("parameters", name), "is also a variable; use distinct names"))
        if not problems:
            try:
                _ = self.spec
            except FormulaError as error:
                variable, reason = error.args
                problems.append((("equations", variable), reason))
        raise_problems("model", problems, self.equations)
        return self

    @cached_property
    def spec(self) -> ModelSpec:
        return formula_spec(self.equations, tuple(self.parameters))


ModelBlock = Annotated[BuiltinModel | FormulaModel, Field(discriminator="kind")]
