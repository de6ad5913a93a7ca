"""The "Two scenarios" view called directly (no browser): the open scenario and a second file
chosen from the listed folders, side by side.

Reference: the planner itself, recomputed here without the app's caches
(``planner.equilibria.diagram_for`` on each file): the thresholds the tab shows must be the
planner's, in the planner's words (``planner.report.threshold_words``). The two demo lakes are
classified differently by construction of their invented numbers (Scheffer 1998, "Ecology of
Shallow Lakes", ch. 2: hysteresis when recycling folds the equilibrium curve; no way back by
load alone when the turbid branch persists at zero load), so the verdict words must differ.
"""

from __future__ import annotations

import shutil

import pytest
from dash import html

from planner.equilibria import diagram_for
from planner.report import lake_verdict_words, threshold_words
from planner.scenario import load_scenario
from webapp import compute, files, ids
from webapp.files import default_scenario_dir
from webapp.settings import Settings
from webapp.views import two_scenarios
from webapp.views.captions import caption

DEMOS = default_scenario_dir()
OPEN, SECOND = "alder-mere.toml", "tarnby-water.toml"
BROKEN = "broken-horizon.toml"


def text_of(component) -> str:
    """All the text a Dash component tree shows."""
    if component is None:
        return ""
    if isinstance(component, (str, int, float)):
        return str(component)
    if isinstance(component, (list, tuple)):
        return " ".join(text_of(c) for c in component)
    return text_of(getattr(component, "children", None))


@pytest.fixture(scope="module")
def settings(tmp_path_factory):
    folder = tmp_path_factory.mktemp("scenarios")
    for name in (OPEN, SECOND):
        shutil.copy(DEMOS / name, folder / name)
    text = (DEMOS / SECOND).read_text(encoding="utf-8")
    assert "horizon = 40.0" in text
    (folder / BROKEN).write_text(text.replace("horizon = 40.0", 'horizon = "forty"'))
    return Settings((files.Folder("Scenarios", folder),), 0, tmp_path_factory.mktemp("cache"))


def choice_of(settings: Settings, name: str) -> str:
    """The picker value of a listed file, from the picker's own listing."""
    options = files.picker_options(list(settings.folders))
    return next(o["value"] for o in options if o["value"].endswith("/" + name))


def working_of(name: str) -> dict:
    return {"data": compute.dump(load_scenario(DEMOS / name)), "complete": True}


@pytest.fixture(scope="module")
def shown(settings):
    """The tab's outputs with alder-mere open and tarnby-water chosen."""
    compute.clear()
    result = two_scenarios.draw(
        working_of(OPEN), None, choice_of(settings, SECOND), ids.TAB_TWO, settings=settings
    )
    keys = ("open_title", "open_figure", "open_words", "open_table")
    keys += ("other_title", "other_figure", "other_words", "other_table", "message")
    return dict(zip(keys, result, strict=True))


@pytest.mark.parametrize(("name", "side"), [(OPEN, "open"), (SECOND, "other")])
def test_thresholds_shown_are_the_planners(shown, name, side):
    """Each column's words carry both thresholds as the planner computes them on that file
    (reference: planner.equilibria.diagram_for, uncached), and its figure is captioned."""
    scenario = load_scenario(DEMOS / name)
    reference = diagram_for(scenario)
    words = text_of(shown[f"{side}_words"])
    unit = scenario.control.unit
    for threshold in (reference.recovery, reference.collapse):
        assert threshold_words(threshold, unit) in words
    assert scenario.name in shown[f"{side}_title"]
    assert caption(shown[f"{side}_figure"])  # the figure's text alternative
    assert shown["message"] == ""


def test_verdicts_differ_hysteretic_and_irreversible(shown):
    """Alder Mere is hysteretic, Tarnby Water irreversible (see the module docstring)."""
    verdicts = {}
    for name, side in ((OPEN, "open"), (SECOND, "other")):
        scenario = load_scenario(DEMOS / name)
        words = lake_verdict_words(scenario, diagram_for(scenario))
        assert words in text_of(shown[f"{side}_words"])
        verdicts[side] = words
    assert verdicts["open"].startswith("hysteretic")
    assert verdicts["other"].startswith("irreversible")


def test_tables_list_each_scenarios_schedules(shown):
    for name, side in ((OPEN, "open"), (SECOND, "other")):
        table = text_of(shown[f"{side}_table"])
        for schedule in load_scenario(DEMOS / name).schedules:
            assert schedule.name in table
        assert "Present value" in table


def test_a_malformed_second_file_names_its_field_and_keeps_the_open_one(settings):
    result = two_scenarios.draw(
        working_of(OPEN), None, choice_of(settings, BROKEN), ids.TAB_TWO, settings=settings
    )
    message = text_of(result[-1])
    assert BROKEN in message and "horizon" in message
    assert "open scenario is unchanged" in message
    assert result[0] == load_scenario(DEMOS / OPEN).name  # the open side is still drawn


def test_a_path_not_in_the_listing_is_refused(settings):
    """Only listed files: a value naming a path outside the folders loads nothing."""
    result = two_scenarios.draw(
        working_of(OPEN), None, "0/../../etc/passwd", ids.TAB_TWO, settings=settings
    )
    assert "no such scenario in the listed folders" in text_of(result[-1])
    assert isinstance(result[-1], html.Div)
