"""The planner from Python (a script or a notebook): load a scenario, run it, read the results.

Each function takes a scenario as a :class:`~planner.scenario.Scenario` or anything
:func:`load` accepts, calls the same planner function as the ``planner`` command with the same
keyword options (a keyword left out, or given as None, keeps that function's default), and
returns a result with these views:

- ``to_frame()``: a pandas DataFrame with real dtypes (flags as bool, numbers as float, missing
  numbers as NaN, missing text as None); column names in snake_case, units in
  ``frame.attrs["units"]``; :func:`frame_parquet` writes it as Parquet (pyarrow);
- ``figure()``: the plotly figure the CLI briefings and the web app draw;
- ``image(format)``: that figure as PNG, SVG or PDF bytes (:func:`figure_image`: kaleido on
  Debian's Chromium, the ``export`` extra);
- ``_repr_html_()``: the frame and the caution, as a notebook shows a result.

The frames are the report tables (:mod:`planner.report`, :mod:`planner.frontier`) with their
cells converted, or the fields that the JSON views print; figures come from
:mod:`planner.figures`. Nothing here computes a number of its own.

``progress``: False (default) shows nothing; True shows a bar (a widget in a notebook, lines
through logging elsewhere); a callable ``(fraction, message)`` receives the progress itself.

pandas, plotly and the numerical stack are imported when a function runs, never on import.
"""

from __future__ import annotations

import html
import os
import re
from collections.abc import Callable, Iterator, Mapping, Sequence
from contextlib import contextmanager
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from planner.views import ResultViews

if TYPE_CHECKING:
    import pandas as pd
    import plotly.graph_objects as go

    from planner.calibration import Fit
    from planner.ensemble import Ensemble
    from planner.equilibria import Diagram, Standing
    from planner.frontier import Frontier
    from planner.monitoring import Record
    from planner.outcomes import Comparison
    from planner.scenario import Scenario
    from planner.search import SearchResult
    from planner.signals import Signals
    from planner.sweep import Sweep

    ScenarioSource = Scenario | str | os.PathLike[str] | Mapping[str, Any]
    """A scenario, a path to a TOML file, TOML text (a string with a line break) or its data."""
    RecordSource = Record | str | os.PathLike[str]
    """A monitoring record, a path to its CSV file or CSV text (a string with a line break)."""
    ProgressOption = bool | Callable[[float, str], None]

FUNCTIONS = (
    "load",
    "load_record",
    "diagram",
    "compare",
    "hysteresis_sweep",
    "overshoot_frontier",
    "cheapest_schedule",
    "chance_of_recovery",
    "fit",
    "early_warnings",
)
"""The entry points, re-exported by ``planner``."""

__all__ = ["ScenarioDiagram", "ScenarioSearch", "ScenarioSweep", *FUNCTIONS]


# ---------------------------------------------------------------------------------------------
# Inputs


def _is_text(source: object) -> bool:
    """A string holding a file's contents rather than naming one: it has a line break."""
    return isinstance(source, str) and ("\n" in source or "\r" in source)


def _loaded(source: ScenarioSource) -> tuple[Scenario, str]:
    """The scenario and the name its problems are reported under."""
    from planner.scenario import Scenario, load_scenario, parse_scenario, scenario_from_data

    if isinstance(source, Scenario):
        return source, "<scenario>"
    if isinstance(source, Mapping):
        # strict, as for files: a Python number is a number, text is text
        return scenario_from_data(dict(source), "<dict>", strict=True), "<dict>"
    if _is_text(source):
        return parse_scenario(source, "<text>"), "<text>"
    if isinstance(source, str | os.PathLike):
        return load_scenario(source), str(source)
    raise TypeError(
        f"a scenario is a Scenario, a path, TOML text or a dict, not {type(source).__name__}"
    )


def load(source: ScenarioSource) -> Scenario:
    """A validated scenario from a path to a TOML file, TOML text (a string with a line break),
    the data of such a file (a dict), or a Scenario (returned as it is). Problems raise
    :class:`planner.errors.InputError`, each naming the source, the field and the reason."""
    return _loaded(source)[0]


def load_record(source: RecordSource, *, time_column: str | None = None) -> Record:
    """A monitoring record from a path to its CSV file, CSV text (a string with a line break)
    or a Record (returned as it is); ``time_column`` defaults to the first column."""
    from planner.monitoring import Record, parse_record, read_record

    if isinstance(source, Record):
        return source
    if _is_text(source):
        return parse_record(source, "<text>", time_column=time_column)
    if isinstance(source, str | os.PathLike):
        return read_record(source, time_column=time_column)
    raise TypeError(f"a record is a Record, a path or CSV text, not {type(source).__name__}")


def _given(**options: Any) -> dict[str, Any]:
    """The options a caller set: None keeps the planner function's own default."""
    return {name: value for name, value in options.items() if value is not None}


@contextmanager
def _progress(option: ProgressOption, label: str) -> Iterator[Callable[[float, str], None]]:
    from planner.progress import ProgressReport, silent

    if option is True:
        with ProgressReport(label) as report:
            yield report
    elif callable(option):
        yield option
    else:
        yield silent


def _diagram_of(diagram: Diagram | ScenarioDiagram | None) -> Diagram | None:
    return diagram.diagram if isinstance(diagram, ScenarioDiagram) else diagram


# ---------------------------------------------------------------------------------------------
# Runs


def diagram(scenario: ScenarioSource, *, progress: ProgressOption = False) -> ScenarioDiagram:
    """Equilibria, folds, thresholds and where the lake stands (``planner diagram``)."""
    from planner.equilibria import diagram_for, locate

    chosen, _ = _loaded(scenario)
    with _progress(progress, "diagram") as report:
        found = diagram_for(chosen, progress=report)
    standing = locate(found, chosen.initial_state, chosen.current_control)
    return ScenarioDiagram(chosen, found, standing)


def compare(
    scenario: ScenarioSource,
    *,
    diagram: Diagram | ScenarioDiagram | None = None,
    schedules: Sequence[Any] | None = None,
    dense: bool | None = None,
    progress: ProgressOption = False,
) -> Comparison:
    """Every schedule (or those given) run, judged and costed (``planner compare``); see
    :func:`planner.outcomes.compare`."""
    from planner.outcomes import compare as compare_schedules

    chosen, _ = _loaded(scenario)
    options = _given(diagram=_diagram_of(diagram), schedules=schedules, dense=dense)
    with _progress(progress, "compare") as report:
        return compare_schedules(chosen, progress=report, **options)


def hysteresis_sweep(
    scenario: ScenarioSource,
    *,
    step: float | None = None,
    step_name: str = "step",
    progress: ProgressOption = False,
) -> ScenarioSweep:
    """The control dialled slowly up and down, and the jumps (``planner sweep``); ``step`` in
    the control's unit (see :func:`planner.sweep.sweep_for`). A step out of range raises
    InputError under ``step_name`` (the command passes its option, ``--step``)."""
    from planner.sweep import sweep_for

    chosen, _ = _loaded(scenario)
    with _progress(progress, "sweep") as report:
        swept = sweep_for(chosen, step=step, progress=report, source=step_name)
    return ScenarioSweep(chosen, swept)


def overshoot_frontier(
    scenario: ScenarioSource,
    *,
    diagram: Diagram | ScenarioDiagram | None = None,
    relax_to: float | None = None,
    depths: Sequence[float] | None = None,
    hold_years: Sequence[float] | None = None,
    family: str | None = None,
    start_year: float | None = None,
    ramp_years: float | None = None,
    own_schedules: bool | None = None,
    source: str | None = None,
    progress: ProgressOption = False,
) -> Frontier:
    """The least hold below the recovery threshold for each depth (``planner frontier``); see
    :func:`planner.frontier.recovery_frontier` for the units and defaults. Problems name
    ``source`` (default: the scenario's path, or ``<text>``, ``<dict>``, ``<scenario>``)."""
    from planner.frontier import recovery_frontier

    chosen, loaded_from = _loaded(scenario)
    source = loaded_from if source is None else source
    options = _given(
        diagram=_diagram_of(diagram),
        relax_to=relax_to,
        depths=depths,
        hold_years=hold_years,
        family=family,
        start_year=start_year,
        ramp_years=ramp_years,
        own_schedules=own_schedules,
    )
    with _progress(progress, "frontier") as report:
        return recovery_frontier(chosen, source=source, progress=report, **options)


def cheapest_schedule(
    scenario: ScenarioSource,
    *,
    diagram: Diagram | ScenarioDiagram | None = None,
    relax_to: float | None = None,
    by_year: float | None = None,
    families: Sequence[str] | None = None,
    progress: ProgressOption = False,
) -> ScenarioSearch:
    """The cheapest recovering schedule and the cost / time Pareto front (``planner search``);
    see :func:`planner.search.search`."""
    from planner.search import search as search_schedules

    chosen, source = _loaded(scenario)
    options = _given(
        diagram=_diagram_of(diagram), relax_to=relax_to, by_year=by_year, families=families
    )
    with _progress(progress, "search") as report:
        return ScenarioSearch(
            chosen, search_schedules(chosen, source=source, progress=report, **options)
        )


def chance_of_recovery(
    scenario: ScenarioSource,
    *,
    members: int | None = None,
    seed: int | None = None,
    schedules: Sequence[Any] | None = None,
    chunk_size: int | None = None,
    scheduler: str | None = None,
    keep_trajectories: bool | None = None,
    diagram: Diagram | ScenarioDiagram | None = None,
    progress: ProgressOption = False,
) -> Ensemble:
    """The chance of recovery under the scenario's ``[uncertainty]`` (``planner ensemble``); see
    :func:`planner.ensemble.run_ensemble`."""
    from planner.ensemble import run_ensemble

    chosen, source = _loaded(scenario)
    options = _given(
        members=members,
        seed=seed,
        schedules=schedules,
        chunk_size=chunk_size,
        scheduler=scheduler,
        keep_trajectories=keep_trajectories,
        diagram=_diagram_of(diagram),
    )
    with _progress(progress, "ensemble") as report:
        return run_ensemble(chosen, source=source, progress=report, **options)


def fit(
    record: RecordSource,
    scenario: ScenarioSource,
    *,
    time_column: str | None = None,
    control_column: str | None = None,
    states: Mapping[str, str] | None = None,
    fit: Sequence[str] | None = None,
    log: bool | None = None,
    bootstrap: int | None = None,
    seed: int | None = None,
    progress: ProgressOption = False,
) -> Fit:
    """The scenario's model fitted to a monitoring record, with threshold intervals (``planner
    fit``): ``fit`` names the parameters to fit, ``states`` maps variables to columns,
    ``bootstrap`` replicates (0: none); see :func:`planner.calibration.fit_record`."""
    from planner.calibration import fit_record, observations_for

    chosen, _ = _loaded(scenario)
    observations = observations_for(
        load_record(record, time_column=time_column),
        chosen,
        control_column=control_column,
        states=states,
    )
    options = _given(fit=fit, log=log, bootstrap=bootstrap, seed=seed)
    with _progress(progress, "fit") as report:
        return fit_record(chosen, observations, progress=report, **options)


def early_warnings(
    record: RecordSource,
    column: str | None = None,
    *,
    time_column: str | None = None,
    window: float | None = None,
    bandwidth: float | None = None,
    before: float | None = None,
) -> Signals:
    """Early-warning indicators of one monitored series (``planner signals``): ``window`` is
    the share of the series in each rolling window, ``bandwidth`` that of the detrending kernel
    in the record's time unit; see :func:`planner.signals.record_signals`."""
    from planner.signals import record_signals

    options = _given(window=window, bandwidth=bandwidth, before=before)
    return record_signals(load_record(record, time_column=time_column), column, **options)


# ---------------------------------------------------------------------------------------------
# Results that need their scenario to be drawn


class _Views(ResultViews):
    """A result kept with its scenario (which its figure needs): the notebook view of every
    result (:class:`planner.views.ResultViews`), ``to_frame`` and ``figure`` defined by each
    wrapper; other attributes are the wrapped result's (``result.recovery_threshold``)."""

    _wrapped: str

    def __getattr__(self, name: str) -> Any:
        if name.startswith("_"):  # copies and pickles probe for these before any field is set
            raise AttributeError(name)
        return getattr(getattr(self, self._wrapped), name)

    def _view_title(self) -> str:
        return self.scenario.name


@dataclass(frozen=True, eq=False)
class ScenarioDiagram(_Views):
    """A :class:`planner.equilibria.Diagram` with its scenario and where the lake stands."""

    _wrapped = "diagram"
    scenario: Scenario
    diagram: Diagram
    standing: Standing

    def to_frame(self) -> pd.DataFrame:
        """The equilibrium curve in the control range: one row per point, ``run`` numbering
        the pieces of equal stability, ``stable`` a flag, the control and each variable."""
        from planner.report import diagram_json

        runs = diagram_json(self.scenario, self.diagram)["branches"]
        groups = [(run["stable"], run["points"]) for run in runs]
        return _points_frame(groups, "stable", self.scenario, numbered="run")

    def figure(self) -> go.Figure:
        """The hysteresis diagram with the lake's current state."""
        from planner.figures import hysteresis_figure

        return hysteresis_figure(self.scenario, self.diagram, standing=self.standing)


@dataclass(frozen=True, eq=False)
class ScenarioSweep(_Views):
    """A :class:`planner.sweep.Sweep` with its scenario."""

    _wrapped = "sweep"
    scenario: Scenario
    sweep: Sweep

    def to_frame(self) -> pd.DataFrame:
        """One row per step: ``direction`` ("up" or "down"), the control and each variable."""
        from planner.report import sweep_json

        data = sweep_json(self.scenario, self.sweep)
        legs = [(way, data[way]) for way in ("up", "down")]
        return _points_frame(legs, "direction", self.scenario)

    def figure(self) -> go.Figure:
        """The loop over the equilibrium curve."""
        from planner.equilibria import diagram_for
        from planner.figures import sweep_figure

        return sweep_figure(self.scenario, self.sweep, diagram_for(self.scenario))


@dataclass(frozen=True, eq=False)
class ScenarioSearch(_Views):
    """A :class:`planner.search.SearchResult` with its scenario."""

    _wrapped = "result"
    scenario: Scenario
    result: SearchResult

    def to_frame(self) -> pd.DataFrame:
        """Every schedule the search evaluated, with flags ``pareto`` (on the cost / time front)
        and ``cheapest`` (the cheapest admissible overall)."""
        from planner.search import candidate_json

        result = self.result
        rows = []
        for candidate in result.candidates:
            row = candidate_json(candidate)
            del row["schedule"]
            row["pareto"] = any(candidate is c for c in result.pareto)
            row["cheapest"] = candidate is result.cheapest
            rows.append(row)
        frame = records_frame(rows)
        unit = result.unit
        frame.attrs["units"] = {
            "floor": unit,
            "depth": unit,
            "hold": "yr",
            "meets_target_at": "yr",
            "present_value": result.currency,
            "total_cost": result.currency,
        }
        return frame

    def figure(self) -> go.Figure:
        """Present value against years to meet the target, the Pareto front drawn."""
        from planner.figures import pareto_figure

        return pareto_figure(self.scenario, self.result)


# ---------------------------------------------------------------------------------------------
# Frames, figures and notebook views of the planner's results (their methods call these)

_UNIT_IN_HEADER = re.compile(r"^(?P<name>.*?)\s*\((?P<unit>[^()]*)\)\s*$")


def column_name(header: str) -> tuple[str, str]:
    """A table header as a column name and its unit: ``"Meets target at (yr)"`` ->
    ``("meets_target_at", "yr")``."""
    match = _UNIT_IN_HEADER.match(header)
    name, unit = (match["name"], match["unit"]) if match else (header, "")
    return re.sub(r"[^0-9a-z]+", "_", name.lower()).strip("_"), unit


def _flag(value: object) -> bool:
    import numpy as np

    return isinstance(value, bool | np.bool_)


def _count(value: object) -> bool:
    """A whole number counted, never a measured one (those are floats, whole or not)."""
    import numbers

    return isinstance(value, numbers.Integral) and not _flag(value)


def _column(values: Sequence[object]) -> tuple[list[object], str]:
    """Cells of one column and their dtype: flags ("yes" / "no" too) bool, counts int64, other
    numbers float64 (missing: NaN), anything else object (missing or empty text: None)."""
    import numbers

    present = [v for v in values if v is not None]
    complete = len(present) == len(values)
    if present and complete and all(_flag(v) for v in present):
        return [bool(v) for v in values], "bool"
    if present and complete and all(v in ("yes", "no") for v in present):
        return [v == "yes" for v in values], "bool"
    if present and complete and all(_count(v) for v in present):
        return list(values), "int64"
    if all(isinstance(v, numbers.Real) and not _flag(v) for v in present):
        return [float("nan") if v is None else v for v in values], "float64"
    return [None if v == "" else v for v in values], "object"


def records_frame(
    records: Sequence[Mapping[str, object]], columns: Sequence[str] | None = None
) -> pd.DataFrame:
    """Rows of plain cells (the report's tables and JSON views) as a DataFrame with real dtypes
    (see :func:`_column`), columns in the given order (default: the first row's)."""
    import pandas as pd

    names = list(columns if columns is not None else records[0] if records else [])
    data = {}
    for name in names:
        values, dtype = _column([record.get(name) for record in records])
        data[name] = pd.Series(values, dtype=dtype)
    return pd.DataFrame(data, columns=names)


def table_frame(header: Sequence[str], rows: Sequence[Sequence[object]]) -> pd.DataFrame:
    """A report table (header and rows of raw cells) as a DataFrame with real dtypes."""
    names = [column_name(h) for h in header]
    columns = [name for name, _ in names]
    frame = records_frame([dict(zip(columns, row, strict=True)) for row in rows], columns)
    frame.attrs["units"] = {name: unit for name, unit in names if unit}
    return frame


def _points_frame(
    groups: Sequence[tuple[str | bool, Sequence[dict[str, Any]]]],
    label: str,
    scenario: Scenario,
    *,
    numbered: str | None = None,
) -> pd.DataFrame:
    """JSON points ``{"control", "state": {variable: value}}`` in groups, one row each: the
    group's number (column ``numbered``, when given), its ``label``, the control, the state."""
    rows = [
        {
            **({numbered: i} if numbered else {}),
            label: value,
            "control": point["control"],
            **point["state"],
        }
        for i, (value, points) in enumerate(groups)
        for point in points
    ]
    columns = [*([numbered] if numbered else []), label, "control", *scenario.spec.variables]
    frame = records_frame(rows, columns)
    frame.attrs["units"] = {"control": scenario.control.unit}
    return frame


def notebook_html(frame: pd.DataFrame, title: str) -> str:
    """A result as a notebook shows it: a title, the frame, and the caution once."""
    from planner.report import CAUTION

    return (
        f"<p><strong>{html.escape(title)}</strong></p>"
        + frame.to_html(na_rep="-", float_format=lambda v: f"{v:.4g}")
        + f"<p><em>{html.escape(CAUTION)}</em></p>"
    )


def comparison_frame(comparison: Comparison) -> pd.DataFrame:
    """The comparison table (:func:`planner.report.comparison_rows`), one row per schedule,
    with the ``recovered`` flag after the verdict."""
    import pandas as pd

    from planner.report import comparison_rows

    frame = table_frame(*comparison_rows(comparison))
    frame.insert(2, "recovered", pd.Series([o.recovered for o in comparison.outcomes], dtype=bool))
    unit = comparison.scenario.control.unit
    currency = None if comparison.scenario.costs is None else comparison.scenario.costs.currency
    frame.attrs["units"].update(
        {"lowest_control": unit, "overshoot_depth": unit}
        | ({"total_cost": currency, "present_value": currency} if currency else {})
    )
    return frame


def comparison_figure(comparison: Comparison, view: str = "diagram") -> go.Figure:
    """The schedules on the equilibrium curve (``view="diagram"``) or over time (``"time"``),
    as the briefing draws them."""
    from planner.equilibria import locate
    from planner.figures import hysteresis_figure, time_series_figure, trajectories_of

    if view == "time":
        return time_series_figure(comparison)
    if view != "diagram":
        raise ValueError(f'view is "diagram" or "time", not {view!r}')
    scenario, found = comparison.scenario, comparison.diagram
    standing = locate(found, scenario.initial_state, scenario.current_control)
    return hysteresis_figure(
        scenario, found, standing=standing, trajectories=trajectories_of(comparison)
    )


def frontier_frame(frontier: Frontier) -> pd.DataFrame:
    """The frontier table (:func:`planner.frontier.frontier_rows`), one row per depth; a
    missing ``least_hold_years`` (NaN) means no hold within the horizon recovers there."""
    from planner.frontier import frontier_rows

    return table_frame(*frontier_rows(frontier))


def frontier_figure(frontier: Frontier) -> go.Figure:
    from planner.figures import frontier_figure as draw

    return draw(None, frontier)  # the builder reads everything it draws from the frontier


SPREAD = (0.05, 0.5, 0.95)
"""Quantiles of the ensemble frame, those its table shows: years_to_target_q05 and so on."""


def _quantile(name: str, q: float) -> str:
    return f"{name}_q{round(100 * q):02d}"


ENSEMBLE_TABLES = ("schedules", "members")
"""The ensemble's frames: ``to_frame()`` (one row per schedule) and ``to_frame("members")``."""


def ensemble_frame(ensemble: Ensemble, table: str = "schedules") -> pd.DataFrame:
    """One row per schedule: members, the chance of recovery with its interval, the chance of
    meeting the target (NaN without a target threshold), the 5%, 50% and 95% quantiles of the
    years to the target and of the present value, feasibility and the failed members.
    ``table="members"``: one row per member and schedule instead (:func:`members_frame`)."""
    from planner.ensemble import CONFIDENCE

    if table == "members":
        return members_frame(ensemble)
    if table != "schedules":
        raise ValueError(f"table is one of {ENSEMBLE_TABLES}, not {table!r}")

    rows = []
    for s in ensemble.schedules:
        years = s.years_to_target_quantiles() or {}
        value = s.present_value_quantiles()
        low, high = s.interval
        rows.append(
            {
                "schedule": s.name,
                "kind": s.kind,
                "members": s.members,
                "recovered_members": s.recovered,
                "p_recovered": s.p_recovered,
                "interval_low": low,
                "interval_high": high,
                "p_meets_target": s.p_meets_target if s.meets_target_by is not None else None,
                **{_quantile("years_to_target", q): years.get(q) for q in SPREAD},
                **{_quantile("present_value", q): value.get(q) for q in SPREAD},
                "feasible": s.infeasible is None,
                "infeasible": s.infeasible,
                "diverged_members": s.diverged,
                "unsettled_members": s.unsettled,
            }
        )
    frame = records_frame(rows)
    currency = None if ensemble.scenario.costs is None else ensemble.scenario.costs.currency
    frame.attrs["units"] = {_quantile("years_to_target", q): "yr" for q in SPREAD}
    if currency:
        frame.attrs["units"] |= {_quantile("present_value", q): currency for q in SPREAD}
    frame.attrs["confidence"] = CONFIDENCE
    return frame


def members_frame(ensemble: Ensemble) -> pd.DataFrame:
    """One row per schedule and member: ``schedule``, ``member`` (0, 1, ...; the same member
    draws the same parameters under every schedule), the member's drawn parameters (one column
    each, as the ensemble drew them: :func:`planner.ensemble.draw_parameters`, a function of the
    seed and the member alone), its ``verdict`` (recovered, not_recovered, diverged, unsettled,
    failed), ``recovered``, ``meets_target_at`` (years; NaN: not met at the horizon) and
    ``present_value`` (the scenario's currency)."""
    import numpy as np
    import pandas as pd

    from planner.ensemble import draw_parameters, physical_bounds
    from planner.scenario.uncertainty import Uncertainty
    from planner.verdict import RECOVERED, VERDICTS

    scenario, count = ensemble.scenario, ensemble.members
    uncertainty = (scenario.uncertainty or Uncertainty()).model_copy(
        update={"members": count, "seed": ensemble.seed}
    )
    drawn = draw_parameters(uncertainty, 0, count, bounds=physical_bounds(scenario))
    names = np.array([verdict.name.lower() for verdict in VERDICTS], dtype=object)
    parts = []
    for s in ensemble.schedules:
        codes = np.asarray(s.verdicts)
        part = {
            "schedule": pd.Series([s.name] * count, dtype=object),
            "member": np.arange(count, dtype=np.int64),
            **{name: np.asarray(values, dtype=float) for name, values in drawn.items()},
            "verdict": pd.Series(names[codes], dtype=object),
            "recovered": codes == RECOVERED,
            "meets_target_at": np.asarray(s.meets_target_at, dtype=float),
            "present_value": np.asarray(s.present_value, dtype=float),
        }
        parts.append(pd.DataFrame(part))
    columns = ["schedule", "member", *drawn, "verdict", "recovered"]
    columns += ["meets_target_at", "present_value"]
    frame = pd.concat(parts, ignore_index=True) if parts else pd.DataFrame(columns=columns)
    currency = None if scenario.costs is None else scenario.costs.currency
    frame.attrs["units"] = {"meets_target_at": "yr"} | (
        {"present_value": currency} if currency else {}
    )
    frame.attrs["seed"] = ensemble.seed
    return frame


def ensemble_figure(ensemble: Ensemble) -> go.Figure:
    from planner.figures import recovery_by_year_figure

    return recovery_by_year_figure(ensemble)


def fit_frame(fit: Fit) -> pd.DataFrame:
    """The fitted quantities (:func:`planner.calibration.fit_json`): one row per parameter,
    initial state and threshold, with ``low`` and ``high`` of the best interval and how it was
    made (``method``); NaN where the record does not determine it."""
    from planner.calibration import fit_json

    data = fit_json(fit)
    rows = []
    for quantity, key in (
        ("parameter", "parameters"),
        ("initial state", "initial_state"),
        ("threshold", "thresholds"),
    ):
        for name, entry in data[key].items():
            interval = entry["interval"] or (None, None)
            rows.append(
                {
                    "quantity": quantity,
                    "name": name,
                    "value": entry["value"],
                    "low": interval[0],
                    "high": interval[1],
                    "method": entry["method"],
                }
            )
    frame = records_frame(rows)
    frame.attrs["confidence"] = data["confidence"]
    return frame


def fit_figure(fit: Fit) -> go.Figure:
    from planner.figures import fit_figure as draw

    return draw(fit)


def signals_frame(signals: Signals) -> pd.DataFrame:
    """One row per time of the regular grid: the series (``filled``: interpolated), its trend
    and residual, and each rolling indicator at the end of its window (NaN elsewhere)."""
    import numpy as np
    import pandas as pd

    frame = pd.DataFrame(
        {
            "time": np.asarray(signals.times, dtype=float),
            "series": np.asarray(signals.series, dtype=float),
            "filled": np.asarray(signals.filled, dtype=bool),
            "trend": np.asarray(signals.trend, dtype=float),
            "residual": np.asarray(signals.residuals, dtype=float),
        }
    )
    for indicator in signals.indicators:
        at = pd.Series(np.asarray(indicator.values, dtype=float), index=indicator.times)
        frame[column_name(indicator.name)[0]] = frame["time"].map(at).astype(float)
    frame.attrs["units"] = {"series": signals.unit, "trend": signals.unit}
    frame.attrs["kendall_tau"] = {
        column_name(i.name)[0]: float(i.kendall_tau) for i in signals.indicators
    }
    return frame


def signals_figure(signals: Signals) -> go.Figure:
    from planner.figures import signals_figure as draw

    return draw(signals)


# ---------------------------------------------------------------------------------------------
# Files: figures as images (kaleido on a Chromium), frames as Parquet (pyarrow)

IMAGE_FORMATS = {".png": "png", ".svg": "svg", ".pdf": "pdf"}
"""Image formats by file suffix (lower case)."""
IMAGE_WIDTH, IMAGE_HEIGHT = 900, 600
"""Layout pixels of an image whose figure sets no size of its own."""
IMAGE_SCALE = 2
"""Device pixels per layout pixel in a PNG: sharp on a projector and in print (common practice,
no source); SVG and PDF are vector images, which no scale changes."""
BROWSER = "/usr/bin/chromium"
"""The Chrome that kaleido drives: Debian's Chromium, unless ``BROWSER_PATH`` names another."""
EXPORT_EXTRA = "install the 'export' extra (pip install 'regime-planner[export]')"


def image_format(path: str | os.PathLike[str]) -> str:
    """The image format a file name asks for by its suffix: "png", "svg" or "pdf"; ValueError
    for any other suffix."""
    suffix = os.path.splitext(os.fspath(path))[1].lower()
    if suffix not in IMAGE_FORMATS:
        given = f"{suffix!r}" if suffix else "no suffix"
        raise ValueError(f"{given} is not an image suffix; use {', '.join(IMAGE_FORMATS)}")
    return IMAGE_FORMATS[suffix]


def browser_path() -> str:
    """The Chrome or Chromium that draws images: ``BROWSER_PATH`` when set, else BROWSER."""
    return os.environ.get("BROWSER_PATH") or BROWSER


def image_export_missing() -> str | None:
    """Why figures cannot be written as images here (kaleido, or its browser, is missing), or
    None when they can. Cheap: imports nothing and starts no browser."""
    from importlib.util import find_spec

    if find_spec("kaleido") is None:
        return f"images need kaleido, which is not installed; {EXPORT_EXTRA}"
    browser = browser_path()
    if not (os.path.isfile(browser) and os.access(browser, os.X_OK)):
        return (
            f"images need Chromium at {browser}, which is missing; install it (Debian: "
            "apt-get install chromium) or set BROWSER_PATH to a Chrome or Chromium"
        )
    return None


def parquet_missing() -> str | None:
    """Why tables cannot be written as Parquet here (pyarrow is missing), or None."""
    from importlib.util import find_spec

    if find_spec("pyarrow") is None:
        return f"Parquet needs pyarrow, which is not installed; {EXPORT_EXTRA}"
    return None


def figure_image(
    figure: go.Figure,
    format: str = "png",
    *,
    width: int | None = None,
    height: int | None = None,
) -> bytes:
    """A figure (from :mod:`planner.figures`) as PNG, SVG or PDF bytes, drawn by kaleido in a
    headless Chromium (:func:`browser_path`) with MathJax off, so that nothing is fetched from
    the network. Size in layout pixels: ``width`` and ``height`` when given, else the figure's
    own, else IMAGE_WIDTH x IMAGE_HEIGHT; a PNG has IMAGE_SCALE device pixels to each.
    RuntimeError when kaleido or the browser is missing."""
    if format not in IMAGE_FORMATS.values():
        raise ValueError(f"format is one of {tuple(IMAGE_FORMATS.values())}, not {format!r}")
    missing = image_export_missing()
    if missing:
        raise RuntimeError(missing)
    import kaleido

    layout = figure.layout
    options = {
        "format": format,
        "width": width or layout.width or IMAGE_WIDTH,
        "height": height or layout.height or IMAGE_HEIGHT,
        "scale": IMAGE_SCALE if format == "png" else 1,
    }
    browser = {"mathjax": False, "path": _quiet_browser(browser_path())}
    return kaleido.calc_fig_sync(figure.to_dict(), opts=options, kopts=browser)


def _quiet_browser(browser: str) -> str:
    """A small script that starts ``browser`` with :data:`planner.briefing.CHROMIUM_FLAGS`
    (no display, off the network), for kaleido, which passes no flags of its own choosing."""
    import hashlib
    import shlex
    import stat
    import tempfile
    from pathlib import Path

    from planner.briefing import CHROMIUM_FLAGS

    text = '#!/bin/sh\nexec {} {} "$@"\n'.format(
        shlex.quote(browser), " ".join(shlex.quote(flag) for flag in CHROMIUM_FLAGS)
    )
    digest = hashlib.sha256(text.encode()).hexdigest()[:12]
    folder = Path(tempfile.gettempdir()) / f"planner-images-{os.getuid()}"
    folder.mkdir(mode=0o700, exist_ok=True)
    script = folder / f"chromium-{digest}"
    if not script.exists():
        partial = folder / f".{script.name}.{os.getpid()}"
        partial.write_text(text, encoding="utf-8")
        partial.chmod(stat.S_IRWXU)
        partial.replace(script)  # atomic: another process may be writing the same script
    return str(script)


def frame_parquet(frame: pd.DataFrame) -> bytes:
    """A frame (a result's ``to_frame()``) as Parquet bytes (pyarrow), its dtypes kept and its
    ``attrs`` (units and the like) in the file's metadata; no index column. RuntimeError when
    pyarrow is missing."""
    missing = parquet_missing()
    if missing:
        raise RuntimeError(missing)
    import io

    buffer = io.BytesIO()
    frame.to_parquet(buffer, engine="pyarrow", index=False)
    return buffer.getvalue()
