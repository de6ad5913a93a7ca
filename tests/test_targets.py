"""Targets given as lake TP: a concentration or an OECD trophic class, converted to the model's
state through the lake's morphometry, with errors that name the field and the conversion said
once in the reports."""

from __future__ import annotations

import copy
import tomllib
from pathlib import Path

import pint
import pytest

from planner.equilibria import diagram_for, locate
from planner.errors import InputError
from planner.report import lake_lines
from planner.scenario import scenario_from_data
from planner.scenario.blocks import (
    Target,
    resolved_target,
    target_conversion,
    target_problems,
)

DEMO = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
UREG = pint.UnitRegistry()


def _demo() -> dict:
    return tomllib.loads(DEMO.read_text(encoding="utf-8"))


def _scenario():
    return scenario_from_data(_demo())


def _target(**fields) -> Target:
    return Target(variable="P", **fields)


def test_a_concentration_becomes_an_areal_store_by_the_mean_depth():
    """Worked by hand: concentration = areal store / mean depth, so a store is the
    concentration times the mean depth (mass balance of a well-mixed water column; Vollenweider
    1976, Mem. Ist. Ital. Idrobiol. 33:53-83, from memory). 30 ug/L = 30 mg/m3; over the demo's
    3.1 m that is 93 mg/m2 = 0.093 g P / m2, and pint (its own registry here) agrees; 0.03 mg/L
    is the same target."""
    lake = _scenario().lake
    by_hand = 30.0 * 3.1 / 1000.0  # mg/m3 x m = mg/m2, / 1000 = g/m2
    by_pint = (UREG.Quantity(30.0, "ug/L") * UREG.Quantity(3.1, "m")).to("g/m**2").magnitude
    assert by_hand == pytest.approx(by_pint, rel=1e-12)
    for text in ("30 ug/L", "0.03 mg/L", "30 µg/L"):
        threshold, conversion = target_conversion(_target(tp=text), lake, "g P / m2")
        assert threshold == pytest.approx(by_hand, rel=1e-12), text
        assert conversion.tp(threshold) == pytest.approx(30.0, rel=1e-12)


def test_a_lake_wide_mass_becomes_a_store_by_the_volume():
    """Worked by hand: a lake-wide mass is the concentration times the volume (area x mean
    depth): 2.4 km2 x 3.1 m = 7.44e6 m3; 30 mg/m3 x 7.44e6 m3 = 223.2 kg = 0.2232 t."""
    lake = _scenario().lake
    threshold, _ = target_conversion(_target(tp="30 ug/L"), lake, "t P")
    assert threshold == pytest.approx(0.2232, rel=1e-12)


@pytest.mark.parametrize(
    "trophic_class, regime, tp_ug_l",
    [
        ("oligotrophic", "lowest", 10.0),
        ("mesotrophic", "lowest", 35.0),
        ("eutrophic", "lowest", 100.0),
        ("mesotrophic", "highest", 10.0),
        ("eutrophic", "highest", 35.0),
        ("hypertrophic", "highest", 100.0),
    ],
)
def test_a_trophic_class_is_its_oecd_boundary(trophic_class, regime, tp_ug_l):
    """OECD (1982) classes by annual mean TP: oligotrophic up to 10 ug/L, mesotrophic 10-35,
    eutrophic 35-100, hypertrophic from 100 (Vollenweider & Kerekes 1982, OECD, Paris). A class
    as the target of the lowest regime is "that class or better": at most its upper boundary;
    of the highest regime, at least its lower one. Converted over 3.1 m as above."""
    target = _target(trophic_class=trophic_class, regime=regime)
    assert target.tp_ug_l() == tp_ug_l
    threshold, _ = target_conversion(target, _scenario().lake, "g P / m2")
    assert threshold == pytest.approx(tp_ug_l * 3.1 / 1000.0, rel=1e-12)
    resolved = resolved_target(target, _scenario().lake, "g P / m2")
    assert resolved.threshold == threshold
    assert resolved.meets(threshold) and not resolved.meets(
        threshold * (1.01 if regime == "lowest" else 0.99)
    )


def test_conversion_errors_name_the_field():
    """No [lake] block, or a state that is no P amount: the problem is at target.tp (or
    target.trophic_class) and says what to add."""
    lake = _scenario().lake
    ((field, reason),) = target_problems(_target(tp="30 ug/L"), None, "g P / m2")
    assert field == ("target", "tp") and "[lake]" in reason
    ((field, reason),) = target_problems(_target(trophic_class="eutrophic"), lake, "")
    assert field == ("target", "trophic_class") and "state_units.P" in reason
    ((field, reason),) = target_problems(_target(tp="30 ug/L"), lake, "m")
    assert "not a P amount" in reason
    assert target_problems(_target(threshold=3.0), None, "") == []


@pytest.mark.parametrize(
    "fields, field, words",
    [
        ({"tp": "30 m"}, "tp", "a length, not a concentration"),
        ({"tp": 30}, "tp", "as text in quotes"),
        ({"tp": "-1 ug/L"}, "tp", "positive"),
        ({"tp": "30 ug/L", "threshold": 3.0}, "tp", "give one of"),
        ({"trophic_class": "clear"}, "trophic_class", "not an OECD (1982) trophic class"),
        ({"trophic_class": "hypertrophic"}, "trophic_class", "no upper boundary"),
    ],
)
def test_bad_targets_name_the_field(fields, field, words):
    """Each mistake in the [target] block is reported at target.<field> with a reason in words
    (DESIGN.md section 5: the message names file, field and reason)."""
    data = _demo()
    data["target"] = {"variable": "P", **fields}
    with pytest.raises(InputError) as caught:
        scenario_from_data(data, "lake.toml")
    problems = [(p.field, p.reason) for p in caught.value.problems]
    assert any(f == f"target.{field}" and words in r for f, r in problems), problems


def test_a_target_given_as_tp_is_saved_as_given():
    """The converted threshold is derived: the target writes only what was given, so a saved
    file reads back to the same target."""
    resolved = resolved_target(_target(tp="30 ug/L"), _scenario().lake, "g P / m2")
    assert resolved.model_dump(mode="json", exclude_none=True) == {
        "variable": "P",
        "regime": "lowest",
        "tp": "30 ug/L",
    }


def test_the_report_states_the_conversion_once():
    """The lake section of the diagram text says once how the target became model units:
    mesotrophic or better is TP up to 35 ug/L (OECD 1982), 35 x 3.1 / 1000 = 0.1085 g P / m2,
    shown to three significant figures (0.1085 is stored just below it in binary: 0.108)."""
    scenario = _scenario()
    target = resolved_target(_target(trophic_class="mesotrophic"), scenario.lake, "g P / m2")
    scenario = scenario.model_copy(update={"target": target})
    diagram = diagram_for(scenario)
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    text = "\n".join(lake_lines(scenario, diagram, standing))
    said = "set as mesotrophic or better (OECD 1982), TP 35 ug/L = 0.108 g P / m2 over a mean"
    assert text.count(said) == 1, text
    assert text.count("set as") == 1


def test_a_scenario_file_with_a_tp_target_gets_its_threshold():
    """End to end: a scenario file whose [target] says trophic_class = "mesotrophic" holds the
    threshold 35 x 3.1 / 1000 g P / m2 after loading; without [lake] it is refused at
    target.trophic_class."""
    data = _demo()
    data["target"] = {"variable": "P", "trophic_class": "mesotrophic"}
    assert scenario_from_data(copy.deepcopy(data)).target.threshold == pytest.approx(0.1085)
    data.pop("lake")
    with pytest.raises(InputError) as caught:
        scenario_from_data(data)
    assert caught.value.problems[0].field == "target.trophic_class"
