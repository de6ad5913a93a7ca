"""The whole scenario file and the rules that tie its blocks together.

Blocks: ``name``, ``description``, ``[model]``, ``[control]``, ``[state]``, ``[target]``,
``[simulation]``, ``[[schedules]]``, ``[costs]``, ``[uncertainty]``, ``[state_units]`` and the
optional ``[lake]`` (surface area, mean depth, residence time or outflow: see
:mod:`planner.scenario.lake`), with which reports also give the target variable as lake TP
(ug/L) with its trophic state and loads lake-wide (kg/yr or t/yr).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

from pydantic import Field, model_validator

from planner.errors import listing, quote
from planner.models.info import ModelInfo
from planner.scenario._base import (
    FrozenDict,
    FrozenList,
    Label,
    Loc,
    Name,
    Strict,
    raise_problems,
)
from planner.scenario.blocks import (
    Control,
    Costs,
    Simulation,
    Target,
    resolved_target,
    target_problems,
)
from planner.scenario.lake import Lake
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

if TYPE_CHECKING:
    import numpy as np

    from planner.models.base import ModelSpec, System

MAX_SCHEDULES = 100
"""Most candidate schedules one scenario may list."""


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
    """A lake, its model, the control the manager moves, the candidate schedules and the costs;
    optionally the lake's morphometry (``lake``), to read results in the trade's units."""

    name: Name = Field(description="Name of the scenario, shown on reports.")
    description: str = Field(
        default="", description="Free text on the lake and the question asked (default: none)."
    )
    model: ModelBlock = Field(
        description="The lake model: a built-in kind with its parameters, or your own formulas."
    )
    control: Control = Field(
        description="The parameter the manager moves (e.g. the external P load) and its limits."
    )
    state: FrozenDict[str, float] = Field(
        min_length=1,
        description="Current value of every model variable, in its unit (e.g. g P / m2).",
    )
    target: Target = Field(description="The desired regime and water-quality threshold.")
    simulation: Simulation = Field(
        default=Simulation(),
        description="Time settings in years (default: 50-year horizon, see its fields).",
    )
    schedules: FrozenList[Schedule] = Field(
        default=(),
        max_length=MAX_SCHEDULES,
        description="Candidate control schedules to compare (default: none).",
    )
    costs: Costs | None = Field(
        default=None, description="Abatement costs, discounting and damages (default: none)."
    )
    uncertainty: Uncertainty | None = Field(
        default=None,
        description="Uncertain parameters, load swings and ensemble size (default: none).",
    )
    state_units: FrozenDict[str, Label] = Field(
        default={},
        validate_default=True,
        description='Unit of each state variable, e.g. "g P / m2", for axes and tables '
        "(default: none).",
    )
    lake: Lake | None = Field(
        default=None,
        description="Lake area, depth and residence time, to report lake TP in ug/L and loads "
        "in kg/yr (default: none).",
    )

    @model_validator(mode="wrap")
    @classmethod
    def _threshold_from_lake_tp(cls, data: Any, handler) -> Scenario:
        """A target given as lake TP or a trophic class gets its threshold in the state's
        units through the lake's morphometry (planner.scenario.blocks.resolved_target)."""
        scenario = handler(data)
        target = scenario.target
        if target is None or not target.in_lake_tp:
            return scenario
        unit = scenario.state_units.get(target.variable, "")
        raise_problems("scenario", target_problems(target, scenario.lake, unit), scenario.name)
        return scenario.model_copy(update={"target": resolved_target(target, scenario.lake, unit)})

    @model_validator(mode="after")
    def _check_links(self) -> Scenario:
        raise_problems("scenario", list(self._link_problems()), self.name)
        return self

    def _link_problems(self):
        info = self.model_info
        parameters = self.model.parameters
        variables = info.variables
        control = self.control.parameter
        if control not in parameters:
            yield (
                ("control", "parameter"),
                f"{quote(control)} is not a model parameter (parameters: {listing(parameters)})",
            )
            return
        low, high = self.control.range
        current = parameters[control]
        if not low <= current <= high:
            yield (
                ("model", "parameters", control),
                f"current value {current:g} lies outside control.range [{low:g}, {high:g}]",
            )
        bound = info.parameter_info(control)
        if bound.lower is not None and (why := bound.violation(low)) is not None:
            yield (("control", "range"), f"lower end {why}")
        for name in variables:
            if name not in self.state:
                yield (("state", name), "missing: every model variable needs its current value")
            elif info.nonnegative_state and self.state[name] < 0:
                yield (("state", name), "must be at least 0 (an amount of phosphorus)")
        for name in self.state:
            if name not in variables:
                yield (("state", name), f"not a model variable (variables: {listing(variables)})")
        for name in self.state_units:
            if name not in variables:
                yield (("state_units", name), f"not a model variable ({listing(variables)})")
        if self.target.variable not in variables:
            yield (
                ("target", "variable"),
                f"{quote(self.target.variable)} is not a model variable ({listing(variables)})",
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
        info = self.model_info.parameter_info(name)
        return None if info.lower is None else (float(info.lower), info.strict)

    def _action_problems(self, where: Loc, action: ScaleState | ParameterPulse):
        if isinstance(action, ScaleState):
            if action.variable not in self.model_info.variables:
                yield ((*where, "variable"), f"{quote(action.variable)} is not a model variable")
            return
        if action.parameter == self.control.parameter:
            yield ((*where, "parameter"), "the control is moved by the schedule itself")
        elif action.parameter not in self.model.parameters:
            yield ((*where, "parameter"), f"{quote(action.parameter)} is not a model parameter")

    # Derived views used by the numerical modules.
    @property
    def model_info(self) -> ModelInfo:
        """Variables and parameters of the model, without its equations (no sympy)."""
        return self.model.info

    @property
    def spec(self) -> ModelSpec:
        """The model's equations (sympy; the first use imports it)."""
        return self.model.spec

    @property
    def current_control(self) -> float:
        return float(self.model.parameters[self.control.parameter])

    @property
    def initial_state(self) -> np.ndarray:
        import numpy as np

        return np.array([self.state[name] for name in self.model_info.variables], dtype=float)

    def axis_title(self, variable: str) -> str:
        unit = self.state_units.get(variable, "")
        return f"{variable} ({unit})" if unit else variable

    @property
    def target_index(self) -> int:
        return self.model_info.variables.index(self.target.variable)

    def system(self, **overrides: Any) -> System:
        """The compiled model with this scenario's parameters bound (control left free)."""
        from planner.models.base import compile_model

        values = {**self.model.parameters, **overrides}
        return compile_model(self.spec, self.control.parameter).bind(values)
