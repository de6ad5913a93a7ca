"""`planner fit` on a handful of annual means for the steady-state loading model kinds
(scenarios/example-retention.toml, scenarios/example-internal-load.toml: invented lakes, mean
depth 5 m). The records are made here from the models' equations, integrated by scipy
(solve_ivp), with known parameters plus 2% invented noise, written as a CSV with a year column
and TP in ug/L (read into the model's g P / m2 through the [lake] block)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

import planner
from tests.figure_cases import SCENARIOS

DEPTH_M = 5.0
YEARS = np.arange(2010, 2018)
LOADS = np.array([0.6, 0.55, 0.5, 0.4, 0.3, 0.25, 0.2, 0.2])  # g P / m2 / yr


def _record(tmp_path, rhs, count: int, seed: int):
    """``count`` annual means of TP (ug/L) from dP/dt = rhs(P, L(t)), P(0) = 0.7 g P / m2."""
    years, loads = YEARS[:count], LOADS[:count]

    def load(t):
        return np.interp(t, years - years[0], loads)

    solution = solve_ivp(
        lambda t, p: [rhs(p[0], load(t))],
        (0.0, float(years[-1] - years[0])),
        [0.7],
        t_eval=years - years[0],
        rtol=1e-10,
        atol=1e-12,
    )
    noise = 1.0 + 0.02 * np.random.default_rng(seed).standard_normal(count)
    tp = solution.y[0] / DEPTH_M * 1000.0 * noise  # g/m2 over 5 m -> ug/L
    path = tmp_path / "annual-means.csv"
    rows = [f"{y},{u},{c:.2f}" for y, u, c in zip(years, loads, tp, strict=True)]
    path.write_text("year,load [g P / m2 / yr],TP [ug/L]\n" + "\n".join(rows) + "\n")
    return path


def _stable_equilibrium(fit, load: float) -> float:
    """The fitted lake's stable equilibrium P (g P / m2) at ``load``, lowest if several."""
    found = []
    for branch in fit.diagram.branches:
        for i in range(len(branch.controls) - 1):
            (a, b), stable = branch.controls[i : i + 2], branch.stable[i] and branch.stable[i + 1]
            if stable and min(a, b) <= load <= max(a, b) and a != b:
                w = (load - a) / (b - a)
                found.append((1 - w) * branch.states[i, 0] + w * branch.states[i + 1, 0])
    assert found, "no stable equilibrium at this load"
    return min(found)


@pytest.mark.parametrize("count", [5, 7])
def test_retention_steady_state_matches_vollenweider_closed_form(tmp_path, count):
    """Retention model fitted to 5 or 7 annual means (sigma fitted, rho = 1 / tau_w = 1 per
    year held from the [lake] residence time): its steady state TP at the last load matches
    the closed form TP = L / (z (rho + sigma)) with the true rho = sigma = 1 per year
    (Vollenweider 1976, Mem. Ist. Ital. Idrobiol. 33:53-83; OECD 1982, Eutrophication of Waters:
    Monitoring, Assessment and Control, loading relationships) within 5% (2% noise)."""
    path = _record(tmp_path, lambda p, u: u - 2.0 * p, count, seed=5)
    fit = planner.fit(path, SCENARIOS / "example-retention.toml", fit=["sigma"], bootstrap=0)
    load = float(LOADS[count - 1])
    closed_form_ug_l = load / (DEPTH_M * (1.0 + 1.0)) * 1000.0
    fitted_ug_l = _stable_equilibrium(fit, load) / DEPTH_M * 1000.0
    assert fitted_ug_l == pytest.approx(closed_form_ug_l, rel=0.05)
    (sigma,) = [e.value for e in fit.parameters if e.name == "sigma"]
    assert sigma == pytest.approx(1.0, rel=0.05)


def test_retention_with_rho_and_sigma_both_free_pins_only_their_sum(tmp_path):
    """Only rho + sigma enters dP/dt = L - (rho + sigma) P (Vollenweider 1976), so with both
    free the fit finds their sum and says the two are not identifiable one by one."""
    from planner.calibration import fit_text

    path = _record(tmp_path, lambda p, u: u - 2.0 * p, 7, seed=5)
    fit = planner.fit(path, SCENARIOS / "example-retention.toml", bootstrap=0)
    values = {e.name: e.value for e in fit.parameters}
    assert values["rho"] + values["sigma"] == pytest.approx(2.0, rel=0.05)
    assert "not identifiable" in fit_text(fit)


def test_internal_load_model_fitted_to_eight_annual_means(tmp_path):
    """Internal-load model (release rate RR times an anoxic factor rising with lake P, after
    Nuernberg 1984, Limnology and Oceanography 29:111-124) fitted for RR and m to 8 annual
    means with rho, sigma, AF and q known: RR and m recovered within 15%, and the fitted lowest
    steady state at the last load within 10% of the true one, found by scipy's brentq on
    L + RR AF / 1000 P^q / (m^q + P^q) - (rho + sigma) P = 0."""
    rr, af, m, q = 10.0, 80.0, 0.4, 8.0

    def rhs(p, u, rr=rr, m=m):
        return u + rr * af / 1000.0 * p**q / (m**q + p**q) - 2.0 * p

    path = _record(tmp_path, rhs, 8, seed=7)
    fit = planner.fit(path, SCENARIOS / "example-internal-load.toml", fit=["RR", "m"], bootstrap=0)
    values = {e.name: e.value for e in fit.parameters}
    assert values["RR"] == pytest.approx(rr, rel=0.15)
    assert values["m"] == pytest.approx(m, rel=0.15)
    load = float(LOADS[-1])
    true_low = brentq(lambda p: rhs(p, load), 1e-9, 0.2)  # below m: the clear state
    assert _stable_equilibrium(fit, load) == pytest.approx(true_low, rel=0.10)
