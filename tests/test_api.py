"""The Python API re-exported from `planner`: loading, the runs, and each result's frame, figure
and notebook view. The comparison frame is checked against the `planner compare --json` object
(planner.report.comparison_json, the contract the CLI prints)."""

from __future__ import annotations

import math
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import plotly.graph_objects as go
import pytest

import planner
from planner.report import CAUTION, comparison_json

SCENARIOS = Path(__file__).resolve().parent.parent / "scenarios"
ALDER = SCENARIOS / "alder-mere.toml"
MONITORING = SCENARIOS / "data" / "alder-mere-monitoring.csv"


@pytest.fixture(scope="module")
def alder():
    return planner.load(ALDER)


@pytest.fixture(scope="module")
def comparison(alder):
    return planner.compare(alder)


def test_importing_planner_loads_no_heavy_library():
    """`import planner` stays light: the API is imported on first use."""
    heavy = ("scipy", "sympy", "plotly", "pandas", "dash")
    code = f"import planner, sys; print(sorted(m for m in {heavy!r} if m in sys.modules))"
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=True
    )
    assert result.stdout.strip() == "[]"


@pytest.mark.parametrize("name", planner.__all__)
def test_every_exported_name_resolves(name):
    value = getattr(planner, name)
    assert value is not None
    if name != "__version__":
        assert callable(value) and value.__doc__
        assert name in planner.__doc__


def test_modules_keep_their_names_beside_the_api():
    """The API's functions do not shadow the modules that hold the work."""
    import importlib

    for name in ("sweep", "frontier", "search", "ensemble", "signals"):
        module = importlib.import_module(f"planner.{name}")
        assert module is sys.modules[f"planner.{name}"] and getattr(planner, name) is module
    assert planner.hysteresis_sweep is planner.api.hysteresis_sweep


def test_unknown_name_is_an_attribute_error():
    with pytest.raises(AttributeError):
        planner.no_such_function  # noqa: B018


def test_load_from_path_text_and_dict_give_equal_scenarios(alder):
    text = ALDER.read_text(encoding="utf-8")
    assert planner.load(str(ALDER)) == alder
    assert planner.load(text) == alder
    assert planner.load(tomllib.loads(text)) == alder
    assert planner.load(alder) is alder


def test_load_reports_problems_with_their_field():
    from planner.errors import InputError

    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data["simulation"]["horizon"] = -5.0
    with pytest.raises(InputError) as raised:
        planner.load(data)
    assert any(p.field.startswith("simulation.horizon") for p in raised.value.problems)
    with pytest.raises(TypeError):
        planner.load(42)


def test_comparison_frame_has_real_dtypes_and_the_contract_values(alder, comparison):
    frame = comparison.to_frame()
    expected = comparison_json(comparison)["schedules"]
    assert len(frame) == len(alder.schedules) == len(expected)
    for flag in ("recovered", "feasible", "relapsed"):
        assert frame[flag].dtype == bool
    for number in ("meets_target_at", "overshoot_depth", "total_cost", "present_value"):
        assert frame[number].dtype == np.float64
    assert not frame.isin(["yes", "no", "-"]).any().any()
    pairs = {
        "schedule": lambda e: e["name"],
        "recovered": lambda e: e["recovered"],
        "feasible": lambda e: e["feasible"],
        "relapsed": lambda e: e["relapsed"],
        "meets_target_at": lambda e: e["meets_target_at"],
        "lowest_control": lambda e: e["min_control"],
        "overshoot_depth": lambda e: e["overshoot"]["depth"],
        "time_below_threshold": lambda e: e["overshoot"]["time_below_threshold"],
        "total_cost": lambda e: e["cost"]["total"],
        "present_value": lambda e: e["cost"]["present_value"],
    }
    for row, entry in zip(frame.to_dict("records"), expected, strict=True):
        for column, contract in pairs.items():
            value, wanted = row[column], contract(entry)
            if wanted is None:
                assert isinstance(value, float) and math.isnan(value), (column, value)
            else:
                assert value == wanted, (row["schedule"], column)
        infeasible = entry["infeasible"]
        assert row["why_infeasible"] == (None if infeasible is None else infeasible["message"])
    # the demo has both outcomes, so a column of constants would fail here
    assert frame["recovered"].any() and not frame["recovered"].all()
    assert not frame["feasible"].all()
    assert frame.attrs["units"]["meets_target_at"] == "yr"


def test_comparison_figures_and_notebook_view(comparison):
    for view in ("diagram", "time"):
        figure = comparison.figure(view)
        assert isinstance(figure, go.Figure) and len(figure.data) > 0
    with pytest.raises(ValueError):
        comparison.figure("map")
    page = comparison._repr_html_()
    assert page.count(CAUTION) == 1
    assert "<table" in page and comparison.outcomes[0].name in page


def test_compare_accepts_a_path_and_a_diagram(alder):
    found = planner.diagram(alder)
    chosen = alder.schedules[:1]
    result = planner.compare(ALDER, diagram=found, schedules=chosen)
    assert result.diagram is found.diagram
    assert list(result.to_frame()["schedule"]) == [chosen[0].name]


def test_diagram_and_sweep_frames(alder):
    found = planner.diagram(alder)
    assert found.recovery_threshold == found.diagram.recovery_threshold  # attributes pass through
    frame = found.to_frame()
    assert frame["stable"].dtype == bool and frame["stable"].any() and not frame["stable"].all()
    assert frame["run"].dtype == np.int64
    low, high = alder.control.range
    assert frame["control"].between(low, high).all()
    assert list(frame.columns[-len(alder.spec.variables) :]) == list(alder.spec.variables)
    assert len(found.figure().data) > 0 and CAUTION in found._repr_html_()

    swept = planner.hysteresis_sweep(alder, step=0.01)
    frame = swept.to_frame()
    assert set(frame["direction"]) == {"up", "down"}
    assert frame["control"].dtype == np.float64
    assert len(frame) == len(swept.sweep.controls_up) + len(swept.sweep.controls_down)
    assert len(swept.figure().data) > 0


def test_frontier_frame_follows_its_table(alder):
    from planner.frontier import frontier_rows

    result = planner.overshoot_frontier(alder, depths=[0.005, 0.03])
    frame = result.to_frame()
    _, rows = frontier_rows(result)
    assert len(frame) == 2 and frame["achievable"].dtype == bool
    assert frame["least_hold_years"].dtype == np.float64
    assert list(frame["least_hold_years"]) == [row[2] for row in rows]
    assert len(result.figure().data) > 0 and result._repr_html_().count(CAUTION) == 1


def test_ensemble_frame(alder):
    result = planner.chance_of_recovery(alder, members=24, seed=3)
    frame = result.to_frame()
    assert list(frame["schedule"]) == [s.name for s in result.schedules]
    assert frame["members"].dtype == np.int64 and (frame["members"] == 24).all()
    assert frame["feasible"].dtype == bool
    assert frame["p_recovered"].tolist() == [s.p_recovered for s in result.schedules]
    assert (frame["interval_low"] <= frame["p_recovered"]).all()
    assert len(result.figure().data) > 0 and CAUTION in result._repr_html_()


def test_search_frame(alder):
    result = planner.cheapest_schedule(alder)
    frame = result.to_frame()
    assert len(frame) == len(result.candidates)
    assert frame["cheapest"].sum() == 1 and frame["pareto"].sum() == len(result.pareto)
    assert frame["recovered"].dtype == bool and frame["present_value"].dtype == np.float64
    assert len(result.figure().data) > 0


def test_fit_and_signals_from_a_record(alder):
    fitted = planner.fit(MONITORING, alder, bootstrap=0)
    frame = fitted.to_frame()
    fitted_names = frame.loc[frame["quantity"] == "parameter", "name"]
    assert list(fitted_names) == list(fitted.fitted)
    assert frame["value"].dtype == np.float64
    assert frame.loc[frame["name"] == "s", "value"].item() == fitted.parameter("s").value
    assert len(fitted.figure().data) > 0 and CAUTION in fitted._repr_html_()

    text = MONITORING.read_text(encoding="utf-8")
    indicators = planner.early_warnings(text, "TP")
    frame = indicators.to_frame()
    assert len(frame) == len(indicators.times) and frame["filled"].dtype == bool
    variance = indicators.indicator("variance")
    shown = frame.set_index("time")["variance"].dropna()
    assert shown.index.tolist() == variance.times.tolist()
    assert shown.tolist() == pytest.approx(variance.values.tolist())
    assert len(indicators.figure().data) > 0
