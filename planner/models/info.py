"""What a model is, without its equations: variables, parameters and their physical bounds.

The scenario schema validates a file against this plain metadata, so checking a file never
imports sympy; the equations (:class:`planner.models.base.ModelSpec`) are built only when a
model is compiled or a user's formulas are parsed.
"""

from __future__ import annotations

from dataclasses import dataclass, field

MAX_FORMULA_VARIABLES = 4
"""Most state variables (equations) a formula model may have."""


@dataclass(frozen=True)
class ParameterInfo:
    """What a parameter means and which values are physical.

    ``lower`` is the smallest allowed value (None: no bound); ``strict`` makes it exclusive.
    """

    name: str
    meaning: str = ""
    lower: float | None = None
    strict: bool = False

    def violation(self, value: float) -> str | None:
        """Return why ``value`` is not physical for this parameter, or None when it is."""
        if self.lower is None:
            return None
        if self.strict and not value > self.lower:
            return f"must be greater than {self.lower:g} ({self.meaning or self.name})"
        if not self.strict and not value >= self.lower:
            return f"must be at least {self.lower:g} ({self.meaning or self.name})"
        return None


@dataclass(frozen=True)
class ModelInfo:
    """A model's state variables (in order) and parameters, with what each means."""

    kind: str
    variables: tuple[str, ...]
    parameters: tuple[ParameterInfo, ...]
    nonnegative_state: bool = False
    source: str = ""
    variable_meanings: tuple[str, ...] = field(default=())

    @property
    def parameter_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.parameters)

    def parameter_info(self, name: str) -> ParameterInfo:
        for info in self.parameters:
            if info.name == name:
                return info
        raise KeyError(name)


def formula_info(variables: tuple[str, ...], parameter_names: tuple[str, ...]) -> ModelInfo:
    """The metadata of a model written as formulas: unbounded parameters, states of any sign."""
    return ModelInfo(
        kind="formula",
        variables=variables,
        parameters=tuple(ParameterInfo(name) for name in parameter_names),
        source="user formulas",
    )
