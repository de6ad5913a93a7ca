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


def ensemble_briefing(ensemble: Ensemble) -> str:
    """An HTML page: recovery probabilities by year, a fan chart per schedule, the table."""
    from planner.briefing import Section, page
    from planner.figures import ensemble_fan_figure, recovery_by_year_figure

    scenario = ensemble.scenario
    sections = [
        Section("Chance of recovery", figure=recovery_by_year_figure(ensemble)),
        Section("Summary", text=ensemble_text(ensemble, caution=False)),
    ]
    for summary in ensemble.schedules:
        sections.append(
            Section(f"Spread: {summary.name}", figure=ensemble_fan_figure(ensemble, summary.name))
        )
    return page(f"Ensemble: {scenario.name}", sections, summary=scenario.description)
