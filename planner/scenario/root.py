"""The whole scenario file and the rules that tie its blocks together."""

from __future__ import annotations

from typing import Any

import numpy as np
from pydantic import Field, model_validator

from planner.models import ModelSpec, System, compile_model
from planner.scenario._base import Loc, Name, Strict, raise_problems
from planner.scenario.blocks import Control, Costs, Simulation, Target
from planner.scenario.model_block import ModelBlock
from planner.scenario.schedule_blocks import (
    OvershootSchedule,
    ParameterPulse,
    PathSchedule,
    ScaleState,
    Schedule,
    StaircaseSchedule,
)
from planner.scenario.uncertainty import Uncertainty, prior_problems


def schedule_control_values(schedule: Schedule) -> list[tuple[Loc, float]]:
    """Every control value a schedule names, with where it is named."""
    if isinstance(schedule, PathSchedule):
        return [(("points", i, 1), point[1]) for i, point in enumerate(schedule.points)]
    if isinstance(schedule, StaircaseSchedule):
        return [(("levels", i), level) for i, level in enumerate(schedule.levels)]
    if isinstance(schedule, OvershootSchedule):
        return [(("floor",), schedule.floor), (("relax_to",), schedule.relax_to)]
    raise TypeError(type(schedule))


class Scenario(Strict):
    """A lake, its model, the control the manager moves, the candidate schedules and the costs."""

    name: Name
    description: str = ""
    model: ModelBlock
    control: Control
    state: dict[str, float] = Field(min_length=1)
    target: Target
    simulation: Simulation = Simulation()
    schedules: list[Schedule] = []
    costs: Costs | None = None
    uncertainty: Uncertainty | None = None
    state_units: dict[str, str] = Field(
        default={}, description="Unit of each state variable, for axes and tables."
    )

    @model_validator(mode="after")
    def _check_links(self) -> Scenario:
        raise_problems("scenario", list(self._link_problems()), self.name)
        return self

    def _link_problems(self):
        spec = self.spec
        parameters = self.model.parameters
        variables = spec.variables
        control = self.control.parameter
        if control not in parameters:
            yield (
                ("control", "parameter"),
                f"{control!r} is not a model parameter (parameters: {', '.join(parameters)})",
            )
            return
        low, high = self.control.range
        current = parameters[control]
        if not low <= current <= high:
            yield (
                ("model", "parameters", control),
                f"current value {current:g} lies outside control.range [{low:g}, {high:g}]",
            )
        bound = spec.parameter_info(control)
        if bound.lower is not None and (why := bound.violation(low)) is not None:
            yield (("control", "range"), f"lower end {why}")
        for name in variables:
            if name not in self.state:
                yield (("state", name), "missing: every model variable needs its current value")
            elif spec.nonnegative_state and self.state[name] < 0:
                yield (("state", name), "must be at least 0 (an amount of phosphorus)")
        for name in self.state:
            if name not in variables:
                yield (("state", name), f"not a model variable (variables: {', '.join(variables)})")
        for name in self.state_units:
            if name not in variables:
                yield (("state_units", name), f"not a model variable ({', '.join(variables)})")
        if self.target.variable not in variables:
            yield (
                ("target", "variable"),
                f"{self.target.variable!r} is not a model variable ({', '.join(variables)})",
            )
        seen: dict[str, int] = {}
        for index, schedule in enumerate(self.schedules):
            where: Loc = ("schedules", index)
            if schedule.name in seen:
                yield ((*where, "name"), f"same name as schedules.{seen[schedule.name]}")
            seen.setdefault(schedule.name, index)
            for loc, value in schedule_control_values(schedule):
                if (why := bound.violation(value)) is not None:
                    yield ((*where, *loc), f"control value {value:g} {why}")
            for a, action in enumerate(schedule.actions):
                yield from self._action_problems((*where, "actions", a), action)
        if self.uncertainty is not None:
            yield from prior_problems(
                self.uncertainty,
                parameters=parameters,
                control=control,
                variables=variables,
                physical_lower=self._physical_lower,
            )

    def _physical_lower(self, name: str) -> tuple[float, bool] | None:
        info = self.spec.parameter_info(name)
        return None if info.lower is None else (float(info.lower), info.strict)

    def _action_problems(self, where: Loc, action: ScaleState | ParameterPulse):
        if isinstance(action, ScaleState):
            if action.variable not in self.spec.variables:
                yield ((*where, "variable"), f"{action.variable!r} is not a model variable")
            return
        if action.parameter == self.control.parameter:
            yield ((*where, "parameter"), "the control is moved by the schedule itself")
        elif action.parameter not in self.model.parameters:
            yield ((*where, "parameter"), f"{action.parameter!r} is not a model parameter")

    # Derived views used by the numerical modules.
    @property
    def spec(self) -> ModelSpec:
        return self.model.spec

    @property
    def current_control(self) -> float:
        return float(self.model.parameters[self.control.parameter])

    @property
    def initial_state(self) -> np.ndarray:
        return np.array([self.state[name] for name in self.spec.variables], dtype=float)

    def axis_title(self, variable: str) -> str:
        unit = self.state_units.get(variable, "")
        return f"{variable} ({unit})" if unit else variable

    @property
    def target_index(self) -> int:
        return self.spec.variables.index(self.target.variable)

    def system(self, **overrides: Any) -> System:
        """The compiled model with this scenario's parameters bound (control left free)."""
        values = {**self.model.parameters, **overrides}
        return compile_model(self.spec, self.control.parameter).bind(values)
