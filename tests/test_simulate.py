"""Integration under control paths: slow passage through a fold, bottleneck passage times,
accuracy on the demo schedules, and the quasi-static sweep."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import solve_ivp
from scipy.optimize import brentq
from scipy.special import ai_zeros

from planner.models import compile_model, formula_spec
from planner.scenario import load_scenario
from planner.schedules import ControlPath, action_timeline, control_path
from planner.simulate import Status, integrate_path
from planner.sweep import quasi_static_sweep

SCENARIOS = sorted((Path(__file__).resolve().parent.parent / "scenarios").glob("*.toml"))


def _normal_form():
    return compile_model(formula_spec({"x": "mu + x**2"}, ("mu",)), "mu").bind({"mu": -1.0})


@pytest.mark.parametrize("eps", [1e-2, 1e-3, 1e-4])
def test_slow_passage_jump_is_delayed_by_the_airy_law(eps):
    """For x' = mu + x^2 with mu = mu0 + eps t, the state leaves the stable branch at
    mu = |a1| eps^(2/3), a1 the first zero of Ai (Haberman 1979, SIAM J. Appl. Math. 37:69-106;
    a1 from scipy.special.ai_zeros). The run is reported as a divergence with its time."""
    a1 = ai_zeros(1)[0][0]
    mu0, mu1 = -1.0, 0.5
    duration = (mu1 - mu0) / eps
    path = ControlPath(np.array([0.0, duration]), np.array([mu0, mu1]))
    run = integrate_path(_normal_form(), np.array([-1.0]), path, duration, limit=1e6)
    assert run.status is Status.DIVERGED
    mu_jump = mu0 + eps * run.t_end
    expected = abs(a1) * eps ** (2 / 3)
    assert mu_jump == pytest.approx(expected, rel=5e-3)


@pytest.mark.parametrize("r", [0.01, 0.1, 1.0])
@pytest.mark.parametrize("x_end", [3.0, 10.0])
def test_bottleneck_passage_time(r, x_end):
    """x' = r + x^2 takes (2/sqrt(r)) arctan(X/sqrt(r)) to go from -X to X
    (Strogatz 2015, Nonlinear Dynamics and Chaos, section 4.3)."""
    system = compile_model(formula_spec({"x": "mu + x**2"}, ("mu",)), "mu").bind({"mu": r})
    exact = 2 / np.sqrt(r) * np.arctan(x_end / np.sqrt(r))
    path = ControlPath(np.array([0.0]), np.array([r]))
    run = integrate_path(
        system, np.array([-x_end]), path, 2 * exact, target_index=0, threshold=x_end
    )
    upward = [t for t, direction in run.crossings if direction > 0]
    assert upward, "the threshold crossing was not found"
    assert upward[0] == pytest.approx(exact, rel=1e-6)


def _reference_final_state(scenario, schedule):
    """Independent integration: scipy solve_ivp(Radau, rtol=1e-10, atol=1e-12) over the whole
    horizon, split only where an action rescales the state (a jump no integrator can step)."""
    system = scenario.system()
    path = control_path(schedule, current=scenario.current_control)
    timeline = action_timeline(schedule)
    horizon = scenario.simulation.horizon
    base = {p.parameter: system.parameter(p.parameter) for p in timeline.pulses}

    def rhs(t, y):
        factors = timeline.multipliers(t)
        bound = (
            system.with_parameters(**{k: base[k] * v for k, v in factors.items()})
            if factors
            else system
        )
        return bound.rhs(y, path(t))

    stops = sorted({0.0, horizon, *(e[0] for e in timeline.state_events if 0 < e[0] < horizon)})
    x = scenario.initial_state.copy()
    for a, b in zip(stops[:-1], stops[1:], strict=True):
        for when, variable, factor in timeline.state_events:
            if when == a:
                x[system.variables.index(variable)] *= factor
        x = solve_ivp(rhs, (a, b), x, method="Radau", rtol=1e-10, atol=1e-12).y[:, -1]
    return x


@pytest.mark.parametrize("file", SCENARIOS, ids=lambda p: p.stem)
def test_state_at_horizon_matches_tight_radau_on_every_demo_schedule(file):
    """The planner's state at the horizon agrees with scipy's solve_ivp (Radau, rtol 1e-10,
    atol 1e-12; scipy as reference library) to 1e-6 relative, on every demo schedule."""
    scenario = load_scenario(file)
    for schedule in scenario.schedules:
        path = control_path(schedule, current=scenario.current_control)
        run = integrate_path(
            scenario.system(),
            scenario.initial_state,
            path,
            scenario.simulation.horizon,
            timeline=action_timeline(schedule),
        )
        reference = _reference_final_state(scenario, schedule)
        assert run.status is Status.FINISHED
        np.testing.assert_allclose(run.final_state, reference, rtol=1e-6, err_msg=schedule.name)


def _q2_fold_controls(b):
    """Folds of x' = a - b x + x^2/(1+x^2): b = 2x/(1+x^2)^2, a = b x - x^2/(1+x^2)
    (Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix), solved with
    scipy brentq on either side of the maximum of 2x/(1+x^2)^2 at x = 1/sqrt(3)."""
    g = lambda x: 2 * x / (1 + x**2) ** 2 - b  # noqa: E731
    peak = 1 / np.sqrt(3)
    xs = [brentq(g, 1e-9, peak), brentq(g, peak, 50.0)]
    return sorted(b * x - x**2 / (1 + x**2) for x in xs)


def test_quasi_static_sweep_brackets_the_analytic_folds():
    """Dialling a up then down in steps of 0.001 jumps within one step of each analytic fold of
    the q = 2 recycling model, b = 0.6 (folds from the fold condition with brentq)."""
    system = compile_model(formula_spec({"x": "a - b*x + x**2/(1 + x**2)"}, ("a", "b")), "a")
    system = system.bind({"a": 0.0, "b": 0.6})
    sweep = quasi_static_sweep(system, (0.0, 0.2), np.array([0.0]), step=0.001)
    recovery, collapse = _q2_fold_controls(0.6)
    up = [j for j in sweep.jumps if j.direction == "up"]
    down = [j for j in sweep.jumps if j.direction == "down"]
    assert len(up) == 1 and len(down) == 1
    assert up[0].control_before <= collapse <= up[0].control_after
    assert down[0].control_after <= recovery <= down[0].control_before
    assert up[0].state_after[0] > up[0].state_before[0]
    assert down[0].state_after[0] < down[0].state_before[0]


def test_reversible_lake_sweeps_without_jumps():
    """Above the cusp (b > 3 sqrt(3)/8) the q = 2 model has one equilibrium at every a, so a slow
    sweep traces the same curve both ways (Carpenter, Ludwig & Brock 1999)."""
    system = compile_model(formula_spec({"x": "a - b*x + x**2/(1 + x**2)"}, ("a", "b")), "a")
    sweep = quasi_static_sweep(system.bind({"a": 0.0, "b": 0.8}), (0.0, 0.3), np.array([0.0]))
    assert sweep.jumps == []
    np.testing.assert_allclose(sweep.states_up[0], sweep.states_down[0][::-1], rtol=1e-5, atol=1e-7)
