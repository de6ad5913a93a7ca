"""The compiled Dormand-Prince attempt (planner.integrate.fused) on the engine's analytic
problems, against the numpy stepper it replaces for large batches, and on a demo ensemble.

The compiled path normally starts at ``FUSED_MIN_MEMBERS`` members; here it is lowered to one,
so the same exact-solution checks as tests/test_integrate.py run through it (their sources are
named there), and a spy makes sure the compiled attempt really ran.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.integrate import solve_ivp

from planner.integrate import Problem, Save, Tolerance, fused, held, integrate  # noqa: F401
from planner.integrate.codegen import specialise
from planner.models import compile_model, formula_spec
from tests import test_integrate as analytic

pytestmark = pytest.mark.skipif(not fused.available(), reason="numba is not installed")


@pytest.fixture
def compiled_always(monkeypatch):
    """Every batch takes the compiled path; counts the kernels handed out."""
    handed = []
    original = fused.kernel_for

    def spy(functions):
        kernel = original(functions)
        handed.append(kernel)
        return kernel

    monkeypatch.setattr(fused, "FUSED_MIN_MEMBERS", 1)
    monkeypatch.setattr(fused, "kernel_for", spy)
    return handed


def _ran_compiled(handed) -> bool:
    return bool(handed) and all(kernel is not None for kernel in handed)


def test_linear_relaxation_under_a_ramp(compiled_always):
    analytic.test_linear_relaxation_under_a_ramp_matches_the_closed_form("dop853")
    assert _ran_compiled(compiled_always)


def test_logistic_growth_per_member(compiled_always):
    analytic.test_logistic_growth_matches_the_closed_form_per_member("dop853")
    assert _ran_compiled(compiled_always)


@pytest.mark.parametrize("eps", [1e-2, 1e-3])
def test_slow_passage_airy_law(compiled_always, eps):
    """Crossings and divergence times come from the dense output, whose stages the compiled
    attempt does not keep: they are recomputed for the members asked."""
    analytic.test_slow_passage_jump_is_delayed_by_the_airy_law(eps, "dop853")
    assert _ran_compiled(compiled_always)


@pytest.mark.parametrize("r", [0.01, 1.0])
def test_bottleneck_passage_time(compiled_always, r):
    analytic.test_bottleneck_passage_time(r, 3.0, "dop853")
    assert _ran_compiled(compiled_always)


def test_a_jump_across_the_target(compiled_always):
    analytic.test_a_jump_across_the_target_is_a_crossing_at_its_time("dop853")
    assert _ran_compiled(compiled_always)


def test_one_attempt_equals_the_numpy_stages_to_rounding():
    """One compiled attempt against the same step written out with numpy from scipy's DOP853
    coefficient tables (Hairer, Norsett & Wanner 1993, Solving Ordinary Differential Equations
    I, section II.10; the tables of scipy.integrate's DOP853): new state, slope and error norm
    per member agree to rounding (the error estimate, a
    difference of nearly equal sums, to 1e-5), on a two-variable model with per-member
    parameters."""
    from scipy.integrate._ivp import dop853_coefficients as tables

    spec = formula_spec(
        {"x": "u - a*x + y**2/(1 + y**2)", "y": "x - b*y*exp(-x/4)"}, ("u", "a", "b")
    )
    rng = np.random.default_rng(3)
    m = 257
    a, b = rng.uniform(0.5, 1.5, m), rng.uniform(0.2, 0.9, m)
    system = compile_model(spec, "u").bind({"u": 0.0, "a": a, "b": b})
    functions, values = specialise(system)
    kernel = fused.kernel_for(functions)
    x = rng.uniform(0.1, 3.0, (2, m))
    u_a, slope, start, factor = 0.8, 0.05, 1.0, rng.uniform(0.8, 1.2, m)
    t, h, rtol, atol = 1.3, 0.37, 1e-7, 1e-10

    def rhs(time, state):
        u = (u_a + slope * (time - start)) * factor
        return np.array(functions.batched_rhs(*state, u, *values, *functions.hoist(*values)))

    stages = np.empty((13, 2, m))
    stages[0] = rhs(t, x)
    for i in range(1, 12):
        stages[i] = rhs(t + tables.C[i] * h, x + h * np.tensordot(tables.A[i, :i], stages[:i], 1))
    expected_new = x + h * np.tensordot(tables.B, stages[:12], 1)
    stages[12] = rhs(t + h, expected_new)
    weight = rtol * np.maximum(np.abs(x), np.abs(expected_new)) + atol
    e5 = np.sum((np.tensordot(tables.E5, stages, 1) / weight) ** 2, axis=0)
    e3 = np.sum((np.tensordot(tables.E3, stages, 1) / weight) ** 2, axis=0)
    expected_error = h * e5 / np.sqrt((e5 + 0.01 * e3) * 2)

    all_values = fused.member_values((*values, *functions.hoist(*values)), m)
    new, f_new, error = np.empty_like(x), np.empty_like(x), np.empty(m)
    kernel(t, h, x, stages[0].copy(), u_a, slope, start, factor, all_values, rtol,
           np.full(2, atol), new, f_new, error)  # fmt: skip
    np.testing.assert_allclose(new, expected_new, rtol=1e-13)
    np.testing.assert_allclose(f_new, stages[12], rtol=1e-12, atol=1e-14)
    # the error estimate is a small difference of stage sums: rounding leaves ~1e-7 of it
    np.testing.assert_allclose(error, expected_error, rtol=1e-5)


def test_large_batch_agrees_with_scipy_member_by_member():
    """A 3,000-member batch (the compiled path by default) of x' = u - s x + r x^8/(m^8 + x^8)
    (Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771) with a parameter draw
    per member against scipy's solve_ivp(DOP853, rtol 1e-12) on a sample of members."""
    spec = formula_spec({"P": "L - s*P + r*P**8/(m**8 + P**8)"}, ("L", "s", "r", "m"))
    rng = np.random.default_rng(11)
    m = max(3000, fused.FUSED_MIN_MEMBERS)
    r, s = rng.normal(6.0, 0.3, m), rng.uniform(1.1, 1.3, m)
    system = compile_model(spec, "L").bind({"L": 1.0, "s": s, "r": r, "m": 4.0})
    run = integrate(
        Problem(system, np.full((1, m), 7.1), held(1.0), 20.0),
        save=Save(every=5.0),
        tolerance=Tolerance(1e-9, 1e-12),
        solver="dop853",
    )
    for j in rng.choice(m, 12, replace=False):

        def f(t, p, j=j):
            return 1.0 - s[j] * p + r[j] * p**8 / (4.0**8 + p**8)

        exact = solve_ivp(f, (0, 20), [7.1], method="DOP853", rtol=1e-12, atol=1e-14,
                          t_eval=run.sample_times).y[0]  # fmt: skip
        np.testing.assert_allclose(run.samples[:, 0, j], exact, rtol=1e-7)
