"""The JSON Schema editors show: every field of every block explained, with its unit and its
default."""

from __future__ import annotations

import re

import pytest

from planner.scenario import json_schema
from planner.scenario.blocks import Simulation
from planner.scenario.uncertainty import Uncertainty

MAX_DESCRIPTION = 200


def _properties() -> list[tuple[str, str, dict]]:
    """(block, field, property schema) for the top level and every ``$defs`` entry."""
    schema = json_schema()
    blocks = [("Scenario", schema), *schema["$defs"].items()]
    return [
        (block, field, prop)
        for block, body in blocks
        for field, prop in body.get("properties", {}).items()
    ]


def _property(block: str, field: str) -> dict:
    found = [prop for name, key, prop in _properties() if (name, key) == (block, field)]
    assert len(found) == 1, (block, field)
    return found[0]


def _renderings(value: float) -> set[str]:
    """Ways a numeric default may be written in a description."""
    texts = {f"{value:g}", str(value)}
    if float(value).is_integer():
        texts |= {str(int(value)), f"{int(value):,}"}
    return texts


PROPERTIES = _properties()
IDS = [f"{block}.{field}" for block, field, _ in PROPERTIES]


def test_the_schema_has_the_blocks_a_manager_edits():
    blocks = {block for block, _, _ in PROPERTIES}
    assert {"Scenario", "Control", "Simulation", "Costs", "Uncertainty", "Lake"} <= blocks
    assert len(PROPERTIES) > 100


@pytest.mark.parametrize(("block", "field", "prop"), PROPERTIES, ids=IDS)
def test_every_field_is_described_in_one_short_sentence(block, field, prop):
    description = prop.get("description", "")
    assert isinstance(description, str) and description.strip(), f"{block}.{field}"
    assert len(description) < MAX_DESCRIPTION, f"{block}.{field}: {description}"


@pytest.mark.parametrize(("block", "field", "prop"), PROPERTIES, ids=IDS)
def test_every_default_is_stated(block, field, prop):
    if "default" not in prop:
        return
    description = prop["description"]
    assert "default" in description, f"{block}.{field}: {description}"
    default = prop["default"]
    if isinstance(default, int | float) and not isinstance(default, bool):
        stated = [rf"default: {re.escape(text)}(?!\.?\d)" for text in _renderings(default)]
        assert any(re.search(text, description) for text in stated), (
            f"{block}.{field}: {description}"
        )
    elif isinstance(default, str) and default:
        assert f"default: {default}" in description, f"{block}.{field}: {description}"


def test_times_are_in_years():
    horizon = _property("Simulation", "horizon")["description"]
    assert "Years" in horizon or "years" in horizon
    assert f"default: {Simulation.model_fields['horizon'].default:g}" in horizon
    for block, field in [
        ("ScaleState", "time"),
        ("ParameterPulse", "start"),
        ("ParameterPulse", "duration"),
        ("ParameterPulse", "decay_years"),
        ("StaircaseSchedule", "step_years"),
        ("OvershootSchedule", "hold_years"),
        ("PathSchedule", "points"),
    ]:
        assert "year" in _property(block, field)["description"].lower(), (block, field)


def test_ensemble_size_states_its_default():
    members = _property("Uncertainty", "members")["description"]
    default = Uncertainty.model_fields["members"].default
    assert default == 1000
    assert f"default: {default}" in members


def test_rates_costs_and_loads_name_their_units():
    assert "per year" in _property("Costs", "discount_rate")["description"]
    assert "per year" in _property("Control", "max_change_per_year")["description"]
    assert "currency" in _property("Costs", "damage_per_year")["description"]
    assert "currency" in _property("Measure", "unit_cost")["description"]
    assert "currency" in _property("ScaleState", "cost")["description"]
    assert "g P / m2 / yr" in _property("Control", "unit")["description"]
    assert "g P / m2 / yr" in _property("Measure", "capacity")["description"]
    assert "square-root year" in _property("Uncertainty", "process_noise")["description"]
    assert "ug/L" in _property("Scenario", "lake")["description"]


def test_a_missing_default_is_caught():
    """The default check fails on a description that omits or misstates the default."""
    prop = {"default": 1000, "description": "Number of ensemble members."}
    with pytest.raises(AssertionError):
        test_every_default_is_stated("Uncertainty", "members", prop)
    prop = {"default": 1000, "description": "Number of ensemble members (default: 100)."}
    with pytest.raises(AssertionError):
        test_every_default_is_stated("Uncertainty", "members", prop)
    prop = {"default": 1000, "description": "Number of ensemble members (default: 10000)."}
    with pytest.raises(AssertionError):
        test_every_default_is_stated("Uncertainty", "members", prop)
