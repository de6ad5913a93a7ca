"""Plain-data views of results (JSON for `--json`, rows for tables, text summaries).

The CLI prints these and the web app shows them; neither computes anything itself.
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # `planner check` prints from here and must not load the numerical stack
    import numpy as np

    from planner.equilibria import Branch, Diagram, Standing, Threshold

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
        lines.append(f"{_COUNT_WORDS.get(count, str(count)).capitalize()} stable states coexist.")
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
    return {
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
    lines += ["", CAUTION]
    return "\n".join(lines)


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
