"""Units: the scenario's unit labels, the [lake] block and every conversion the reports show,
checked against hand arithmetic from the definitions of the units.

Unit definitions used by hand below: 1 L = 1 dm3 = 1e-3 m3, 1 ha = 1e4 m2, 1 t = 1e3 kg
(BIPM 2019, The International System of Units, 9th edition, table 8, non-SI units accepted for
use with the SI; table number from memory); micro = 1e-6, kilo = 1e3 (same brochure, SI
prefixes); the year pint uses is the Julian year of 365.25 days of 86,400 s (IAU, from
memory). Mean depth is volume / area (Wetzel 2001, Limnology, 3rd edition, chapter on lake
morphometry), so an areal store over the mean depth is the lake's mean concentration.
"""

from __future__ import annotations

import contextlib
import io
import json
import subprocess
import sys
import tomllib
from functools import cache
from pathlib import Path
from types import SimpleNamespace

import pytest
from hypothesis import given
from hypothesis import strategies as st

from planner.cli import main
from planner.errors import InputError
from planner.limnology import oecd_class, tsi_tp
from planner.units import (
    AREA,
    AREAL_LOAD,
    AREAL_STORE,
    CONCENTRATION,
    LOAD,
    UNIT_SYMBOLS,
    Dimension,
    UnitTextError,
    areal_load,
    areal_store,
    concentration,
    lake_conversion,
    parse_quantity,
    quantity,
    read_quantity,
    read_unit,
    registry,
    significant,
    total_load,
)

ROOT = Path(__file__).resolve().parent.parent
SCENARIOS = ROOT / "scenarios"
DEMOS = sorted(SCENARIOS.glob("*.toml"))
ALDER = SCENARIOS / "alder-mere.toml"
TARNBY = SCENARIOS / "tarnby-water.toml"
EXACT = 1e-12


def _data(path: Path) -> dict:
    return tomllib.loads(path.read_text(encoding="utf-8"))


def _pint_dimension(value) -> Dimension:
    found = value.dimensionality
    return Dimension(*(int(found.get(f"[{name}]", 0)) for name in Dimension._fields))


# --------------------------------------------------------------------------------------------
# reading unit labels


def test_every_symbol_has_the_dimension_pint_gives_it():
    """The fast reading (no pint) and pint agree on every symbol a scenario may use."""
    for symbol, dimension in UNIT_SYMBOLS.items():
        assert _pint_dimension(registry().Quantity(1.0, symbol)) == dimension, symbol


@pytest.mark.parametrize(
    "text, expected",
    [
        ("2.4 km2", 2.4e6),
        ("2.4 km**2", 2.4e6),
        ("2.4 km^2", 2.4e6),
        ("2.4 km²", 2.4e6),
        ("240 ha", 2.4e6),
        ("2400000 m2", 2.4e6),
        ("2.4e6 m**2", 2.4e6),
    ],
)
def test_area_spellings_give_the_same_area(text, expected):
    """1 km2 = (1e3 m)^2 = 1e6 m2; 1 ha = 1e4 m2 (BIPM 2019, table 8)."""
    read = read_quantity(text)
    assert read.unit.dimension == AREA
    assert parse_quantity(text).to("m**2").magnitude == pytest.approx(expected, rel=EXACT)


@pytest.mark.parametrize(
    "label, dimension, substance",
    [
        ("g P / m2 / yr", AREAL_LOAD, "P"),
        ("g P / m2", AREAL_STORE, "P"),
        ("t P / yr", LOAD, "P"),
        ("kg TP / ha / yr", AREAL_LOAD, "TP"),
        ("g m-2 yr-1", AREAL_LOAD, None),
        ("kg / ha yr", AREAL_LOAD, None),
        ("ug/L", CONCENTRATION, None),
        ("µg/L", CONCENTRATION, None),
        ("mg/m3", CONCENTRATION, None),
        ("mg P/m2/yr", AREAL_LOAD, "P"),
    ],
)
def test_labels_read_with_their_substance_as_a_label(label, dimension, substance):
    """ "P" after a mass names what is weighed; pint on its own would read it as the poise
    (a viscosity), so it must never reach pint."""
    read = read_unit(label)
    assert read.dimension == dimension
    assert read.substance == substance
    assert _pint_dimension(quantity(1.0, read)) == dimension


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_the_demos_labels_are_read(path):
    """Every unit label a demo writes is read: the control an areal P load, each state an
    areal P store (g P / m2), each with the substance P."""
    data = _data(path)
    control = read_unit(data["control"]["unit"])
    assert (control.dimension, control.substance) == (AREAL_LOAD, "P")
    for label in data["state_units"].values():
        state = read_unit(label)
        assert (state.dimension, state.substance) == (AREAL_STORE, "P")
    # 1 g/m2/yr in pint's base units: 1e-3 kg / m2 / (365.25 x 86400 s)
    per_second = quantity(1.0, control).to("kg / m**2 / s").magnitude
    assert per_second == pytest.approx(1e-3 / (365.25 * 86400), rel=EXACT)


@pytest.mark.parametrize(
    "label, words",
    [
        ("P", "substance tag"),
        ("furlong", "not a known unit"),
        ("g / / m", "nothing between"),
        ("m**9", "exponent 9"),
        ("", "no unit"),
        ("g (P) / m2", "cannot read"),
    ],
)
def test_labels_that_are_not_units_are_refused_with_a_reason(label, words):
    with pytest.raises(UnitTextError, match=words):
        read_unit(label)


# --------------------------------------------------------------------------------------------
# conversions by hand


def test_one_gram_per_square_metre_over_one_metre_is_1000_ug_per_litre():
    """1 g/m2 over 1 m = 1 g/m3 = 1e6 ug / 1e3 L = 1000 ug/L, and back."""
    store = quantity(1.0, "g P / m2")
    depth = parse_quantity("1 m")
    tp = concentration(store, depth)
    assert str(tp.units) == "microgram / liter"
    assert tp.magnitude == pytest.approx(1000.0, rel=EXACT)
    assert areal_store(tp, depth).to("g / m**2").magnitude == pytest.approx(1.0, rel=EXACT)


def test_the_worked_example_store_over_depth():
    """7.1 g/m2 over 3.1 m = 7.1 / 3.1 g/m3 = 2290.32 ug/L (by hand)."""
    tp = concentration(quantity(7.1, "g P / m2"), parse_quantity("3.1 m"))
    assert tp.magnitude == pytest.approx(7.1 / 3.1 * 1000.0, rel=EXACT)


@given(
    st.floats(min_value=1e-3, max_value=1e3),
    st.floats(min_value=0.1, max_value=500.0),
)
def test_store_and_concentration_round_trip(store_g_m2, depth_m):
    """C (ug/L) = 1000 x store (g/m2) / depth (m), and back (common practice, no source)."""
    depth = quantity(depth_m, "m")
    tp = concentration(quantity(store_g_m2, "g / m2"), depth)
    assert tp.magnitude == pytest.approx(1000.0 * store_g_m2 / depth_m, rel=1e-12)
    assert areal_store(tp, depth).magnitude == pytest.approx(store_g_m2, rel=1e-12)


def test_one_gram_per_square_metre_per_year_over_one_square_km_is_one_tonne():
    """1 g/m2/yr x 1e6 m2 = 1e6 g/yr = 1,000 kg/yr = 1 t/yr; back: 1 g/m2/yr = 1000 mg/m2/yr."""
    area = parse_quantity("1 km2")
    per_year = total_load(quantity(1.0, "g P / m2 / yr"), area)
    assert per_year.magnitude == pytest.approx(1000.0, rel=EXACT)
    assert total_load(quantity(1.0, "g / m2 / yr"), area, "t / yr").magnitude == pytest.approx(
        1.0, rel=EXACT
    )
    back = areal_load(per_year, area)
    assert back.magnitude == pytest.approx(1.0, rel=EXACT)
    milligrams = areal_load(quantity(1.0, "t / yr"), area, "mg / m**2 / yr")
    assert milligrams.magnitude == pytest.approx(1000.0, rel=EXACT)


def test_kilograms_per_hectare_per_year():
    """1 kg/ha/yr = 1000 g / 1e4 m2 / yr = 0.1 g/m2/yr (by hand)."""
    value = quantity(1.0, "kg / ha yr").to("g / m**2 / yr").magnitude
    assert value == pytest.approx(0.1, rel=EXACT)


def test_a_conversion_refuses_a_quantity_of_the_wrong_dimension():
    with pytest.raises(ValueError, match="mean depth"):
        concentration(quantity(1.0, "g / m2"), parse_quantity("1 km2"))
    with pytest.raises(ValueError, match="areal load"):
        total_load(quantity(1.0, "g / m2"), parse_quantity("1 km2"))


def _lake(**values) -> SimpleNamespace:
    return SimpleNamespace(
        **{"area": "2.4 km2", "mean_depth": "3.1 m", "residence_time": None, "outflow": None}
        | values
    )


def test_the_lake_conversion_says_each_conversion_in_words():
    """The issue's example: 7.1 g P/m2 over 3.1 m is 2,290 ug/L; 2.6 g P/m2/yr over 2.4 km2
    is 2.6 x 2.4e6 g/yr = 6,240 kg/yr (by hand)."""
    conversion = lake_conversion(_lake(), "P", "g P / m2", "g P / m2 / yr", 2.6)
    assert conversion.tp_words(7.1) == "TP 2,290 ug/L = 7.1 g P / m2 over a mean depth of 3.1 m"
    assert conversion.load_words(2.6) == (
        "2.6 g P / m2 / yr = 6,240 kg P/yr over an area of 2.4 km2"
    )
    assert conversion.volume_m3 == pytest.approx(2.4e6 * 3.1, rel=EXACT)


def test_large_loads_are_given_in_tonnes():
    """2.6 g/m2/yr over 100 km2 = 2.6e8 g/yr = 260 t/yr (by hand), above the 10 t/yr at which
    kilograms give way to tonnes (common practice, no source)."""
    conversion = lake_conversion(_lake(area="100 km2"), "P", "g P / m2", "g P / m2 / yr", 2.6)
    assert conversion.load_unit == "t P/yr"
    assert conversion.load(2.6) == pytest.approx(260.0, rel=EXACT)


def test_a_lake_wide_control_is_also_given_per_area():
    """1 t/yr over 2.5 km2 = 1e9 mg / 2.5e6 m2 = 400 mg/m2/yr (by hand)."""
    conversion = lake_conversion(_lake(area="2.5 km2"), "P", "g P / m2", "t P / yr", 1.0)
    assert conversion.load_unit == "mg P/m2/yr"
    assert conversion.load(1.0) == pytest.approx(400.0, rel=EXACT)


def test_a_lake_wide_mass_is_spread_over_the_volume():
    """1 t over 1 km2 x 1 m = 1e6 m3 = 1e9 L: 1e12 ug / 1e9 L = 1000 ug/L (by hand)."""
    conversion = lake_conversion(
        _lake(area="1 km2", mean_depth="1 m"), "P", "t P", "g P / m2 / yr", 1.0
    )
    assert conversion.tp(1.0) == pytest.approx(1000.0, rel=EXACT)


def test_a_concentration_state_is_taken_as_it_is():
    """0.05 mg/L = 50 ug/L whatever the depth."""
    conversion = lake_conversion(_lake(), "P", "mg/L", "g P / m2 / yr", 1.0)
    assert conversion.tp(0.05) == pytest.approx(50.0, rel=EXACT)


def test_a_state_that_is_not_lake_p_says_why():
    conversion = lake_conversion(_lake(), "x", "", "per year", 1.0)
    assert conversion.tp_per_state is None
    assert "state_units.x" in conversion.tp_unavailable
    assert conversion.load_per_control is None
    assert "not a known unit" in conversion.load_unavailable


def test_the_residence_time_from_the_outflow():
    """Brellow Reservoir: 3.6 km2 x 12 m = 4.32e7 m3; 0.205 m3/s x 365.25 x 86400 s = 6.469e6
    m3/yr; 4.32e7 / 6.469e6 = 6.678 years (by hand)."""
    lake = _data(SCENARIOS / "brellow-reservoir.toml")["lake"]
    assert (lake["area"], lake["mean_depth"], lake["outflow"]) == (
        "3.6 km**2",
        "12 m",
        "0.205 m3/s",
    )
    conversion = lake_conversion(_lake(**lake), "X", "g P / m2", "g P / m2 / yr", 0.2)
    by_hand = 3.6e6 * 12.0 / (0.205 * 365.25 * 86400)
    assert conversion.residence_time_yr == pytest.approx(by_hand, rel=EXACT)


@pytest.mark.parametrize(
    "value, text",
    [(2290.3, "2,290"), (7.1, "7.1"), (7.14159, "7.14"), (0.012345, "0.0123"), (0.0, "0")],
)
def test_numbers_for_a_reader(value, text):
    """Three significant figures, thousands separated (common practice, no source)."""
    assert significant(value) == text


# --------------------------------------------------------------------------------------------
# the [lake] block


def _problems(lake: object) -> list[tuple[str, str]]:
    data = _data(ALDER)
    data["lake"] = lake
    from planner.scenario import scenario_from_data

    with pytest.raises(InputError) as caught:
        scenario_from_data(data, "lake.toml", strict=True)
    assert all(problem.source == "lake.toml" for problem in caught.value.problems)
    return [(problem.field, problem.reason) for problem in caught.value.problems]


@pytest.mark.parametrize(
    "lake, field, words",
    [
        ({"area": "3.1 m", "mean_depth": "3.1 m"}, "lake.area", "a length, not an area"),
        ({"area": "2.4 km2", "mean_depth": "2.4 km2"}, "lake.mean_depth", "not a length"),
        ({"area": "-2 ha", "mean_depth": "3 m"}, "lake.area", "must be positive"),
        ({"area": "2 ha", "mean_depth": "0 m"}, "lake.mean_depth", "must be positive"),
        ({"area": 2.4, "mean_depth": "3 m"}, "lake.area", "text in quotes"),
        ({"area": "2 ha", "mean_depth": "3"}, "lake.mean_depth", "has no unit"),
        ({"area": "2 acres", "mean_depth": "3 m"}, "lake.area", "not a known unit"),
        ({"area": "1e999 ha", "mean_depth": "3 m"}, "lake.area", "too large"),
        ({"area": "2 ha", "mean_depth": "3 m", "residence_time": "2 m"}, "lake.residence_time",
         "not a time"),
        ({"area": "2 ha", "mean_depth": "3 m", "outflow": "2 m3"}, "lake.outflow", "not a flow"),
        ({"area": "2 ha", "mean_depth": "3 m", "residence_time": "1 yr", "outflow": "1 m3/s"},
         "lake.outflow", "either residence_time or outflow"),
        ({"area": "2 ha"}, "lake.mean_depth", "required"),
        ({"area": "2 ha", "mean_depth": "3 m", "depth": "3 m"}, "lake.depth", "unknown field"),
        ({"area": "x" * 5000, "mean_depth": "3 m"}, "lake.area", "at most 120 characters"),
    ],
)  # fmt: skip
def test_a_bad_lake_is_refused_at_its_field(lake, field, words):
    problems = _problems(lake)
    assert any(where == field and words in reason for where, reason in problems), problems
    assert all(len(reason) < 400 for _, reason in problems)


@pytest.mark.parametrize("area", ["2.4 km2", "2.4 km**2", "240 ha", "2400000 m2"])
def test_a_lake_accepts_the_usual_spellings(area):
    from planner.scenario import parse_scenario, scenario_to_toml

    text = ALDER.read_text(encoding="utf-8").replace('area = "2.4 km2"', f'area = "{area}"')
    scenario = parse_scenario(text, "spelled.toml")
    assert scenario.lake.area == area
    assert parse_scenario(scenario_to_toml(scenario)) == scenario


# --------------------------------------------------------------------------------------------
# reports


@cache
def _cli_json(*args: str) -> dict:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([*args, "--json", "--quiet"])
    assert code == 0, err.getvalue()
    return json.loads(out.getvalue())


def test_the_diagram_json_gives_lake_tp_and_its_trophic_state():
    """Alder Mere: P (g P/m2) over the demo's mean depth of 3.1 m, by hand, in ug/L; the OECD
    class and TSI(TP) from planner.limnology; loads x 2.4 km2 = x 2,400 kg/yr per g/m2/yr."""
    assert _data(ALDER)["lake"]["mean_depth"] == "3.1 m"
    assert _data(ALDER)["lake"]["area"] == "2.4 km2"
    data = _cli_json("diagram", str(ALDER))
    lake = data["lake"]
    assert lake["tp_conversion"]["per_unit"] == pytest.approx(1000.0 / 3.1, rel=EXACT)
    entries = [lake["current"]["tp"], lake["attractor"], lake["desired_at_current_load"]]
    entries += [lake["thresholds"][name]["tp"] for name in ("recovery", "collapse")]
    for entry in entries:
        tp = entry["state"] * 1000.0 / 3.1
        assert entry["tp_ug_l"] == pytest.approx(tp, rel=EXACT)
        assert entry["oecd_class"] == oecd_class(tp)
        assert entry["tsi_tp"] == pytest.approx(float(tsi_tp(tp)), rel=EXACT)
    assert lake["current"]["tp"]["state"] == 0.71
    assert lake["current"]["tp"]["oecd_class"] == "hypertrophic"
    recovery = lake["thresholds"]["recovery"]
    assert recovery["control"] == pytest.approx(data["window"]["recovery"], rel=EXACT)
    assert recovery["load"] == pytest.approx(recovery["control"] * 2400.0, rel=EXACT)
    assert recovery["load_unit"] == "kg P/yr"
    assert lake["current"]["load"] == pytest.approx(0.26 * 2400.0, rel=EXACT)


def test_the_comparison_json_gives_each_schedule_its_lake_tp():
    """Tarnby Water (mean depth 4.5 m, area 110 ha = 1.1e6 m2): each schedule's state at the
    horizon over 4.5 m in ug/L, its lowest load x 1,100 kg/yr per g/m2/yr (by hand)."""
    assert (_data(TARNBY)["lake"]["mean_depth"], _data(TARNBY)["lake"]["area"]) == (
        "4.5 m",
        "110 ha",
    )
    data = _cli_json("compare", str(TARNBY))
    assert data["lake"]["thresholds"]["recovery"] is None  # not reachable by load cuts
    for schedule in data["schedules"]:
        lake = schedule["lake"]
        state = schedule["state_at_horizon"]["P"]
        assert lake["at_horizon"]["tp_ug_l"] == pytest.approx(state * 1000.0 / 4.5, rel=EXACT)
        assert lake["at_horizon"]["oecd_class"] == oecd_class(state * 1000.0 / 4.5)
        assert lake["min_control"]["load"] == pytest.approx(
            schedule["min_control"] * 1100.0, rel=EXACT, abs=1e-9
        )


def test_the_texts_state_the_conversions():
    from planner.equilibria import diagram_for, locate
    from planner.report import diagram_text
    from planner.scenario import load_scenario

    scenario = load_scenario(ALDER)
    diagram = diagram_for(scenario)
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    text = diagram_text(scenario, diagram, standing)
    assert "TP 323 ug/L = 1 g P / m2 over a mean depth of 3.1 m" in text  # 1000 / 3.1
    assert "1 g P / m2 / yr = 2,400 kg P/yr over an area of 2.4 km2" in text
    assert "Now (P = 0.71 g P / m2): TP 229 ug/L: hypertrophic (OECD 1982)" in text  # 710 / 3.1
    assert "Load now: 0.26 g P / m2 / yr (624 kg P/yr)" in text


def test_without_a_lake_block_the_reports_are_as_before():
    from planner.equilibria import diagram_for, locate
    from planner.report import diagram_json, diagram_text
    from planner.scenario import scenario_from_data

    data = _data(ALDER)
    del data["lake"]
    scenario = scenario_from_data(data, "no-lake.toml")
    diagram = diagram_for(scenario)
    standing = locate(diagram, scenario.initial_state, scenario.current_control)
    assert "lake" not in diagram_json(scenario, diagram, standing)
    assert "ug/L" not in diagram_text(scenario, diagram, standing)


@pytest.mark.parametrize("path", DEMOS, ids=lambda p: p.stem)
def test_planner_check_does_not_load_pint(path):
    """pint takes most of a second to import; validating a scenario (its [lake] block
    included) must not need it."""
    code = (
        "import sys, planner.cli; "
        f"status = planner.cli.main(['check', {str(path)!r}]); "
        "print(status, sorted(name for name in sys.modules if name.split('.')[0] == 'pint'))"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True
    )
    assert result.stdout.strip().splitlines()[-1] == "0 []"
    assert "lake" in _data(path)
