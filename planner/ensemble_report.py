"""Plain-data views of an ensemble (JSON for `--json`, a text table, the HTML page).

The CLI prints these and the web app shows them; neither computes anything itself.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from planner.ensemble import (
    CONFIDENCE,
    INTERVAL_METHOD,
    SCHEME_SETTLE,
    Ensemble,
    ScheduleEnsemble,
)
from planner.report import CAUTION, text_table

LOAD_CONVENTION = (
    "control in calendar year k times exp(sigma z_k - sigma^2/2), z a stationary unit AR(1) "
    "series: mean-one lognormal factor, constant within the year"
)


def _number(value: float | None) -> float | None:
    """A JSON-safe float: NaN and infinities become null."""
    if value is None:
        return None
    value = float(value)
    return value if math.isfinite(value) else None


def _quantiles_json(values: dict[float, float] | None) -> dict[str, float | None] | None:
    if values is None:
        return None
    return {f"{q:g}": _number(v) for q, v in values.items()}


def schedule_ensemble_json(summary: ScheduleEnsemble) -> dict[str, Any]:
    """One schedule's entry of `planner ensemble --json`."""
    low, high = summary.interval
    by_year = None
    if summary.meets_target_by is not None:
        by_year = [
            {"year": float(year), "p": float(p)}
            for year, p in zip(summary.years, summary.meets_target_by, strict=True)
        ]
    fan = summary.fan
    return {
        "name": summary.name,
        "kind": summary.kind,
        "members": summary.members,
        "recovered_members": summary.recovered,
        "p_recovered": summary.p_recovered,
        "interval": [low, high],
        "diverged_members": summary.diverged,
        "unsettled_members": summary.unsettled,
        "feasible": summary.infeasible is None,
        "infeasible": summary.infeasible,
        "p_meets_target": summary.p_meets_target,
        "meets_target_by_year": by_year,
        "years_to_target": _quantiles_json(summary.years_to_target_quantiles()),
        "present_value": {
            "mean": _number(np.mean(summary.present_value)),
            "quantiles": _quantiles_json(summary.present_value_quantiles()),
        },
        "fan": {
            "times": [float(t) for t in fan.times],
            "quantiles": {
                f"{level:g}": [_number(v) for v in row]
                for level, row in zip(fan.levels, fan.values, strict=True)
            },
            "members": fan.members,
        },
    }


def ensemble_json(ensemble: Ensemble) -> dict[str, Any]:
    """The `planner ensemble --json` object: at least ``schedules`` with ``name``,
    ``p_recovered``, ``interval`` [low, high] and ``members`` for each schedule."""
    scenario = ensemble.scenario
    uncertainty = scenario.uncertainty
    variability = None if uncertainty is None else uncertainty.load_variability
    return {
        "scenario": scenario.name,
        "members": ensemble.members,
        "seed": ensemble.seed,
        "horizon": scenario.simulation.horizon,
        "target": {
            "variable": scenario.target.variable,
            "regime": scenario.target.regime,
            "threshold": scenario.target.threshold,
        },
        "method": {
            "integration": ensemble.scheme,
            "steps_per_year": _number(ensemble.steps_per_year),
            "verdict": SCHEME_SETTLE,
            "interval": INTERVAL_METHOD,
            "confidence": CONFIDENCE,
            "load_variability": None
            if variability is None
            else {
                "sigma_log": variability.sigma_log,
                "autocorrelation": variability.autocorrelation,
                "convention": LOAD_CONVENTION,
            },
            "process_noise": {} if uncertainty is None else dict(uncertainty.process_noise),
        },
        "currency": None if scenario.costs is None else scenario.costs.currency,
        "schedules": [schedule_ensemble_json(s) for s in ensemble.schedules],
        "caution": CAUTION,
    }


def _spread(values: dict[float, float] | None, digits: str) -> str:
    if values is None:
        return "-"
    return f"{values[0.5]:{digits}} ({values[0.05]:{digits}} to {values[0.95]:{digits}})"


ENSEMBLE_HEADER = (
    "Schedule",
    "P(recovered)",
    f"{CONFIDENCE:.0%} interval",
    "P(target met at horizon)",
    "Years to target: median (5% to 95%)",
    "Present value: median (5% to 95%)",
    "Feasible",
)


def ensemble_rows(ensemble: Ensemble) -> tuple[tuple[str, ...], list[list[object]]]:
    """The ensemble table: one row per schedule, as text cells."""
    rows: list[list[object]] = []
    for s in ensemble.schedules:
        low, high = s.interval
        rows.append(
            [
                s.name,
                f"{s.p_recovered:.3f}",
                f"{low:.3f} to {high:.3f}",
                f"{s.p_meets_target:.3f}" if s.meets_target_by is not None else "-",
                _spread(s.years_to_target_quantiles(), ".3g"),
                _spread(s.present_value_quantiles(), ",.0f"),
                "yes" if s.infeasible is None else "no",
            ]
        )
    return ENSEMBLE_HEADER, rows


def _steps(ensemble: Ensemble) -> str:
    per_year = ensemble.steps_per_year
    return "" if per_year is None or np.isnan(per_year) else f", {per_year:g} steps a year"


def ensemble_text(ensemble: Ensemble, *, caution: bool = True) -> str:
    """A terminal summary: members, method, the table and any infeasibility."""
    scenario = ensemble.scenario
    lines = [
        scenario.name,
        f"{ensemble.members} members, seed {ensemble.seed}; {ensemble.scheme}"
        f"{_steps(ensemble)}; verdict after settling "
        f"({SCHEME_SETTLE}); {INTERVAL_METHOD.title()} {CONFIDENCE:.0%} interval.",
        "",
        text_table(*ensemble_rows(ensemble)),
    ]
    if scenario.uncertainty is None:
        lines.insert(
            2, "No [uncertainty] block: every member is the same (the deterministic case)."
        )
    for s in ensemble.schedules:
        if s.infeasible is not None:
            lines.append(f"Infeasible - {s.name}: {s.infeasible}")
        if s.diverged or s.unsettled:
            lines.append(
                f"{s.name}: {s.diverged} members diverged, {s.unsettled} had not settled by the "
                "cap (both counted as not recovered)"
            )
    if caution:
        lines += ["", CAUTION]
    return "\n".join(lines)


FAN_HEIGHT = 340  # px: a briefing holds one fan chart per schedule


def _percent(value: float) -> str:
    return f"{100 * value:.1f}%" if 0.0 < value < 1.0 else f"{100 * value:.0f}%"


def chance_words(ensemble: Ensemble, summary: ScheduleEnsemble) -> str:
    """ "“Deep cut” recovers in 87.0% of 2,000 members (95% interval 85.4% to 88.4%)"."""
    low, high = summary.interval
    return (
        f"Under uncertainty, “{summary.name}” recovers in {_percent(summary.p_recovered)} of "
        f"{ensemble.members:,} members ({CONFIDENCE:.0%} interval {_percent(low)} to "
        f"{_percent(high)})"
    )


def _spread_values(values: dict[float, float] | None) -> tuple[float | None, ...]:
    if values is None:
        return (None, None, None)
    return (values[0.5], values[0.05], values[0.95])


def ensemble_part(ensemble: Ensemble):
    """The briefing's part for an ensemble: the chance of recovery of each schedule with its
    interval, the chance of meeting the target by each year, and a fan chart per schedule."""
    from planner.briefing import (
        BriefingFigure,
        BriefingPart,
        BriefingTable,
        ScheduleNote,
        figure_data,
    )
    from planner.figures import ensemble_fan_figure, recovery_by_year_figure

    scenario = ensemble.scenario
    currency = scenario.costs.currency if scenario.costs is not None else "no currency set"
    level = f"{CONFIDENCE:.0%}"
    rows = []
    for s in ensemble.schedules:
        low, high = s.interval
        rows.append(
            (
                s.name,
                _percent(s.p_recovered),
                f"{_percent(low)} to {_percent(high)}",
                _percent(s.p_meets_target) if s.meets_target_by is not None else None,
                *_spread_values(s.years_to_target_quantiles()),
                *_spread_values(s.present_value_quantiles()),
                "yes" if s.infeasible is None else "no",
            )
        )
    table = BriefingTable(
        (
            "Schedule",
            "Chance of recovery",
            f"{level} interval",
            "Chance the target is met at the horizon",
            "Years to target: median (yr)",
            "5% of members by (yr)",
            "95% of members by (yr)",
            f"Present value: median ({currency})",
            f"Present value: 5% ({currency})",
            f"Present value: 95% ({currency})",
            "Feasible",
        ),
        tuple(rows),
        tuple(s.name for s in ensemble.schedules),
        caption="Years to target: over the members that meet it; 5% and 95%: the spread "
        "between members.",
    )
    figures = [
        BriefingFigure(
            figure_data(recovery_by_year_figure(ensemble)),
            "Each line: the share of members meeting the target from that year on.",
        )
    ]
    for s in ensemble.schedules:
        fan = ensemble_fan_figure(ensemble, s.name)
        fan.update_layout(height=FAN_HEIGHT)
        figures.append(
            BriefingFigure(
                figure_data(fan),
                "Shaded: where 5% to 95% and 25% to 75% of members lie, year by year; line: the "
                "median.",
                schedule=s.name,
            )
        )
    notes = [
        ScheduleNote(s.name, chance_words(ensemble, s), s.p_recovered) for s in ensemble.schedules
    ]
    notes += [
        ScheduleNote(s.name, f"“{s.name}” breaks a limit: {s.infeasible}", quote=False)
        for s in ensemble.schedules
        if s.infeasible is not None
    ]
    findings = []
    if scenario.uncertainty is None:
        findings.append(
            "The scenario sets no uncertainty: every member is the same lake (chances 0 or 1)."
        )
    best = max(ensemble.schedules, key=lambda s: s.p_recovered, default=None)
    return BriefingPart(
        kind="ensemble",
        heading="The chance of recovery",
        headline="No schedule was run." if best is None else chance_words(ensemble, best),
        findings=tuple(findings),
        tables=(table,),
        figures=tuple(figures),
        notes=tuple(notes),
        method=f"{ensemble.members:,} members drawn from the scenario's uncertainty (seed "
        f"{ensemble.seed}); {ensemble.scheme}{_steps(ensemble)}; recovery judged after "
        f"settling; {INTERVAL_METHOD.title()} {level} interval for each chance.",
    )


def ensemble_briefing(ensemble: Ensemble, *, source: str = "") -> str:
    """The briefing with the ensemble's part: the schedules compared (the verdict and the
    recommendation), then the chance of recovery of each."""
    from planner.briefing import result_briefing

    return result_briefing(ensemble.scenario, ensemble_part(ensemble), source)
