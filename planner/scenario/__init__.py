"""Scenario files: the Pydantic schema, TOML reading and writing, and the JSON Schema."""

from planner.scenario.blocks import Control, Costs, Measure, Simulation, Target
from planner.scenario.io import (
    load_scenario,
    parse_scenario,
    problems_from,
    save_scenario,
    scenario_from_data,
    scenario_to_toml,
)
from planner.scenario.lake import Lake
from planner.scenario.model_block import BuiltinModel, FormulaModel
from planner.scenario.root import Scenario, schedule_control_values
from planner.scenario.schedule_blocks import (
    InLakeMeasure,
    OvershootSchedule,
    ParameterPulse,
    PathSchedule,
    ScaleState,
    Schedule,
    StaircaseSchedule,
)
from planner.scenario.uncertainty import (
    JointPrior,
    LoadVariability,
    LognormalPrior,
    NormalPrior,
    Prior,
    TriangularPrior,
    Uncertainty,
    UniformPrior,
)


def json_schema() -> dict:
    """JSON Schema of the scenario file, straight from the models (for editors)."""
    return Scenario.model_json_schema()


__all__ = [
    "InLakeMeasure",
    "BuiltinModel",
    "Control",
    "JointPrior",
    "Costs",
    "FormulaModel",
    "Lake",
    "LoadVariability",
    "LognormalPrior",
    "Measure",
    "NormalPrior",
    "OvershootSchedule",
    "ParameterPulse",
    "PathSchedule",
    "Prior",
    "ScaleState",
    "Scenario",
    "Schedule",
    "Simulation",
    "StaircaseSchedule",
    "Target",
    "TriangularPrior",
    "Uncertainty",
    "UniformPrior",
    "json_schema",
    "load_scenario",
    "parse_scenario",
    "problems_from",
    "save_scenario",
    "scenario_from_data",
    "scenario_to_toml",
    "schedule_control_values",
]
