"""Plain-data views of results (JSON for `--json`, rows for tables, text summaries).

The CLI prints these and the web app shows them; neither computes anything itself.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING, Any

from planner.units import TP_UNIT

if TYPE_CHECKING:  # `planner check` prints from here and must not load the numerical stack
    import numpy as np

    from planner.equilibria import Branch, Diagram, Standing, Threshold
    from planner.limnology import TrophicState
    from planner.units import LakeConversion

CAUTION = (
    "Caution: this is a screening tool. Results are estimates from simplified models of "
    "phosphorus cycling; thresholds fitted from data are uncertain, lakes respond with long "
    "lags, and algal blooms can be toxic. Decisions on loads, in-lake treatments and public "
    "water use must follow local regulations and the judgement of licensed professionals."
)


def state_dict(variables: tuple[str, ...], x: np.ndarray) -> dict[str, float]:
    return {name: float(value) for name, value in zip(variables, x, strict=True)}


def clipped_runs(
    branch: Branch, low: float, high: float
) -> list[tuple[bool, np.ndarray, np.ndarray]]:
    """Runs of equal stability cut to the control range, with interpolated end points."""
    import numpy as np

    pieces = []
    for stable, part in branch.runs():
        controls, states = branch.controls[part], branch.states[part]
        current_c: list[float] = []
        current_s: list[np.ndarray] = []
        for i in range(len(controls)):
            inside = low <= controls[i] <= high
            if i > 0:
                a, b = controls[i - 1], controls[i]
                for edge in (low, high):
                    if (a - edge) * (b - edge) < 0:
                        w = (edge - a) / (b - a)
                        point = (1 - w) * states[i - 1] + w * states[i]
                        current_c.append(edge)
                        current_s.append(point)
                        if not inside and len(current_c) > 1:
                            pieces.append((stable, np.array(current_c), np.array(current_s)))
                        if not inside:
                            current_c, current_s = [], []
            if inside:
                current_c.append(float(controls[i]))
                current_s.append(states[i])
        if len(current_c) > 1:
            pieces.append((stable, np.array(current_c), np.array(current_s)))
    return pieces


def diagram_json(scenario, diagram: Diagram, standing: Standing | None = None) -> dict[str, Any]:
    """The `planner diagram --json` object (DESIGN.md section 5 contract, plus extras)."""
    variables = diagram.system.variables
    low, high = diagram.control_range
    window = diagram.window
    out: dict[str, Any] = {
        "scenario": scenario.name,
        "control": scenario.control.parameter,
        "unit": scenario.control.unit,
        "range": [low, high],
        "lowest_achievable": diagram.least,
        "classification": diagram.classification,
        "folds": [
            {
                "control": fold.control,
                "state": state_dict(variables, fold.state),
                "kind": fold.kind,
                "in_range": fold.in_range,
                "residual": fold.residual,
            }
            for fold in sorted(diagram.folds, key=lambda f: f.control)
        ],
        "window": (
            {"recovery": diagram.recovery_threshold, "collapse": diagram.collapse_threshold}
            if window is not None
            and diagram.recovery_threshold is not None
            and diagram.collapse_threshold is not None
            else None
        ),
        "thresholds": {
            "recovery": threshold_json(diagram.recovery),
            "collapse": threshold_json(diagram.collapse),
        },
        "most_stable_states": diagram.most_stable_states,
        "stability_changes": [
            {
                "control": change.control,
                "state": state_dict(variables, change.state),
                "oscillatory": change.oscillatory,
                "in_range": change.in_range,
            }
            for change in diagram.stability_changes
        ],
        "branches": [
            {
                "stable": stable,
                "points": [
                    {"control": float(c), "state": state_dict(variables, x)}
                    for c, x in zip(controls, states, strict=True)
                ],
            }
            for branch in diagram.branches
            for stable, controls, states in clipped_runs(branch, low, high)
        ],
    }
    if standing is not None:
        out["current"] = standing_json(variables, standing)
    lake = lake_json(scenario, diagram, standing)
    if lake is not None:
        out["lake"] = lake
    return out


def standing_json(variables: tuple[str, ...], standing: Standing) -> dict[str, Any]:
    return {
        "control": standing.control,
        "state": state_dict(variables, standing.state),
        "attractor": None
        if standing.attractor is None
        else state_dict(variables, standing.attractor),
        "regime": {True: "desired", False: "undesired", None: "none"}[standing.desired],
        "integration": standing.status,
        "separatrix": standing.separatrix,
        "to_recovery": standing.to_recovery,
        "to_collapse": standing.to_collapse,
    }


_KIND_WORDS = {
    ("undesired", "fold"): "a fold: the undesired state meets its basin boundary and vanishes",
    ("undesired", "hopf"): (
        "a Hopf point: below it the undesired state is no longer steady; the lake swings in "
        "growing oscillations before it leaves that state"
    ),
    ("undesired", "stability change"): "the undesired state stops being stable there",
    ("desired", "fold"): "a fold: the desired state meets its basin boundary and vanishes",
    ("desired", "hopf"): (
        "a Hopf point: above it the desired state is no longer steady and starts to swing"
    ),
    ("desired", "stability change"): "the desired state stops being stable there",
}
NOT_REACHABLE = {
    "undesired": "not reachable by load cuts alone",
    "desired": "not reached within the control range",
}


_COUNT_WORDS = {2: "two", 3: "three", 4: "four", 5: "five"}


def threshold_words(threshold: Threshold | None, unit: str = "") -> str:
    """A threshold in words: its value and what happens there, or why the control cannot reach
    it (the CLI text, the app and the briefing all say it this way)."""
    if threshold is None:
        return "none found"
    if not threshold.reachable:
        return f"{NOT_REACHABLE[threshold.lost]} ({threshold.reason})"
    return f"{_number(threshold.value, unit)} ({_KIND_WORDS[(threshold.lost, threshold.kind)]})"


def threshold_json(threshold: Threshold | None) -> dict[str, Any] | None:
    """value (null when not reachable), kind, reachable and the reason when it is not."""
    if threshold is None:
        return None
    return {
        "value": threshold.value,
        "kind": threshold.kind,
        "reachable": threshold.reachable,
        "reason": threshold.reason,
    }


def _number(value: float | None, unit: str = "") -> str:
    if value is None:
        return "none found"
    return f"{value:.4g} {unit}".strip()


def stable_states_words(diagram: Diagram) -> str:
    """'two stable states', 'three stable states'...: how many coexist at most in range."""
    count = diagram.most_stable_states
    return f"{_COUNT_WORDS.get(count, str(count))} stable states"


def lake_verdict_words(scenario, diagram: Diagram) -> str:
    """The lake's classification in one line (the terminal, the app and the briefing)."""
    unit = scenario.control.unit
    name = scenario.control.label or scenario.control.parameter
    verdicts = {
        "reversible": "reversible: one stable state at every control value in range, no hysteresis",
        "hysteretic": f"hysteretic: {stable_states_words(diagram)} over a window of control values",
        "irreversible": (
            "irreversible: the undesired state persists even at the lowest achievable "
            f"{name} ({diagram.least:g} {unit})"
        ),
    }
    return verdicts[diagram.classification]


def diagram_text(scenario, diagram: Diagram, standing: Standing, *, caution: bool = True) -> str:
    """A readable summary for the terminal (``caution=False`` where the page shows it already)."""
    unit = scenario.control.unit
    name = scenario.control.label or scenario.control.parameter
    count = diagram.most_stable_states
    lines = [scenario.name, "", f"Lake verdict: {lake_verdict_words(scenario, diagram)}"]
    if diagram.classification == "irreversible" and count > 2:
        lines.append(
            f"{stable_states_words(diagram)[:1].upper()}{stable_states_words(diagram)[1:]} coexist."
        )
    lines.append(f"Collapse threshold: {threshold_words(diagram.collapse, unit)}")
    lines.append(f"Recovery threshold: {threshold_words(diagram.recovery, unit)}")
    shown = {diagram.recovery_threshold, diagram.collapse_threshold}
    for change in diagram.stability_changes:
        if change.in_range and change.control not in shown:
            lines.append(
                f"Note: an equilibrium changes stability at {change.control:.4g} {unit}"
                + (" (oscillations start there)" if change.oscillatory else "")
            )
    lines.append("")
    lines.append("Folds:")
    for fold in sorted(diagram.folds, key=lambda f: f.control):
        where = "" if fold.in_range else " (outside the control range: not a load to aim for)"
        state = ", ".join(
            f"{k} = {v:.4g}" for k, v in state_dict(diagram.system.variables, fold.state).items()
        )
        passed = {"recovery": diagram.recovery, "collapse": diagram.collapse}.get(fold.kind)
        if (
            fold.in_range
            and passed is not None
            and passed.kind != "fold"
            and passed.location is not None
            and abs(passed.location - fold.control) > 0
        ):
            where = f" (the {passed.lost} state is already unstable here: see the threshold)"
        lines.append(f"  {fold.kind:<9} at {fold.control:.6g} {unit}  [{state}]{where}")
    if not diagram.folds:
        lines.append("  none in the searched range")
    lines.append("")
    lines.append(f"Now: {name} = {standing.control:g} {unit}")
    if standing.attractor is None:
        lines.append(f"  The current state {standing.status}.")
    else:
        regime = "the desired (clear) regime" if standing.desired else "an undesired regime"
        lines.append(f"  With the control held, the lake settles in {regime}.")
    if standing.separatrix:
        values = ", ".join(f"{v:.4g}" for v in standing.separatrix)
        lines.append(
            f"  Basin boundary (unstable equilibrium) at {diagram.system.variables[0]} = {values}"
        )
    if standing.to_recovery is not None:
        if standing.to_recovery > 0:
            lines.append(
                f"  The control must fall by {standing.to_recovery:.4g} {unit} "
                "to pass the recovery threshold."
            )
        else:
            lines.append(
                f"  The control is already {-standing.to_recovery:.4g} {unit} "
                "below the recovery threshold."
            )
    elif standing.desired is False and diagram.recovery is not None:
        lines.append(f"  Recovery threshold {threshold_words(diagram.recovery, unit)}.")
    if standing.to_collapse is not None and standing.to_collapse > 0:
        lines.append(
            f"  It may rise by {standing.to_collapse:.4g} {unit} before the collapse threshold."
        )
    elif standing.desired is False:
        lines.append(
            "  The lake is already in the undesired regime: the collapse threshold matters "
            "again once it has recovered."
        )
    lines += lake_lines(scenario, diagram, standing)
    if caution:
        lines += ["", CAUTION]
    return "\n".join(lines)


def check_text(scenario, source: str) -> str:
    """Short summary printed by `planner check`."""
    control = scenario.control
    lines = [
        f"{source}: valid",
        f"  name:      {scenario.name}",
        f"  model:     {scenario.model_info.kind} ({', '.join(scenario.model_info.variables)})",
        f"  control:   {control.parameter} = {scenario.current_control:g} {control.unit}, "
        f"range [{control.range[0]:g}, {control.range[1]:g}]",
        f"  target:    {scenario.target.regime} {scenario.target.variable}"
        + (
            ""
            if scenario.target.threshold is None
            else f", threshold {scenario.target.threshold:g}"
        ),
        f"  schedules: {len(scenario.schedules)}"
        + "".join(f"\n    - {s.name} ({s.kind})" for s in scenario.schedules),
    ]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# Schedules compared

COMPARISON_HEADER = (
    "Schedule",
    "Verdict",
    "Feasible",
    "Meets target at (yr)",
    "Relapsed",
    "Lowest control",
    "Overshoot depth",
    "Time below threshold (yr)",
    "Total cost",
    "Present value",
    "Why infeasible",
)


def verdict_text(scenario, outcome) -> str:
    """The verdict in words; a recovery whose target is met only after the horizon says so."""
    text = outcome.verdict.value
    late = outcome.meets_target_at is None and scenario.target.threshold is not None
    if outcome.recovered and late:
        text += " (target met only after the horizon)"
    return text


def comparison_rows(comparison) -> tuple[tuple[str, ...], list[list[object]]]:
    """The comparison table: one row per schedule, raw numbers (formatting is the viewer's)."""
    rows = []
    for outcome in comparison.outcomes:
        rows.append(
            [
                outcome.name,
                verdict_text(comparison.scenario, outcome),
                "yes" if outcome.feasible else "no",
                outcome.meets_target_at,
                "yes" if outcome.relapsed else "no",
                outcome.min_control,
                outcome.overshoot_depth,
                outcome.time_below_threshold,
                outcome.cost.total,
                outcome.cost.present_value,
                "" if outcome.infeasible is None else outcome.infeasible.message,
            ]
        )
    return COMPARISON_HEADER, rows


def outcome_json(scenario, outcome) -> dict[str, Any]:
    variables = scenario.spec.variables
    infeasible = outcome.infeasible
    return {
        "name": outcome.name,
        "kind": outcome.kind,
        "verdict": outcome.verdict.name.lower(),
        "recovered": outcome.recovered,
        "feasible": outcome.feasible,
        "infeasible": None
        if infeasible is None
        else {"time": infeasible.time, "limit": infeasible.limit, "message": infeasible.message},
        "diverged_at": outcome.diverged_at,
        "meets_target_at": outcome.meets_target_at,
        "relapsed": outcome.relapsed,
        "min_control": outcome.min_control,
        "final_control": outcome.final_control,
        # "duration" is the contract's name (DESIGN.md section 5); time_below_threshold says
        # what it is, as the frontier does
        "overshoot": {
            "depth": outcome.overshoot_depth,
            "duration": outcome.time_below_threshold,
            "time_below_threshold": outcome.time_below_threshold,
        },
        "years_in_desired_basin": outcome.years_in_desired_basin,
        "years_meeting_target": outcome.years_meeting_target,
        "state_at_horizon": state_dict(variables, outcome.trajectory.final_state),
        "settled_state": None
        if outcome.settled_state is None
        else state_dict(variables, outcome.settled_state),
        "cost": {
            "currency": outcome.cost.currency,
            "total": outcome.cost.total,
            "present_value": outcome.cost.present_value,
            "abatement": outcome.cost.abatement_total,
            "actions": outcome.cost.actions_total,
            "damage": outcome.cost.damage_total,
        },
    }


def comparison_json(comparison) -> dict[str, Any]:
    """The `planner compare --json` object (DESIGN.md section 5 contract, plus extras)."""
    scenario, diagram = comparison.scenario, comparison.diagram
    out = {
        "scenario": scenario.name,
        "control": scenario.control.parameter,
        "unit": scenario.control.unit,
        "horizon": scenario.simulation.horizon,
        "classification": diagram.classification,
        "thresholds": {
            "recovery": threshold_json(diagram.recovery),
            "collapse": threshold_json(diagram.collapse),
        },
        "target": {
            "variable": scenario.target.variable,
            "regime": scenario.target.regime,
            "threshold": scenario.target.threshold,
        },
        "schedules": [outcome_json(scenario, outcome) for outcome in comparison.outcomes],
        "caution": CAUTION,
    }
    lake = lake_json(scenario, diagram)
    if lake is not None:
        out["lake"] = lake
        conversion = _lake_conversion(scenario)
        for entry, outcome in zip(out["schedules"], comparison.outcomes, strict=True):
            entry["lake"] = outcome_lake_json(scenario, conversion, outcome)
    return out


def _cell_text(value: object) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:,.0f}" if abs(value) >= 1e4 else f"{value:.3g}"
    return str(value)


FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")
"""Text cells starting with these are read as formulas by spreadsheets (OWASP, CSV injection)."""


def csv_cell(value: object) -> object:
    """A cell as a spreadsheet reads it safely: None empty, numbers as numbers, text that would
    start a formula prefixed with an apostrophe (shown as text, never run)."""
    if value is None:
        return ""
    if isinstance(value, str) and value.startswith(FORMULA_STARTS):
        return "'" + value
    return value


def table_csv(header, rows) -> str:
    """A table as CSV text (the CLI's ``--csv`` and the app's download alike)."""
    import csv
    import io

    stream = io.StringIO()
    writer = csv.writer(stream)  # CRLF line ends (RFC 4180): a field holding \r is quoted too
    writer.writerow([csv_cell(h) for h in header])
    for row in rows:
        writer.writerow([csv_cell(value) for value in row])
    return stream.getvalue()


def text_table(header: tuple[str, ...], rows: list[list[object]], *, max_width: int = 48) -> str:
    """A plain fixed-width table for the terminal."""
    cells = [[_cell_text(v)[:max_width] for v in row] for row in rows]
    widths = [
        max(len(h), *(len(r[i]) for r in cells)) if cells else len(h) for i, h in enumerate(header)
    ]

    def line(values: list[str] | tuple[str, ...]) -> str:
        return "  ".join(v.ljust(w) for v, w in zip(values, widths, strict=True)).rstrip()

    return "\n".join([line(header), line(["-" * w for w in widths]), *(line(r) for r in cells)])


def comparison_text(comparison) -> str:
    scenario, diagram = comparison.scenario, comparison.diagram
    unit = scenario.control.unit
    header, rows = comparison_rows(comparison)
    keep = [0, 1, 3, 6, 7, 9]
    lines = [
        scenario.name,
        f"Recovery threshold {threshold_words(diagram.recovery, unit)}; "
        f"collapse threshold {threshold_words(diagram.collapse, unit)}; "
        f"horizon {scenario.simulation.horizon:g} years.",
        "",
        text_table(tuple(header[i] for i in keep), [[row[i] for i in keep] for row in rows]),
    ]
    for outcome in comparison.outcomes:
        if outcome.infeasible is not None:
            lines.append(f"Infeasible - {outcome.name}: {outcome.infeasible.message}")
    lines += comparison_lake_lines(comparison)
    lines += ["", CAUTION]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# The lake in the trade's units (scenarios with a [lake] block)


def _lake_conversion(scenario) -> LakeConversion | None:
    """The scenario's conversions (pint, loaded here on first use), None without [lake]."""
    if getattr(scenario, "lake", None) is None:
        return None
    from planner.units import scenario_lake_conversion

    return scenario_lake_conversion(scenario)


def _trophic(conversion: LakeConversion, value: float) -> TrophicState | None:
    """The trophic state of a value of the target variable; None when TP cannot be shown or the
    value is not a concentration (negative, not finite)."""
    from planner.limnology import trophic_state

    if conversion.tp_per_state is None or not math.isfinite(value):
        return None
    tp = conversion.tp(value)
    return trophic_state(tp) if tp >= 0 else None


def trophic_json(conversion: LakeConversion, value: float | None) -> dict[str, Any] | None:
    """A value of the target variable with its lake TP (ug/L) and trophic state."""
    if value is None:
        return None
    state = _trophic(conversion, float(value))
    return {"state": float(value), **({} if state is None else state.as_json())}


def load_json(conversion: LakeConversion, value: float | None) -> dict[str, Any] | None:
    """A control value and, when the control is a load, the same load in the lake's units."""
    if value is None:
        return None
    converted = None if conversion.load_per_control is None else conversion.load(value)
    return {"control": float(value), "load": converted, "load_unit": conversion.load_unit}


def _threshold_lake_json(conversion, threshold: Threshold | None, k: int) -> dict | None:
    if threshold is None or threshold.value is None:
        return None
    state = None if threshold.state is None else float(threshold.state[k])
    return {
        **load_json(conversion, threshold.value),  # type: ignore[dict-item]
        "regime_lost": threshold.lost,
        "tp": trophic_json(conversion, state),
    }


def lake_json(scenario, diagram: Diagram, standing: Standing | None = None) -> dict | None:
    """The ``lake`` object of the diagram and comparison JSON (None without a [lake] block):
    morphometry, the conversions (factors worked out by pint, and in words), lake TP with its
    trophic state for the current state, the attractors and the thresholds' states, and loads
    in kg/yr or t/yr."""
    conversion = _lake_conversion(scenario)
    if conversion is None:
        return None
    k = scenario.target_index
    state_unit, tp_ok = conversion.state_unit, conversion.tp_per_state is not None
    threshold = scenario.target.threshold
    out: dict[str, Any] = {
        "area": conversion.area.text,
        "area_km2": conversion.area_km2,
        "mean_depth": conversion.mean_depth.text,
        "mean_depth_m": conversion.mean_depth_m,
        "volume_m3": conversion.volume_m3,
        "residence_time_yr": conversion.residence_time_yr,
        "outflow": scenario.lake.outflow,
        "variable": conversion.variable,
        "tp_conversion": {
            "from": state_unit,
            "to": TP_UNIT,
            "per_unit": conversion.tp_per_state,
            "words": conversion.tp_words(1.0),
        }
        if tp_ok
        else None,
        "tp_unavailable": conversion.tp_unavailable,
        "load_conversion": {
            "from": conversion.control_unit,
            "to": conversion.load_unit,
            "per_unit": conversion.load_per_control,
            "words": conversion.load_words(1.0),
        }
        if conversion.load_per_control is not None
        else None,
        "load_unavailable": conversion.load_unavailable,
        "current": {
            **load_json(conversion, scenario.current_control),  # type: ignore[dict-item]
            "tp": trophic_json(conversion, float(scenario.initial_state[k])),
        },
        "thresholds": {
            "recovery": _threshold_lake_json(conversion, diagram.recovery, k),
            "collapse": _threshold_lake_json(conversion, diagram.collapse, k),
        },
        "target": None if threshold is None else trophic_json(conversion, threshold),
    }
    if standing is not None:
        desired = diagram.desired_attractor(standing.control)
        out["attractor"] = (
            None if standing.attractor is None else trophic_json(conversion, standing.attractor[k])
        )
        out["desired_at_current_load"] = (
            None if desired is None else trophic_json(conversion, desired.state[k])
        )
    return out


def _lake_header(conversion: LakeConversion) -> list[str]:
    lines = ["The lake in the trade's units", f"  Morphometry: {conversion.morphometry_words()}."]
    said = []
    if conversion.tp_per_state is not None:
        said.append(conversion.tp_words(1.0))
    if conversion.load_per_control is not None:
        said.append(conversion.load_words(1.0))
    if said:
        lines.append(f"  Conversions: {'; '.join(said)}.")
    if conversion.tp_unavailable is not None:
        lines.append(f"  Lake TP not shown: {conversion.tp_unavailable}.")
    if conversion.load_unavailable is not None:
        lines.append(f"  Loads not converted: {conversion.load_unavailable}.")
    return lines


def _load_text(conversion: LakeConversion, value: float) -> str:
    """ "2.6 g P / m2 / yr (6,240 kg P/yr)": the control and, when it is a load, the load."""
    from planner.units import significant

    text = f"{significant(value)} {conversion.control_unit}".strip()
    if conversion.load_per_control is not None:
        text += f" ({significant(conversion.load(value))} {conversion.load_unit})"
    return text


def _state_text(conversion: LakeConversion, value: float) -> str:
    from planner.units import significant

    return f"{conversion.variable} = {significant(value)} {conversion.state_unit}".rstrip()


def _trophic_line(conversion: LakeConversion, what: str, value: float) -> str | None:
    from planner.limnology import trophic_words

    state = _trophic(conversion, value)
    if state is None:
        return None
    return f"  {what} ({_state_text(conversion, value)}): {trophic_words(state)}"


def _threshold_line(conversion, name: str, threshold: Threshold | None, k: int) -> str | None:
    if threshold is None:
        return None
    if threshold.value is None:
        return f"  The {name} threshold is {NOT_REACHABLE[threshold.lost]}."
    regime = {"undesired": "the undesired state", "desired": "the desired state"}[threshold.lost]
    text = f"  At the {name} threshold, {_load_text(conversion, threshold.value)}"
    state = None if threshold.state is None else _trophic(conversion, float(threshold.state[k]))
    if state is None:
        return text + "."
    from planner.limnology import trophic_words

    value = float(threshold.state[k])  # type: ignore[index]
    return f"{text}, {regime} there ({_state_text(conversion, value)}): {trophic_words(state)}"


def _target_line(scenario, conversion: LakeConversion) -> str | None:
    threshold = scenario.target.threshold
    if threshold is None:
        return None
    from planner.limnology import trophic_words
    from planner.units import significant

    state = _trophic(conversion, threshold)
    if state is None:
        return None
    sign = "<=" if scenario.target.regime == "lowest" else ">="
    wanted = f"{conversion.variable} {sign} {significant(threshold)} {conversion.state_unit}"
    if scenario.target.in_lake_tp:  # given as lake TP: say once how it became model units
        wanted = (
            f"{wanted.rstrip()}, set as {scenario.target.asked_words()}, "
            f"{conversion.tp_words(threshold)}"
        )
    return f"  Water-quality target {wanted.rstrip()}: {trophic_words(state)}"


def _lake_opening(scenario, control: float):
    """The lake's conversion and the first lines of a lake section (morphometry, conversions,
    today's load), or None without a [lake] block."""
    conversion = _lake_conversion(scenario)
    if conversion is None:
        return None
    lines = _lake_header(conversion)
    lines.append(f"  Load now: {_load_text(conversion, control)}")
    return conversion, lines


def lake_lines(scenario, diagram: Diagram, standing: Standing) -> list[str]:
    """The diagram text's lake section (nothing without a [lake] block)."""
    opening = _lake_opening(scenario, standing.control)
    if opening is None:
        return []
    conversion, lines = opening
    k = scenario.target_index
    desired = diagram.desired_attractor(standing.control)
    found = [
        _trophic_line(conversion, "Now", float(standing.state[k])),
        None
        if standing.attractor is None
        else _trophic_line(conversion, "Where it settles, load held", float(standing.attractor[k])),
        None
        if desired is None or standing.desired is True
        else _trophic_line(conversion, "Desired state at this load", float(desired.state[k])),
        _threshold_line(conversion, "recovery", diagram.recovery, k),
        _threshold_line(conversion, "collapse", diagram.collapse, k),
        _target_line(scenario, conversion),
    ]
    return ["", *lines, *(line for line in found if line is not None)]


def outcome_lake_json(scenario, conversion: LakeConversion, outcome) -> dict[str, Any]:
    """One schedule's loads in the lake's units and its lake TP at the horizon and settled."""
    k = scenario.target_index
    settled = outcome.settled_state
    return {
        "min_control": load_json(conversion, outcome.min_control),
        "final_control": load_json(conversion, outcome.final_control),
        "at_horizon": trophic_json(conversion, float(outcome.trajectory.final_state[k])),
        "settled": None if settled is None else trophic_json(conversion, float(settled[k])),
    }


def comparison_lake_lines(comparison) -> list[str]:
    """The comparison text's lake section (nothing without a [lake] block)."""
    from planner.limnology import trophic_brief

    scenario, diagram = comparison.scenario, comparison.diagram
    opening = _lake_opening(scenario, scenario.current_control)
    if opening is None:
        return []
    conversion, lines = opening
    k = scenario.target_index
    now = _trophic_line(conversion, "Now", float(scenario.initial_state[k]))
    for line in (
        now,
        _threshold_line(conversion, "recovery", diagram.recovery, k),
        _threshold_line(conversion, "collapse", diagram.collapse, k),
        _target_line(scenario, conversion),
    ):
        if line is not None:
            lines.append(line)
    for outcome in comparison.outcomes:
        parts = [f"lowest load {_load_text(conversion, outcome.min_control)}"]
        horizon = _trophic(conversion, float(outcome.trajectory.final_state[k]))
        if horizon is not None:
            parts.append(f"at the horizon {trophic_brief(horizon)}")
        settled = (
            None
            if outcome.settled_state is None
            else _trophic(conversion, float(outcome.settled_state[k]))
        )
        if settled is not None:
            parts.append(f"settled {trophic_brief(settled)}")
        lines.append(f"  {outcome.name}: {'; '.join(parts)}")
    return ["", *lines]


def sweep_json(scenario, sweep) -> dict[str, Any]:
    variables = scenario.spec.variables
    leg = lambda controls, states: [  # noqa: E731
        {"control": float(c), "state": state_dict(variables, states[:, i])}
        for i, c in enumerate(controls)
    ]
    return {
        "scenario": scenario.name,
        "control": scenario.control.parameter,
        "step": sweep.step,
        "up": leg(sweep.controls_up, sweep.states_up),
        "down": leg(sweep.controls_down, sweep.states_down),
        "jumps": [
            {
                "direction": jump.direction,
                "between": [jump.control_before, jump.control_after],
                "from": state_dict(variables, jump.state_before),
                "to": state_dict(variables, jump.state_after),
            }
            for jump in sweep.jumps
        ],
        "unsettled_steps": sweep.unsettled,
        "diverged_at": sweep.diverged_at,
    }


def sweep_text(scenario, sweep, *, caution: bool = True) -> str:
    unit = scenario.control.unit
    lines = [
        scenario.name,
        f"Quasi-static sweep in steps of {sweep.step:.4g} {unit}, up then down.",
    ]
    if not sweep.jumps:
        lines.append("No jump: the state follows one branch both ways (no hysteresis seen).")
    for jump in sweep.jumps:
        lines.append(
            f"  jump while dialling {jump.direction}: between {jump.control_before:.4g} and "
            f"{jump.control_after:.4g} {unit}"
        )
    if sweep.unsettled:
        lines.append(f"  {sweep.unsettled} steps had not settled by the cap.")
    if sweep.diverged_at is not None:
        lines.append(
            f"  Diverged: at {sweep.diverged_at:.4g} {unit} the state ran away (left the "
            "physical range or stopped being a finite number); the sweep stops there."
        )
    if caution:
        lines += ["", CAUTION]
    return "\n".join(lines)


# ---------------------------------------------------------------------------------------------
# The briefing's plain words: what the thresholds mean, where the lake stands, which schedule


def threshold_meaning(scenario, kind: str) -> str:
    """What the recovery or collapse threshold means, in words (the briefing's "why it
    matters" beside each threshold), naming the control as the scenario labels it."""
    name = scenario.control.label or scenario.control.parameter
    if name[:1].isupper() and name[1:2].islower():  # "External P load", not "TP load"
        name = name[:1].lower() + name[1:]
    meanings = {
        "recovery": f"the {name} below which the undesired state can no longer persist, so "
        "the lake can return to the desired state",
        "collapse": f"the {name} above which the desired state is lost and the lake flips to "
        "the undesired state",
    }
    return meanings[kind]


def threshold_lake_words(scenario, diagram: Diagram, kind: str) -> str | None:
    """The threshold's lake line (load in kg or t per year, lake TP in ug/L and its trophic
    state), as the diagram text says it; None without a [lake] block or that threshold."""
    conversion = _lake_conversion(scenario)
    if conversion is None:
        return None
    threshold = {"recovery": diagram.recovery, "collapse": diagram.collapse}[kind]
    line = _threshold_line(conversion, kind, threshold, scenario.target_index)
    return None if line is None else line.strip()


def standing_words(scenario, standing: Standing) -> str:
    """Where the lake settles with the control held at today's value, in one sentence."""
    from planner.units import significant

    now = f"{significant(standing.control)} {scenario.control.unit}".strip()
    if standing.attractor is None:
        return f"Held at today's value ({now}), the current state {standing.status}."
    regime = "the desired regime" if standing.desired else "the undesired regime"
    return f"Held at today's value ({now}), the lake settles in {regime}."


def _money(value: float, currency: str) -> str:
    return f"{value:,.0f} {currency}".strip()


def recommended(comparison, names=None):
    """The schedule to recommend among those named (None: all): of the schedules that recover
    and keep every limit, the one with the least present value, then the earliest year the
    target is met for good, then the first in the file. None when no such schedule."""
    candidates = [
        (outcome.cost.present_value, _meets_or_never(outcome), i, outcome)
        for i, outcome in enumerate(comparison.outcomes)
        if (names is None or outcome.name in names) and outcome.recovered and outcome.feasible
    ]
    return min(candidates, key=lambda item: item[:3])[3] if candidates else None


def _meets_or_never(outcome) -> float:
    return math.inf if outcome.meets_target_at is None else outcome.meets_target_at


def recommendation_words(comparison, names=None) -> str:
    """Which schedule to pick and why (recovers, when the target is met, cost in present
    value), or why none can be recommended, among the schedules named (None: all)."""
    from planner.units import significant

    scenario = comparison.scenario
    shown = [o for o in comparison.outcomes if names is None or o.name in names]
    if not shown:
        return "No schedule is shown, so there is nothing to recommend."
    count = f"{len(shown)} schedule{'s' if len(shown) != 1 else ''} shown"
    best = recommended(comparison, names)
    if best is None:
        breaking = [o.name for o in shown if o.recovered and not o.feasible]
        text = f"No schedule to recommend: none of the {count} brings the lake back to the "
        text += "desired state while keeping every limit set in the scenario"
        if breaking:
            quoted = ", ".join(f"“{name}”" for name in breaking)
            text += f" ({quoted} would recover but breaks a limit)"
        return text + (
            ". The recovery frontier shows how deep and how long a cut must be; the search "
            "finds the cheapest schedule that recovers."
        )
    text = (
        f"Recommended: “{best.name}”. Under this schedule the lake {verdict_text(scenario, best)}"
    )
    if best.meets_target_at is not None:
        text += (
            f" and meets the water-quality target from year {significant(best.meets_target_at)} on"
        )
    text += ", within every limit set in the scenario"
    costs = scenario.costs
    if costs is not None:
        text += (
            f". It costs {_money(best.cost.present_value, costs.currency)} in present value "
            f"(discounted at {costs.discount_rate * 100:g}% a year; "
            f"{_money(best.cost.total, costs.currency)} undiscounted)"
        )
    recovering = [o for o in shown if o.recovered and o.feasible]
    if len(shown) == 1:
        text += ". It is the only schedule shown."
    elif len(recovering) == 1:
        text += f". It is the only one of the {count} that recovers within the limits."
    else:
        k = len(recovering)
        if k == len(shown):
            lead = "Both schedules shown recover" if k == 2 else f"All {k} schedules shown recover"
        else:
            lead = f"{k} of the {count} recover"
        basis = (
            "the cheapest of them" if costs is not None else "the one that meets the target soonest"
        )
        text += f". {lead} within the limits; it is {basis}."
    if costs is None:
        text += " The scenario sets no costs."
    return text


def comparison_units(scenario) -> dict[str, str]:
    """The unit of each comparison column that lacks one in its heading (the control's unit,
    the currency); headings that carry theirs, such as "(yr)", are not listed."""
    currency = scenario.costs.currency if scenario.costs is not None else ""
    unit = scenario.control.unit
    units = {
        "Lowest control": unit,
        "Overshoot depth": unit,
        "Total cost": currency,
        "Present value": currency,
    }
    return {heading: value for heading, value in units.items() if value}


def with_units(header, units: dict[str, str]) -> tuple[str, ...]:
    """Headings with their unit in brackets, "Present value (EUR)"."""
    return tuple(f"{h} ({units[h]})" if h in units else h for h in header)
