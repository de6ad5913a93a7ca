"""Tests for scenario files: the demos load and round-trip, invalid input is reported by field,
and no malformed scenario gets past validation as anything but an InputError."""

from __future__ import annotations

import copy
import dataclasses
import datetime
import math
import pickle
import tomllib
from collections.abc import Mapping
from pathlib import Path

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st
from pydantic import ValidationError

from planner.errors import MAX_PROBLEMS, InputError, Problem, quote
from planner.models import BUILTIN_INFO, ModelInfo
from planner.scenario import (
    Scenario,
    load_scenario,
    parse_scenario,
    scenario_from_data,
    scenario_to_toml,
)
from planner.scenario._base import MAX_LABEL, MAX_YEARS
from planner.scenario.blocks import MAX_MEASURES, MAX_SETTLE_YEARS
from planner.scenario.io import MAX_NESTING, MAX_SCENARIO_BYTES
from planner.scenario.model_block import MAX_FORMULA_PARAMETERS
from planner.scenario.root import MAX_SCHEDULES
from planner.scenario.schedule_blocks import MAX_ACTIONS
from planner.scenario.uncertainty import MAX_MEMBERS

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
DEMOS = sorted(SCENARIOS.glob("*.toml"))
FORMULA_SCENARIO = """
name = "Nondimensional lake"
[model]
kind = "formula"
equations = { x = "a - b*x + x**2/(1 + x**2)" }
parameters = { a = 0.1, b = 0.6 }
[control]
parameter = "a"
range = [0.0, 0.3]
[state]
x = 1.0
[target]
variable = "x"
[[schedules]]
name = "cut"
kind = "staircase"
levels = [0.08, 0.05]
step_years = 5.0
[[schedules.actions]]
kind = "scale-state"
time = 1.0
variable = "x"
factor = 0.5
"""
"""A valid scenario with a formula model, built here so that formulas get mutated too."""


def _data(name: str) -> dict:
    return tomllib.loads((SCENARIOS / name).read_text(encoding="utf-8"))


def _problems(data: object, *, strict: bool = False) -> list[tuple[str, str]]:
    """(field, reason) of every problem; fails the test when the data is accepted."""
    with pytest.raises(InputError) as caught:
        scenario_from_data(data, "case.toml", strict=strict)
    return [(p.field, p.reason) for p in caught.value.problems]


def _fields(data: object) -> list[str]:
    return [field for field, _ in _problems(data)]


# --------------------------------------------------------------------------------------------
# demos


def test_there_are_demos():
    assert len(DEMOS) >= 3


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_demo_loads_and_round_trips(path):
    scenario = load_scenario(path)
    assert isinstance(scenario, Scenario)
    text = scenario_to_toml(scenario)
    again = parse_scenario(text, "round-trip")
    assert again == scenario
    assert scenario_to_toml(again) == text


def test_formula_scenario_round_trips():
    scenario = parse_scenario(FORMULA_SCENARIO, "formula.toml")
    assert scenario.spec.variables == ("x",)
    assert parse_scenario(scenario_to_toml(scenario)) == scenario


def _metadata(spec) -> ModelInfo:
    """The plain part of a model spec (what validation uses), without the equations."""
    return ModelInfo(**{f.name: getattr(spec, f.name) for f in dataclasses.fields(ModelInfo)})


@pytest.mark.parametrize("kind", sorted(BUILTIN_INFO))
def test_builtin_metadata_is_the_compiled_models(kind):
    """Files are validated against plain metadata; it must describe the equations exactly."""
    scenario = next(s for s in map(load_scenario, DEMOS) if s.model.kind == kind)
    spec = scenario.spec
    assert _metadata(spec) == scenario.model_info == BUILTIN_INFO[kind]
    assert len(spec.equations) == len(spec.variables)
    used = {str(symbol) for equation in spec.equations for symbol in equation.free_symbols}
    assert used == {*spec.variables, *spec.parameter_names}


def test_formula_metadata_is_the_parsed_models():
    scenario = parse_scenario(FORMULA_SCENARIO, "formula.toml")
    assert _metadata(scenario.spec) == scenario.model_info
    assert scenario.model_info.parameter_names == ("a", "b")


# --------------------------------------------------------------------------------------------
# scenarios are immutable (the web app shares one object between requests)


def _alder() -> Scenario:
    return load_scenario(SCENARIOS / "alder-mere.toml")


def _append_schedule(scenario):
    scenario.schedules.append(scenario.schedules[0])


def _set_parameter(scenario):
    scenario.model.parameters["L"] = 3.0


def _delete_parameter(scenario):
    del scenario.model.parameters["L"]


def _set_range_end(scenario):
    scenario.control.range[0] = 0.5


def _append_point(scenario):
    scenario.schedules[0].points.append((9.0, 1.0))


def _set_point(scenario):
    scenario.schedules[0].points[0] = (0.0, 1.0)


def _set_point_value(scenario):
    scenario.schedules[0].points[0][1] = 1.0


def _set_level(scenario):
    scenario.schedules[2].levels[0] = 1.0


def _append_action(scenario):
    scenario.schedules[3].actions.append(scenario.schedules[3].actions[0])


def _set_state(scenario):
    scenario.state["P"] = 1.0


def _update_state_units(scenario):
    scenario.state_units.update(P="kg")  # a Mapping has no update


def _append_measure(scenario):
    scenario.costs.measures.append(scenario.costs.measures[0])


def _append_prior(scenario):
    scenario.uncertainty.priors.append(scenario.uncertainty.priors[0])


def _set_process_noise(scenario):
    scenario.uncertainty.process_noise["P"] = 1.0


def _replace_the_items_behind_a_mapping(scenario):
    scenario.model.parameters._items = {"L": 3.0}


def _assign_a_field(scenario):
    scenario.schedules = ()


def _assign_a_nested_field(scenario):
    scenario.schedules[0].points = ((0.0, 1.0),)


@pytest.mark.parametrize(
    ("mutation", "error"),
    [
        (_append_schedule, AttributeError),
        (_set_parameter, TypeError),
        (_delete_parameter, TypeError),
        (_set_range_end, TypeError),
        (_append_point, AttributeError),
        (_set_point, TypeError),
        (_set_point_value, TypeError),
        (_set_level, TypeError),
        (_append_action, AttributeError),
        (_set_state, TypeError),
        (_update_state_units, AttributeError),
        (_append_measure, AttributeError),
        (_append_prior, AttributeError),
        (_set_process_noise, TypeError),
        (_replace_the_items_behind_a_mapping, AttributeError),
        (_assign_a_field, ValidationError),
        (_assign_a_nested_field, ValidationError),
    ],
    ids=lambda value: value.__name__.strip("_") if callable(value) else None,
)
def test_a_loaded_scenario_cannot_be_changed(mutation, error):
    scenario = _alder()
    assert scenario.schedules[0].kind == "path"
    assert scenario.schedules[2].kind == "staircase"
    assert scenario.schedules[3].actions
    assert scenario.costs.measures and scenario.uncertainty.priors
    with pytest.raises(error):
        mutation(scenario)
    assert scenario == _alder()


def test_read_only_mappings_compare_equal_to_dicts():
    scenario = _alder()
    data = _data("alder-mere.toml")
    assert isinstance(scenario.model.parameters, Mapping)
    assert scenario.model.parameters == data["model"]["parameters"]
    assert data["state"] == scenario.state
    assert {**scenario.model.parameters, "L": 1.0}["L"] == 1.0


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_model_dump_is_plain_data_and_round_trips(path):
    scenario = load_scenario(path)
    for mode in ("python", "json"):
        data = scenario.model_dump(mode=mode)
        assert Scenario.model_validate(data) == scenario
        assert type(data["schedules"]) is list
        assert type(data["state"]) is dict
        assert type(data["model"]["parameters"]) is dict
        assert all(type(schedule["actions"]) is list for schedule in data["schedules"])
        if scenario.costs is not None:
            assert type(data["costs"]["measures"]) is list
        if scenario.uncertainty is not None:
            assert type(data["uncertainty"]["priors"]) is list
            assert type(data["uncertainty"]["process_noise"]) is dict
    written = _data(path.name)["schedules"]
    dumped = scenario.model_dump(mode="json")["schedules"]
    for as_written, as_dumped in zip(written, dumped, strict=True):
        if as_written["kind"] == "path":
            assert as_dumped["points"] == as_written["points"]  # lists of [time, value] lists


def test_formula_model_equations_are_read_only_and_dump_as_a_dict():
    scenario = parse_scenario(FORMULA_SCENARIO, "formula.toml")
    with pytest.raises(TypeError):
        scenario.model.equations["x"] = "x"
    assert scenario.model.model_dump()["equations"] == {"x": "a - b*x + x**2/(1 + x**2)"}


def test_model_copy_freezes_what_it_is_given():
    """model_copy skips validation; lists and dicts handed to it are frozen all the same."""
    scenario = _alder()
    model = scenario.model.model_copy(update={"parameters": {**scenario.model.parameters, "s": 1}})
    schedule = scenario.schedules[0].model_copy(update={"points": [[0.0, 2.0], [3.0, 1.0]]})
    copied = scenario.model_copy(update={"model": model, "schedules": [schedule]})
    assert copied.model.parameters["s"] == 1
    assert copied.schedules[0].points == ((0.0, 2.0), (3.0, 1.0))
    for mutation in (_set_parameter, _append_schedule, _append_point, _set_point_value):
        with pytest.raises((TypeError, AttributeError)):
            mutation(copied)


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_scenarios_pickle_and_deep_copy(path):
    """Ensemble workers receive scenarios pickled; the web app caches objects that hold them."""
    scenario = load_scenario(path)
    assert pickle.loads(pickle.dumps(scenario)) == scenario
    assert copy.deepcopy(scenario) == scenario


# --------------------------------------------------------------------------------------------
# specific invalid cases


def test_control_parameter_not_a_model_parameter():
    data = _data("alder-mere.toml")
    data["control"]["parameter"] = "Q"
    problems = _problems(data)
    assert [f for f, _ in problems] == ["control.parameter"]
    assert "Q" in problems[0][1]


def test_missing_state_variable():
    data = _data("brellow-reservoir.toml")
    del data["state"]["M"]
    assert "state.M" in _fields(data)


def test_unknown_state_variable():
    data = _data("alder-mere.toml")
    data["state"]["Z"] = 1.0
    assert _fields(data) == ["state.Z"]


def test_range_reversed():
    data = _data("alder-mere.toml")
    data["control"]["range"] = [0.5, 0.0]
    assert "control.range" in _fields(data)


@pytest.mark.parametrize(
    ("where", "value", "field"),
    [
        (("model", "parameters", "r"), math.nan, "model.parameters.r"),
        (("model", "parameters", "m"), math.inf, "model.parameters.m"),
        (("state", "P"), -math.inf, "state.P"),
        (("simulation", "horizon"), math.nan, "simulation.horizon"),
        (("costs", "damage_per_year"), math.inf, "costs.damage_per_year"),
    ],
)
def test_nan_and_inf_are_refused(where, value, field):
    data = _data("alder-mere.toml")
    node = data
    for key in where[:-1]:
        node = node[key]
    node[where[-1]] = value
    assert field in _fields(data)


@pytest.mark.parametrize("literal", ["nan", "inf", "-inf", "+nan"])
def test_nan_and_inf_from_toml_text(literal):
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    text = text.replace("P = 0.71", f"P = {literal}")
    with pytest.raises(InputError) as caught:
        parse_scenario(text, "lake.toml")
    assert [p.field for p in caught.value.problems] == ["state.P"]
    assert "finite" in caught.value.problems[0].reason


def test_nan_in_range_names_the_element():
    data = _data("alder-mere.toml")
    data["control"]["range"] = [0.0, math.nan]
    assert _fields(data) == ["control.range.1"]


def test_negative_loss_rate_for_recycling():
    data = _data("alder-mere.toml")
    data["model"]["parameters"]["s"] = -0.5
    assert "model.parameters.s" in _fields(data)


@pytest.mark.parametrize(
    ("block", "typo", "field"),
    [
        ("control", "lowest_achievabel", "control.lowest_achievabel"),
        (None, "schedule", "schedule"),
        ("simulation", "horizn", "simulation.horizn"),
    ],
)
def test_unknown_key(block, typo, field):
    data = _data("alder-mere.toml")
    (data if block is None else data[block])[typo] = 1.0
    problems = _problems(data)
    assert [f for f, _ in problems] == [field]
    assert "spelling" in problems[0][1]


def test_floor_above_relax_to():
    data = _data("alder-mere.toml")
    assert data["schedules"][1]["kind"] == "overshoot"
    data["schedules"][1]["floor"] = 0.2  # relax_to is 0.15
    assert "schedules.1.relax_to" in _fields(data)


def test_action_naming_an_unknown_variable():
    data = _data("brellow-reservoir.toml")
    assert data["schedules"][2]["actions"][0]["kind"] == "scale-state"
    data["schedules"][2]["actions"][0]["variable"] = "Q"
    assert _fields(data) == ["schedules.2.actions.0.variable"]


def test_action_naming_an_unknown_parameter():
    data = _data("alder-mere.toml")
    data["schedules"][3]["actions"][0]["parameter"] = "zz"
    assert _fields(data) == ["schedules.3.actions.0.parameter"]


@pytest.mark.parametrize(
    "formula", ["a - b*x +", "__import__('os')", "x**", "1/0", "exp(x, 2)", "a - b*y"]
)
def test_formula_model_with_bad_formula(formula):
    text = FORMULA_SCENARIO.replace("a - b*x + x**2/(1 + x**2)", formula)
    with pytest.raises(InputError) as caught:
        parse_scenario(text, "formula.toml")
    problems = caught.value.problems
    assert [p.field for p in problems] == ["model.equations.x"]
    assert problems[0].reason


def test_duplicated_schedule_names():
    data = _data("alder-mere.toml")
    data["schedules"][2]["name"] = data["schedules"][0]["name"]
    assert _fields(data) == ["schedules.2.name"]


def test_invalid_toml_syntax():
    with pytest.raises(InputError) as caught:
        parse_scenario('name = "unterminated\n[model]\n', "broken.toml")
    (problem,) = caught.value.problems
    assert problem.field == "(file)"
    assert problem.source == "broken.toml"
    assert str(problem).startswith("broken.toml: (file): ")


def test_file_not_found(tmp_path):
    missing = tmp_path / "nowhere.toml"
    with pytest.raises(InputError) as caught:
        load_scenario(missing)
    (problem,) = caught.value.problems
    assert problem.field == "(file)"
    assert problem.source == str(missing)


def test_every_problem_is_reported_at_once():
    data = _data("alder-mere.toml")
    data["state"]["Z"] = 1.0
    data["schedules"][2]["name"] = data["schedules"][0]["name"]
    assert set(_fields(data)) == {"state.Z", "schedules.2.name"}


def test_problem_text_names_source_field_and_reason():
    data = _data("alder-mere.toml")
    data["state"]["Z"] = 1.0
    with pytest.raises(InputError) as caught:
        scenario_from_data(data, "lake.toml")
    (problem,) = caught.value.problems
    assert str(problem) == f"lake.toml: state.Z: {problem.reason}"


# --------------------------------------------------------------------------------------------
# strict types: TOML v1.0.0 (https://toml.io/en/v1.0.0) has Boolean, Integer, Float and String as
# distinct value types, so `true` is not a number and "40" is not a number


def _set(data: dict, where: tuple, value: object) -> dict:
    node = data
    for key in where[:-1]:
        node = node[key]
    node[where[-1]] = value
    return data


@pytest.mark.parametrize(
    ("where", "value", "field", "reason"),
    [
        (("simulation", "horizon"), True, "simulation.horizon", "expected a number, got true"),
        (("state", "P"), False, "state.P", "expected a number, got false"),
        (("control", "range", 1), True, "control.range.1", "expected a number, got true"),
        (("model", "parameters", "q"), True, "model.parameters.q", "expected a number, got true"),
        (("schedules", 0, "points", 1, 0), True, "schedules.0.points.1.0", "got true"),
        (("costs", "measures", 0, "capacity"), True, "costs.measures.0.capacity", "got true"),
        (("uncertainty", "members"), True, "uncertainty.members", "expected a whole number"),
        (("uncertainty", "steps_per_year"), True, "uncertainty.steps_per_year", "got true"),
        (("uncertainty", "priors", 0, "lower"), False, "uncertainty.priors.0.lower", "got false"),
        (("target", "threshold"), True, "target.threshold", "expected a number, got true"),
        (("target", "variable"), 1.0, "target.variable", "expected text in quotes, got 1.0"),
        (("control",), [1.0], "control", "expected a table, got a list of 1 item"),
        (("target", "regime"), "low", "target.regime", "expected 'lowest' or 'highest', got 'low'"),
    ],
)
@pytest.mark.parametrize("strict", [True, False], ids=["file", "editor"])
def test_a_value_of_another_type_is_refused(where, value, field, reason, strict):
    problems = dict(_problems(_set(_data("alder-mere.toml"), where, value), strict=strict))
    assert field in problems, problems
    assert reason in problems[field]


@pytest.mark.parametrize(
    ("where", "value", "field", "reason"),
    [
        (("simulation", "horizon"), "40", "simulation.horizon", "expected a number, got '40'"),
        (("state", "P"), "0.71", "state.P", "expected a number, got '0.71'"),
        (
            ("uncertainty", "members"),
            2000.0,
            "uncertainty.members",
            "expected a whole number, got 2000.0",
        ),
    ],
)
def test_a_file_holds_numbers_as_numbers(where, value, field, reason):
    problems = dict(_problems(_set(_data("alder-mere.toml"), where, value), strict=True))
    assert problems == {field: reason}


def test_the_editor_sends_numbers_as_typed_text():
    """The web editor's fields hold text; outside files, text that reads as a number is one."""
    data = _set(_data("alder-mere.toml"), ("simulation", "horizon"), "40")
    _set(data, ("schedules", 0, "points"), [["0", "0.26"], ["3", "0.12"]])
    scenario = scenario_from_data(data)
    assert scenario.simulation.horizon == 40.0
    assert scenario.schedules[0].points == ((0.0, 0.26), (3.0, 0.12))


def test_true_as_the_horizon_in_a_file():
    """The case of the hardening report: `horizon = true` once meant one year."""
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    with pytest.raises(InputError) as caught:
        parse_scenario(text.replace("horizon = 40.0", "horizon = true"), "lake.toml")
    assert [str(p) for p in caught.value.problems] == [
        "lake.toml: simulation.horizon: expected a number, got true"
    ]


def test_whole_numbers_are_numbers():
    """TOML v1.0.0 writes 40 as an integer; where a number is expected, it is one."""
    data = _set(_data("alder-mere.toml"), ("simulation", "horizon"), 40)
    _set(data, ("control", "range"), [0, 5])
    scenario = scenario_from_data(data)
    assert scenario.simulation.horizon == 40.0
    assert scenario.control.range == (0.0, 5.0)


def test_a_kind_of_another_type_is_refused_by_name():
    data = _set(_data("alder-mere.toml"), ("schedules", 0, "kind"), True)
    problems = dict(_problems(data))
    assert "unknown kind true" in problems["schedules.0"]
    assert "'path', 'staircase', 'overshoot'" in problems["schedules.0"]


def test_a_missing_kind_lists_the_kinds():
    data = _data("alder-mere.toml")
    del data["schedules"][0]["kind"]
    assert dict(_problems(data)) == {
        "schedules.0": "kind is missing; give one of path, staircase, overshoot"
    }


# --------------------------------------------------------------------------------------------
# a byte-order mark: the Unicode Standard (section 2.6, Encoding Schemes) says a BOM is neither
# required nor recommended for UTF-8 but may be met in UTF-8 data (editors on Windows write one)


def test_a_byte_order_mark_is_ignored_in_text():
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    assert parse_scenario("\ufeff" + text) == parse_scenario(text)


def test_a_byte_order_mark_is_ignored_in_a_file(tmp_path):
    original = SCENARIOS / "alder-mere.toml"
    marked = tmp_path / "marked.toml"
    marked.write_text(original.read_text(encoding="utf-8"), encoding="utf-8-sig")
    assert marked.read_bytes().startswith(b"\xef\xbb\xbf")
    assert load_scenario(marked) == load_scenario(original)


def test_only_a_leading_byte_order_mark_is_ignored():
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    with pytest.raises(InputError) as caught:
        parse_scenario("\ufeff\ufeff" + text, "twice.toml")
    assert [p.field for p in caught.value.problems] == ["(file)"]


# --------------------------------------------------------------------------------------------
# messages never repeat a huge value (common practice, no source)

LONG = 900_000


def test_a_long_value_is_cut_short_in_the_message():
    data = _set(_data("alder-mere.toml"), ("control", "parameter"), "L" * LONG)
    ((field, reason),) = _problems(data)
    assert field == "control.parameter"
    assert reason.startswith(f"{'L' * 60!r}... ({LONG} characters) is not a model parameter")
    assert len(reason) < 200


def test_a_long_kind_is_cut_short_in_the_message():
    data = _set(_data("alder-mere.toml"), ("schedules", 0, "kind"), "p" * LONG)
    ((_, reason),) = _problems(data)
    assert f"({LONG} characters)" in reason
    assert len(reason) < 250


def test_a_long_key_is_cut_short_in_the_field():
    data = _set(_data("alder-mere.toml"), ("simulation", "h" * LONG), 1.0)
    ((field, _),) = _problems(data)
    assert field == f"simulation.{'h' * 60}... ({LONG} characters)"


def test_an_odd_key_is_quoted_in_the_field():
    data = _set(_data("alder-mere.toml"), ("simulation", "a\nb"), 1.0)
    _set(data, ("simulation", "c.d"), 1.0)
    assert set(_fields(data)) == {"simulation.'a\\nb'", "simulation.'c.d'"}


@pytest.mark.parametrize(
    ("value", "shown"),
    [
        (True, "true"),
        (False, "false"),
        ("L", "'L'"),
        ("x" * 61, f"{'x' * 60!r}... (61 characters)"),
        # str() of it would raise (so pytest gets an id for it)
        pytest.param(10**5000, "an integer of about 5001 digits", id="5001 digits"),
        (-7, "-7"),
        (1e308, "1e+308"),
        (math.nan, "nan"),
        ([], "[]"),
        ([1, 2], "a list of 2 items"),
        ({"a": 1}, "a table of 1 key"),
        (datetime.date(1979, 5, 27), "the date or time 1979-05-27"),
    ],
)
def test_quote_spells_values_as_toml_and_cuts_them_short(value, shown):
    assert quote(value) == shown


def test_a_problem_cuts_a_long_reason_short():
    """A last guard for messages built elsewhere that quote a value in full."""
    problem = Problem("f.toml", "a" * 5000, "b" * 5000)
    assert len(str(problem)) < 1000
    assert problem.reason.endswith("... (5000 characters)")


def test_problems_are_capped_with_a_count_of_the_rest():
    data = _data("alder-mere.toml")
    for k in range(100):
        data["state"][f"Z{k}"] = 1.0
    problems = _problems(data)
    assert len(problems) == MAX_PROBLEMS + 1
    assert problems[-1] == (
        "(file)",
        f"{100 - MAX_PROBLEMS} more problems not shown; fix the ones above first",
    )


# --------------------------------------------------------------------------------------------
# nesting and size (common practice, no source)


@pytest.mark.parametrize("depth", [MAX_NESTING + 5, 400, 5000])
@pytest.mark.parametrize("kind", ["array", "table"])
def test_deeply_nested_text_is_refused_naming_the_file(depth, kind):
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    value = "[" * depth + "]" * depth if kind == "array" else "{a = " * depth + "1" + " }" * depth
    with pytest.raises(InputError) as caught:
        parse_scenario(f"deep = {value}\n{text}", "deep.toml")
    (problem,) = caught.value.problems
    assert problem.source == "deep.toml"
    assert "nested" in problem.reason
    assert problem.field == "(file)" or problem.field.startswith("deep.")


def test_deeply_nested_data_names_where():
    nested: object = 1.0
    for _ in range(MAX_NESTING + 3):
        nested = [nested]
    data = _set(_data("alder-mere.toml"), ("state", "P"), nested)
    ((field, reason),) = _problems(data)
    assert field.startswith("state.P.0.0.0")
    assert f"more than {MAX_NESTING} levels" in reason


def test_an_integer_too_long_for_python_is_refused():
    """TOML v1.0.0: integers are 64-bit; Python itself refuses to read one of 5000 digits."""
    text = (SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8")
    with pytest.raises(InputError) as caught:
        parse_scenario(text.replace("P = 0.71", f"P = {'9' * 5000}"), "digits.toml")
    assert [(p.field, p.reason) for p in caught.value.problems] == [
        ("(file)", "not usable: an integer has too many digits")
    ]


def test_an_integer_too_large_for_a_number_is_refused_by_field():
    data = _set(_data("alder-mere.toml"), ("state", "P"), 10**400)
    assert _problems(data) == [
        ("state.P", "an integer of about 401 digits is too large for a number")
    ]


def test_text_over_the_size_limit_is_refused():
    with pytest.raises(InputError) as caught:
        parse_scenario("#" * (MAX_SCENARIO_BYTES + 1), "big.toml")
    assert [p.field for p in caught.value.problems] == ["(file)"]


# --------------------------------------------------------------------------------------------
# limits (common practice, no source): each is refused at its field, and its value is allowed


@pytest.mark.parametrize(
    ("where", "allowed", "refused", "field"),
    [
        (("simulation", "horizon"), MAX_YEARS, MAX_YEARS * 1.001, "simulation.horizon"),
        (("simulation", "horizon"), 1e-9, 0.0, "simulation.horizon"),
        (("simulation", "settle_cap"), MAX_SETTLE_YEARS, 1e308, "simulation.settle_cap"),
        (("schedules", 0, "points", 1, 0), MAX_YEARS, 1e308, "schedules.0.points.1.0"),
        (("schedules", 1, "hold_years"), MAX_YEARS, 1e308, "schedules.1.hold_years"),
        (("schedules", 2, "step_years"), MAX_YEARS, 1e308, "schedules.2.step_years"),
        (
            ("schedules", 3, "actions", 0, "duration"),
            MAX_YEARS,
            1e308,
            "schedules.3.actions.0.duration",
        ),
        (("uncertainty", "members"), MAX_MEMBERS, MAX_MEMBERS + 1, "uncertainty.members"),
        (("uncertainty", "steps_per_year"), 10_000, 10_001, "uncertainty.steps_per_year"),
        (("control", "label"), "x" * MAX_LABEL, "x" * (MAX_LABEL + 1), "control.label"),
        (("state_units", "P"), "g" * MAX_LABEL, "g" * (MAX_LABEL + 1), "state_units.P"),
    ],
)
def test_a_limit_is_refused_at_its_field(where, allowed, refused, field):
    scenario_from_data(_set(_data("alder-mere.toml"), where, allowed))
    assert field in _fields(_set(_data("alder-mere.toml"), where, refused))


def _schedules(count: int) -> list[dict]:
    return [{"name": f"s{k}", "kind": "path", "points": [[0.0, 1.0]]} for k in range(count)]


def _measures(count: int) -> list[dict]:
    return [{"name": f"m{k}", "capacity": 0.1, "unit_cost": 1.0} for k in range(count)]


def _actions(count: int) -> list[dict]:
    return [
        {"kind": "parameter-pulse", "parameter": "r", "factor": 0.5, "start": 1.0, "duration": 1.0}
    ] * count


@pytest.mark.parametrize(
    ("where", "make", "limit", "field"),
    [
        (("schedules",), _schedules, MAX_SCHEDULES, "schedules"),
        (("costs", "measures"), _measures, MAX_MEASURES, "costs.measures"),
        (("schedules", 3, "actions"), _actions, MAX_ACTIONS, "schedules.3.actions"),
    ],
)
def test_a_count_limit_is_refused_at_its_field(where, make, limit, field):
    scenario_from_data(_set(_data("alder-mere.toml"), where, make(limit)))
    problems = dict(_problems(_set(_data("alder-mere.toml"), where, make(limit + 1))))
    assert f"at most {limit} items" in problems[field]


def test_formula_parameters_are_limited():
    data = tomllib.loads(FORMULA_SCENARIO)
    parameters = data["model"]["parameters"]
    while len(parameters) < MAX_FORMULA_PARAMETERS:
        parameters[f"p{len(parameters)}"] = 1.0
    scenario_from_data(data)
    parameters["extra"] = 1.0
    assert "model.parameters" in _fields(data)


# --------------------------------------------------------------------------------------------
# malformed scenarios never escape as anything but InputError

BASES = [_data(path.name) for path in DEMOS] + [tomllib.loads(FORMULA_SCENARIO)]


def _paths(node: object, prefix: tuple = ()) -> list[tuple]:
    """Every location in nested dicts and lists, the root included."""
    out = [prefix]
    if isinstance(node, dict):
        for key, value in node.items():
            out += _paths(value, (*prefix, key))
    elif isinstance(node, list):
        for index, value in enumerate(node):
            out += _paths(value, (*prefix, index))
    return out


def _parent(data: object, path: tuple) -> object:
    node = data
    for key in path[:-1]:
        node = node[key]
    return node


ODD_VALUES = st.one_of(
    st.text(max_size=12),
    st.lists(st.one_of(st.integers(-5, 5), st.floats(allow_nan=True), st.text(max_size=3))),
    st.dictionaries(st.text(max_size=6), st.one_of(st.integers(), st.text(max_size=4)), max_size=3),
    st.builds(dict),  # a fresh container each time: st.just({}) would share one that the
    st.builds(list),  # "add" mutation fills, so later examples would start from a changed value
    st.none(),
    st.booleans(),
    st.sampled_from([1e308, -1e308, 10**400, -(10**30), -1.0, -1e-300, 0.0, 5e-324]),
    st.sampled_from([math.nan, math.inf, -math.inf]),
    st.integers(),
    st.floats(),
)
GARBAGE_TAGS = st.one_of(st.text(max_size=12), st.sampled_from(["Path", "formula ", "", "path"]))


@st.composite
def malformed(draw):
    """A demo (or the formula scenario) with one to three random mutations."""
    data = copy.deepcopy(draw(st.sampled_from(BASES)))
    for _ in range(draw(st.integers(1, 3))):
        paths = _paths(data)
        action = draw(st.sampled_from(["delete", "replace", "add", "tag", "formula"]))
        if action == "delete" and len(paths) > 1:
            path = draw(st.sampled_from(paths[1:]))
            parent = _parent(data, path)
            if isinstance(parent, dict):
                del parent[path[-1]]
            else:
                parent.pop(path[-1])
        elif action == "replace" and len(paths) > 1:
            path = draw(st.sampled_from(paths[1:]))
            _parent(data, path)[path[-1]] = draw(ODD_VALUES)
        elif action == "add":
            tables = [p for p in paths if isinstance(_parent(data, (*p, None)), dict)]
            path = draw(st.sampled_from(tables))
            _parent(data, (*path, None))[draw(st.text(min_size=1, max_size=10))] = draw(ODD_VALUES)
        elif action == "tag":
            tags = [p for p in paths if p and p[-1] == "kind"]
            if tags:
                path = draw(st.sampled_from(tags))
                _parent(data, path)[path[-1]] = draw(GARBAGE_TAGS)
        elif action == "formula":
            formulas = [p for p in paths if len(p) == 3 and p[:2] == ("model", "equations")]
            if formulas:
                path = draw(st.sampled_from(formulas))
                _parent(data, path)[path[-1]] = draw(
                    st.text(alphabet="abx()+-*/.^ 0123456789,eps", max_size=30)
                )
    return data


@settings(max_examples=300, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(malformed())
def test_malformed_scenarios_give_input_error_or_a_scenario(data):
    try:
        scenario = scenario_from_data(data, "fuzz.toml")
    except InputError as error:
        event("refused")
        assert error.problems
        for problem in error.problems:
            assert problem.source == "fuzz.toml"
            assert isinstance(problem.field, str) and problem.field.strip()
            assert isinstance(problem.reason, str) and problem.reason.strip()
    else:
        event("accepted")
        assert isinstance(scenario, Scenario)
        # an accepted scenario is usable: it compiles and round-trips
        assert scenario.system().n == len(scenario.spec.variables)
        assert parse_scenario(scenario_to_toml(scenario)) == scenario
