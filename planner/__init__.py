"""Planner for reversing a lake regime shift: equilibria, schedules, costs and briefings.

The Python API (the same functions the ``planner`` command runs; see :mod:`planner.api`):

- ``load(source)``: a scenario from a path, TOML text (a string with a line break) or a dict
- ``load_record(source)``: a monitoring record from a path or CSV text
- ``diagram(scenario)``: equilibria, folds, thresholds and where the lake stands
- ``compare(scenario)``: every schedule run, judged and costed
- ``hysteresis_sweep(scenario, step=None)``: the control dialled slowly up and down
- ``overshoot_frontier(scenario, depths=None, ...)``: the least hold below the recovery
  threshold for each depth
- ``cheapest_schedule(scenario, by_year=None, ...)``: the cheapest recovering schedule and the
  cost / time Pareto front
- ``chance_of_recovery(scenario, members=None, seed=None, ...)``: the chance of recovery under
  uncertainty
- ``fit(record, scenario, bootstrap=None, ...)``: the model fitted to a monitoring record
- ``early_warnings(record, column=None, ...)``: early-warning indicators of one series
- ``demo_names()``: the bundled demo scenarios (invented lakes) by name
- ``demo_path(name)``: the file of a bundled demo, e.g. ``load(demo_path("alder-mere"))``
  (see :mod:`planner.demos`; ``planner demos --copy-to DIR`` copies them for editing)

A scenario argument is a Scenario or anything ``load`` accepts. Each result has ``to_frame()``
(a pandas DataFrame with real dtypes), ``figure()`` (plotly) and a notebook view.

``import planner`` stays light: the API module imports the numerical and plotting stack only
when one of its functions runs.

The sweep, frontier, search, ensemble and signals functions carry names of their own
(``hysteresis_sweep``, ``overshoot_frontier``, ``cheapest_schedule``, ``chance_of_recovery``,
``early_warnings``): ``planner.sweep`` and the like are the modules that hold the work.
"""

from planner import api as _api
from planner.api import *  # noqa: F403 - the API, named once in planner.api
from planner.demos import demo_names, demo_path

__version__ = "0.1.0"

__all__ = ["__version__", "demo_names", "demo_path", *_api.FUNCTIONS]
