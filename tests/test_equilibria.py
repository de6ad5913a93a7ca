"""Tests for equilibrium curves, folds, stability, bistable windows and the lake's standing.

Every reference value is computed here, independently of the continuation, from a closed form
or with numpy / scipy / sympy; the published source of each model is named in the docstring.
"""

from __future__ import annotations

from functools import cache

import numpy as np
import pytest
import sympy
from scipy.integrate import solve_ivp
from scipy.optimize import brentq

from planner.equilibria import Diagram, compute_diagram, locate
from planner.models import BUILTIN_MODELS, compile_model, formula_spec

FOLD_RESIDUAL = 1e-10
"""Largest |f| allowed at a refined fold."""
FOLD_AGREEMENT = 1e-8
"""Agreement between a fold found by continuation and the independently derived fold."""
ROOT_AGREEMENT = 1e-9
"""Agreement between an equilibrium from the diagram and an independently computed root."""
CUSP_B = 3.0 * np.sqrt(3.0) / 8.0
"""Largest b with two folds in x' = a - b x + x^2/(1 + x^2): the maximum of 2x/(1 + x^2)^2."""


def _system(equations: dict[str, str], parameters: dict[str, float], control: str):
    spec = formula_spec(equations, tuple(parameters))
    return compile_model(spec, control).bind(parameters)


def _assert_residuals(diagram: Diagram) -> None:
    for fold in diagram.folds:
        assert fold.residual < FOLD_RESIDUAL, fold
        # the reported residual is honest: |f| at the reported point
        f = diagram.system.rhs(fold.state, fold.control)
        assert np.max(np.abs(f)) < FOLD_RESIDUAL, fold


def _in_range(diagram: Diagram) -> list:
    return sorted((f for f in diagram.folds if f.in_range), key=lambda f: f.control)


def _sign_change_roots(function, grid: np.ndarray) -> list[float]:
    """Every root of a scalar function bracketed by a sign change on ``grid`` (brentq)."""
    values = np.array([function(x) for x in grid])
    roots = []
    for i in np.nonzero(np.sign(values[:-1]) * np.sign(values[1:]) < 0)[0]:
        roots.append(brentq(function, grid[i], grid[i + 1], xtol=1e-15, rtol=1e-15))
    return roots


# --------------------------------------------------------------------------------------------
# Saddle-node normal form


@cache
def _saddle_node() -> Diagram:
    system = _system({"x": "mu + x**2"}, {"mu": -1.0}, "mu")
    return compute_diagram(system, (-1.0, 1.0), reference_state=np.array([0.5]))


def test_saddle_node_normal_form_has_one_fold_at_origin():
    """x' = mu + x^2 has its only fold at mu = 0, x = 0.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1 (closed form).
    """
    diagram = _saddle_node()
    folds = _in_range(diagram)
    assert len(folds) == 1
    assert abs(folds[0].control) < 1e-8
    assert abs(folds[0].state[0]) < 1e-8
    assert folds[0].vanish_direction == 1  # the two equilibria vanish as mu rises past 0
    _assert_residuals(diagram)


@pytest.mark.parametrize(
    "mu",
    [
        -0.95,
        -0.6,
        -0.25,
        -0.01,
        -1e-3,
        -1e-5,
    ],
)
def test_saddle_node_branches_follow_square_root(mu):
    """Stable x = -sqrt(-mu), unstable x = +sqrt(-mu) for mu < 0; nothing for mu > 0.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1 (closed form).
    """
    diagram = _saddle_node()
    equilibria = diagram.equilibria_at(mu)
    stable = [e.state[0] for e in equilibria if e.stable]
    unstable = [e.state[0] for e in equilibria if not e.stable]
    assert len(stable) == 1 and len(unstable) == 1
    assert abs(stable[0] + np.sqrt(-mu)) < 1e-8
    assert abs(unstable[0] - np.sqrt(-mu)) < 1e-8


@pytest.mark.parametrize("mu", [0.1, 0.5, 0.9])
def test_saddle_node_has_no_equilibrium_past_the_fold(mu):
    """x' = mu + x^2 has no real equilibrium for mu > 0.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1.
    """
    assert _saddle_node().equilibria_at(mu) == []


# --------------------------------------------------------------------------------------------
# Insect outbreak: x' = R x (1 - x/K) - x^2/(1 + x^2), R the control

INSECT_RANGE = (0.21, 0.62)
"""Contains every fold for K in 6..15 (R between 0.26 and 0.62) and, with the search extended
by half the width on each side, stays at R > 0, where the outbreak branch stays bounded (it runs
to infinity as R -> 0)."""


def _insect_reference_folds(K: float) -> list[tuple[float, float]]:
    """(R, x) of the folds: the real roots x > 1 of 2x^3 = K (x^2 - 1), R = 2x^3/(1+x^2)^2."""
    roots = np.roots([2.0, -K, 0.0, K])
    real = [r.real for r in roots if abs(r.imag) < 1e-12 and r.real > 1.0]
    polished = [brentq(lambda x: 2 * x**3 - K * (x**2 - 1), 0.999 * r, 1.001 * r) for r in real]
    return sorted((2 * x**3 / (1 + x**2) ** 2, x) for x in polished)


@cache
def _insect(K: float) -> Diagram:
    system = _system({"x": "R*x*(1 - x/K) - x**2/(1 + x**2)"}, {"R": 0.4, "K": K}, "R")
    return compute_diagram(system, INSECT_RANGE, reference_state=np.array([1.0]))


@pytest.mark.parametrize("K", [6.0, 8.0, 10.0, 15.0])
def test_insect_outbreak_folds_lie_on_the_parametric_curve(K):
    """Above the cusp K = 3 sqrt(3) the folds lie on R(x) = 2x^3/(1+x^2)^2,
    K(x) = 2x^3/(x^2-1); solved here with numpy.roots and polished with scipy brentq.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.7.
    """
    expected = [
        (R, x) for R, x in _insect_reference_folds(K) if INSECT_RANGE[0] <= R <= INSECT_RANGE[1]
    ]
    assert len(expected) == 2  # the chosen range holds both folds
    diagram = _insect(K)
    found = _in_range(diagram)
    assert len(found) == len(expected)
    for fold, (R, x) in zip(found, expected, strict=True):
        assert abs(fold.control - R) < FOLD_AGREEMENT
        assert abs(fold.state[0] - x) < 1e-7 * x
    _assert_residuals(diagram)
    assert diagram.classification == "hysteretic"


@pytest.mark.parametrize("K", [4.0, 5.0])
def test_insect_outbreak_below_cusp_has_no_fold(K):
    """Below the cusp K = 3 sqrt(3) there is no fold: 2x^3 = K (x^2 - 1) has no root x > 1.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.7.
    """
    assert _insect_reference_folds(K) == []
    diagram = _insect(K)
    assert _in_range(diagram) == []
    assert diagram.classification == "reversible"
    _assert_residuals(diagram)


# --------------------------------------------------------------------------------------------
# Nondimensional recycling model with q = 2: x' = a - b x + x^2/(1 + x^2), a the control

RECYCLING_Q2 = {"x": "a - b*x + x**2/(1 + x**2)"}


@cache
def _q2(b: float, low: float = 0.0, high: float = 0.3) -> Diagram:
    system = _system(RECYCLING_Q2, {"a": 0.1, "b": b}, "a")
    return compute_diagram(system, (low, high), reference_state=np.array([1.0]))


def _q2_roots(a: float, b: float) -> np.ndarray:
    """Equilibria: (a - b x)(1 + x^2) + x^2 = 0, i.e. b x^3 - (a + 1) x^2 + b x - a = 0."""
    roots = np.roots([b, -(a + 1.0), b, -a])
    return np.sort(roots[np.abs(roots.imag) < 1e-9].real)


def _q2_folds(b: float) -> list[tuple[float, float]]:
    """(a, x) of the folds: b = 2x/(1+x^2)^2 (f = 0 and f_x = 0), a = b x - x^2/(1+x^2).

    The left side peaks at x = 1/sqrt(3), so one root lies on each side; solved with brentq.
    """
    g = lambda x: 2 * x / (1 + x**2) ** 2 - b  # noqa: E731
    peak = 1.0 / np.sqrt(3.0)
    if g(peak) <= 0:
        return []
    xs = [
        brentq(g, 1e-9, peak, xtol=1e-15, rtol=1e-15),
        brentq(g, peak, 50.0, xtol=1e-15, rtol=1e-15),
    ]
    return sorted((b * x - x**2 / (1 + x**2), x) for x in xs)


@pytest.mark.parametrize("b", [0.45, 0.55, 0.6, 0.64, 0.66, 0.8])
@pytest.mark.parametrize("a", [0.01, 0.05, 0.07, 0.095, 0.11, 0.2, 0.29])
def test_q2_equilibria_are_the_roots_of_the_cubic(a, b):
    """Equilibria equal the real roots of b x^3 - (a+1) x^2 + b x - a = 0 (numpy.roots).

    Model: Carpenter, Ludwig & Brock 1999, Management of eutrophication for lakes subject to
    potentially irreversible change, Ecological Applications 9:751-771, appendix (the
    nondimensional lake equation with q = 2). Cubic derived here by multiplying by 1 + x^2.
    """
    found = np.sort([e.state[0] for e in _q2(b).equilibria_at(a)])
    expected = _q2_roots(a, b)
    assert len(found) == len(expected)
    np.testing.assert_allclose(found, expected, rtol=0, atol=ROOT_AGREEMENT)
    # stability alternates: outer roots stable, a middle root unstable
    stable = [e.stable for e in sorted(_q2(b).equilibria_at(a), key=lambda e: e.state[0])]
    assert stable == ([True] if len(expected) == 1 else [True, False, True])


@pytest.mark.parametrize("b", [0.55, 0.6, 0.64])
def test_q2_two_folds_below_the_cusp(b):
    """Two folds for b < 3 sqrt(3)/8, at the roots of b = 2x/(1+x^2)^2 (scipy brentq);
    collapse at the larger a, recovery at the smaller.

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix.
    """
    diagram = _q2(b)
    expected = _q2_folds(b)
    found = _in_range(diagram)
    assert len(found) == 2
    for fold, (a, x) in zip(found, expected, strict=True):
        assert abs(fold.control - a) < FOLD_AGREEMENT
        assert abs(fold.state[0] - x) < 1e-7
    recovery, collapse = found
    assert recovery.kind == "recovery" and collapse.kind == "collapse"
    assert diagram.window is not None
    assert abs(diagram.window.recovery - expected[0][0]) < FOLD_AGREEMENT
    assert abs(diagram.window.collapse - expected[1][0]) < FOLD_AGREEMENT
    _assert_residuals(diagram)


def test_q2_fold_values_for_b_06():
    """For b = 0.6 the folds are at a = 0.102092 (x = 0.408447) and a = 0.089724
    (x = 0.787553), to the six digits quoted; the precise reference is derived here from
    b = 2x/(1+x^2)^2 with scipy brentq.

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix.
    """
    (a_low, x_low), (a_high, x_high) = _q2_folds(0.6)
    assert abs(a_high - 0.102092) < 5e-7 and abs(x_high - 0.408447) < 5e-7
    assert abs(a_low - 0.089724) < 5e-7 and abs(x_low - 0.787553) < 5e-7
    recovery, collapse = _in_range(_q2(0.6))
    assert abs(collapse.control - a_high) < FOLD_AGREEMENT
    assert abs(recovery.control - a_low) < FOLD_AGREEMENT


@pytest.mark.parametrize("b", [0.66, 0.8])
def test_q2_no_fold_above_the_cusp(b):
    """No fold for b > 3 sqrt(3)/8: b = 2x/(1+x^2)^2 has no root.

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix.
    """
    assert _q2_folds(b) == []
    diagram = _q2(b)
    assert diagram.folds == []
    assert diagram.window is None
    assert diagram.classification == "reversible"


@pytest.mark.parametrize(
    ("b", "verdict"), [(0.45, "irreversible"), (0.6, "hysteretic"), (0.7, "reversible")]
)
def test_q2_classification(b, verdict):
    """Irreversible when two stable states coexist at a = 0 (b = 0.45: the recovery fold is
    at a < 0), hysteretic when both folds lie at a > 0, reversible above the cusp. The
    premise is checked with numpy.roots and brentq.

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix.
    """
    folds = _q2_folds(b)
    if verdict == "irreversible":
        assert folds[0][0] < 0 < folds[1][0]
        assert len(_q2_roots(0.0, b)) == 3
    elif verdict == "hysteretic":
        assert 0 < folds[0][0] < folds[1][0] < 0.3
    else:
        assert folds == []
    assert _q2(b).classification == verdict
    _assert_residuals(_q2(b))


@pytest.mark.parametrize(
    ("fraction", "widest"),
    [
        (0.99, 1e-3),
        (0.995, 3e-4),
        (0.999, 3e-5),
        (0.99999, 3e-8),
    ],
)
def test_q2_narrow_window_near_the_cusp(fraction, widest):
    """Just below the cusp b = 3 sqrt(3)/8 the two folds are close; both are found and agree
    with the fold condition b = 2x/(1+x^2)^2 solved with scipy brentq.

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, appendix.
    """
    b = fraction * CUSP_B
    expected = _q2_folds(b)
    width = expected[1][0] - expected[0][0]
    assert 0 < width < widest  # the premise: a narrow window
    diagram = _q2(b)
    found = _in_range(diagram)
    assert len(found) == 2
    for fold, (a, _) in zip(found, expected, strict=True):
        assert abs(fold.control - a) < FOLD_AGREEMENT
    assert diagram.window is not None
    assert diagram.window.collapse - diagram.window.recovery > 0
    assert abs((diagram.window.collapse - diagram.window.recovery) - width) < FOLD_AGREEMENT
    _assert_residuals(diagram)


# --------------------------------------------------------------------------------------------
# More shapes: four folds, an isola, three variables


def test_four_folds():
    """x' = u - p(x), p = x^5 - 5x^3 + 4x: folds at u = p(x_c) for the real roots x_c of
    p'(x) = 5x^4 - 15x^2 + 4 (numpy.roots).

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1 (a fold is
    where f = 0 and df/dx = 0).
    """
    system = _system({"x": "u - (x**5 - 5*x**3 + 4*x)"}, {"u": 0.0}, "u")
    diagram = compute_diagram(system, (-5.0, 5.0), reference_state=np.array([1.0]))
    p = np.poly1d([1.0, 0.0, -5.0, 0.0, 4.0, 0.0])
    critical = np.roots(p.deriv().coeffs)
    critical = np.sort(critical[np.abs(critical.imag) < 1e-12].real)
    assert len(critical) == 4
    expected = sorted((p(x), x) for x in critical)
    found = _in_range(diagram)
    assert len(found) == 4
    for fold, (u, x) in zip(found, expected, strict=True):
        assert abs(fold.control - u) < FOLD_AGREEMENT
        assert abs(fold.state[0] - x) < 1e-7
    _assert_residuals(diagram)


def test_isola_is_found():
    """x' = -(x^2 + u^2 - 1)(x - 3): the unit circle is a curve of equilibria not connected
    to the line x = 3; both are found, the circle with folds at u = -1 and u = 1 (x = 0).

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1 (fold
    condition); the zero set is the circle and the line by inspection.
    """
    system = _system({"x": "-(x**2 + u**2 - 1)*(x - 3)"}, {"u": 0.0}, "u")
    diagram = compute_diagram(system, (-2.0, 2.0), reference_state=np.array([1.0]))
    on_line = [np.allclose(b.states[:, 0], 3.0, atol=1e-9) for b in diagram.branches]
    line = [b for b, flag in zip(diagram.branches, on_line, strict=True) if flag]
    circle = [b for b, flag in zip(diagram.branches, on_line, strict=True) if not flag]
    assert len(line) == 1
    assert line[0].controls.min() <= -2.0 and line[0].controls.max() >= 2.0
    assert circle, "the isolated circle of equilibria was not found"
    points = np.concatenate([np.column_stack([b.controls, b.states[:, 0]]) for b in circle])
    np.testing.assert_allclose(np.hypot(points[:, 0], points[:, 1]), 1.0, atol=1e-8)
    # the circle is traced all round: both poles and both folds are visited
    assert points[:, 0].min() < -0.999 and points[:, 0].max() > 0.999
    assert points[:, 1].min() < -0.999 and points[:, 1].max() > 0.999
    found = _in_range(diagram)
    assert len(found) == 2
    for fold, u in zip(found, (-1.0, 1.0), strict=True):
        assert abs(fold.control - u) < FOLD_AGREEMENT
        assert abs(fold.state[0]) < 1e-7
    _assert_residuals(diagram)
    # inside the circle's span: three equilibria, the lower half of the circle and x = 3 stable
    at_zero = sorted(diagram.equilibria_at(0.0), key=lambda e: e.state[0])
    np.testing.assert_allclose([e.state[0] for e in at_zero], [-1.0, 1.0, 3.0], atol=1e-9)
    assert [e.stable for e in at_zero] == [True, False, True]


def test_three_variables_fold():
    """x' = u + x^2, y' = -y + x, z' = -2z + y: equilibria y = x, z = x/2 with x = -+sqrt(-u);
    one fold at u = 0, state (0, 0, 0); stable where x < 0 (eigenvalues 2x, -1, -2).

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 3.1 (the fold of
    the first equation; the others are linear and stable).
    """
    system = _system({"x": "u + x**2", "y": "-y + x", "z": "-2*z + y"}, {"u": 0.0}, "u")
    diagram = compute_diagram(system, (-1.0, 1.0), reference_state=np.array([-1.0, -1.0, -0.5]))
    found = _in_range(diagram)
    assert len(found) == 1
    assert abs(found[0].control) < FOLD_AGREEMENT
    np.testing.assert_allclose(found[0].state, 0.0, atol=1e-8)
    _assert_residuals(diagram)
    for u in (-0.9, -0.4, -0.05):
        equilibria = diagram.equilibria_at(u)
        assert len(equilibria) == 2
        for e in equilibria:
            x = e.state[0]
            assert abs(abs(x) - np.sqrt(-u)) < 1e-9
            np.testing.assert_allclose(e.state, [x, x, x / 2], atol=1e-9)
            assert e.stable == (x < 0)
    for branch in diagram.branches:
        away = np.abs(branch.states[:, 0]) > 1e-3
        np.testing.assert_array_equal(branch.stable[away], branch.states[away, 0] < 0)


# --------------------------------------------------------------------------------------------
# Two-variable lake with sediment phosphorus

SEDIMENT = dict(s=0.7, h=0.15, b=0.001, r=0.019, m=2.4, q=8.0)
"""Carpenter 2005, PNAS 102:10002-10005, Table 1."""


def _sediment_reference_folds() -> list[tuple[float, float, float]]:
    """(L, X, M) at the folds of the reduced equation L(X) = h X + s b X / (b + r f(X)).

    Setting dM/dt = 0 gives M = s X / (b + r f); putting it in dX/dt = 0 gives L(X). Folds are
    where dL/dX = 0 (sympy derivative, scipy brentq).
    """
    X = sympy.Symbol("X")
    p = {k: sympy.nsimplify(v) for k, v in SEDIMENT.items()}
    f = X ** p["q"] / (p["m"] ** p["q"] + X ** p["q"])
    load = p["h"] * X + p["s"] * p["b"] * X / (p["b"] + p["r"] * f)
    load_f = sympy.lambdify(X, load)
    slope_f = sympy.lambdify(X, sympy.diff(load, X))
    mud_f = sympy.lambdify(X, p["s"] * X / (p["b"] + p["r"] * f))
    xs = _sign_change_roots(slope_f, np.linspace(0.01, 20.0, 4000))
    return sorted((float(load_f(x)), x, float(mud_f(x))) for x in xs)


def test_recycling_sediment_folds():
    """The two-variable continuation finds the folds of the reduced one-variable equation,
    L = 0.99759 (collapse) and L = 0.51950 (recovery), derived here with sympy and brentq.

    Reference: Carpenter 2005, Eutrophication of aquatic ecosystems: bistability and soil
    phosphorus, PNAS 102:10002-10005, model equations and Table 1 (parameters).
    """
    expected = _sediment_reference_folds()
    assert len(expected) == 2
    assert abs(expected[0][0] - 0.51950) < 5e-6 and abs(expected[1][0] - 0.99759) < 5e-6
    system = compile_model(BUILTIN_MODELS["recycling-sediment"], "L").bind({"L": 0.8, **SEDIMENT})
    diagram = compute_diagram(system, (0.0, 1.5), reference_state=np.array([2.5, 200.0]))
    found = _in_range(diagram)
    assert len(found) == 2
    for fold, (L, X, M) in zip(found, expected, strict=True):
        assert abs(fold.control - L) < FOLD_AGREEMENT
        assert abs(fold.state[0] - X) < 1e-7 * X
        assert abs(fold.state[1] - M) < 1e-7 * M
    assert [f.kind for f in found] == ["recovery", "collapse"]
    assert diagram.classification == "hysteretic"
    _assert_residuals(diagram)


# --------------------------------------------------------------------------------------------
# Dimensional recycling model

RECYCLING = dict(s=1.2, r=6.0, m=4.0, q=8.0)


def _recycling_rhs(P, L):
    s, r, m, q = RECYCLING["s"], RECYCLING["r"], RECYCLING["m"], RECYCLING["q"]
    return L - s * P + r * P**q / (m**q + P**q)


def _scan_roots(L: float, points: int) -> list[float]:
    """Roots of the recycling equation on 0 < P < 20 from sign changes on a grid (brentq)."""
    return _sign_change_roots(lambda P: _recycling_rhs(P, L), np.linspace(0.0, 20.0, points))


@cache
def _recycling() -> Diagram:
    system = compile_model(BUILTIN_MODELS["recycling"], "L").bind({"L": 2.6, **RECYCLING})
    return compute_diagram(system, (0.0, 5.0), reference_state=np.array([7.1]))


def _recycling_folds() -> list[tuple[float, float]]:
    """(L, P) where L(P) = s P - r P^q/(m^q + P^q) has dL/dP = 0 (brentq)."""
    s, r, m, q = RECYCLING["s"], RECYCLING["r"], RECYCLING["m"], RECYCLING["q"]
    slope = lambda P: s - r * q * m**q * P ** (q - 1) / (m**q + P**q) ** 2  # noqa: E731
    ps = _sign_change_roots(slope, np.linspace(0.01, 20.0, 2000))
    return sorted((s * P - r * P**q / (m**q + P**q), P) for P in ps)


@pytest.mark.parametrize("L", [0.3, 0.86, 1.5, 2.6, 3.05, 3.5, 4.9])
def test_recycling_equilibria_match_a_dense_scan(L):
    """Equilibria of L - s P + r P^q/(m^q + P^q) agree with sign changes on a dense P grid
    refined by scipy brentq.

    Model: Carpenter, Ludwig & Brock 1999, Management of eutrophication for lakes subject to
    potentially irreversible change, Ecological Applications 9:751-771, model equation.
    """
    expected = _scan_roots(L, 20001)
    found = np.sort([e.state[0] for e in _recycling().equilibria_at(L)])
    assert len(found) == len(expected)
    np.testing.assert_allclose(found, expected, rtol=0, atol=ROOT_AGREEMENT)


@pytest.mark.parametrize(
    ("which", "distance"),
    [
        ("collapse", 1e-3),
        ("recovery", 1e-3),
        ("collapse", 1e-7),
        ("recovery", 1e-5),
    ],
)
def test_recycling_continuation_finds_what_a_coarse_scan_misses(which, distance):
    """Near a fold the two equilibria that meet there lie within one cell of a coarse grid,
    so a sign-change scan misses them; the diagram has both. Their existence is checked with
    brentq on brackets around the fold, itself derived from dL/dP = 0 (brentq).

    Model: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771, model equation.
    """
    (L_recovery, P_recovery), (L_collapse, P_collapse) = _recycling_folds()
    diagram = _recycling()
    recovery, collapse = _in_range(diagram)
    assert abs(collapse.control - L_collapse) < FOLD_AGREEMENT
    assert abs(recovery.control - L_recovery) < FOLD_AGREEMENT
    _assert_residuals(diagram)
    # the pair meeting at the collapse fold exists below it, the recovery pair above it
    if which == "collapse":
        L, P_fold = L_collapse - distance, P_collapse
    else:
        L, P_fold = L_recovery + distance, P_recovery
    close = sorted(
        brentq(lambda P: _recycling_rhs(P, L), lo, hi, xtol=1e-15, rtol=1e-15)
        for lo, hi in ((P_fold - 0.3, P_fold), (P_fold, P_fold + 0.3))
    )
    assert close[1] - close[0] < 20.0 / 199  # closer than the coarse grid spacing
    coarse = _scan_roots(L, 200)
    assert not any(abs(P - c) < 1e-3 for P in coarse for c in close)  # the scan misses them
    found = [e.state[0] for e in diagram.equilibria_at(L)]
    for c in close:
        assert min(abs(P - c) for P in found) < ROOT_AGREEMENT
    assert len(found) == len(coarse) + 2


# --------------------------------------------------------------------------------------------
# Where the lake stands


@pytest.mark.parametrize("offset", [-0.2, -0.01, 0.01, 0.2])
def test_locate_separatrix_and_basins(offset):
    """In the bistable window of x' = a - b x + x^2/(1+x^2) (b = 0.6, a = 0.095) the basin
    boundary is the unstable middle root (numpy.roots of b x^3 - (a+1) x^2 + b x - a); a state
    above it settles on the upper stable root, a state below on the lower one.

    References: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 2.2 (flow on
    the line); model from Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771.
    """
    a, b = 0.095, 0.6
    low, middle, high = _q2_roots(a, b)
    diagram = _q2(b)
    standing = locate(diagram, np.array([middle + offset]), a)
    assert len(standing.separatrix) == 1
    assert abs(standing.separatrix[0] - middle) < ROOT_AGREEMENT
    assert standing.attractor is not None
    destination = high if offset > 0 else low
    assert abs(standing.attractor[0] - destination) < 1e-6
    assert standing.desired == (offset < 0)
    (a_recovery, _), (a_collapse, _) = _q2_folds(b)
    if standing.desired:
        assert abs(standing.to_collapse - (a_collapse - a)) < FOLD_AGREEMENT
        assert standing.to_recovery is None  # nothing to recover from
    else:  # already in the undesired regime: no collapse lies ahead of it
        assert abs(standing.to_recovery - (a - a_recovery)) < FOLD_AGREEMENT
        assert standing.to_collapse is None


# --------------------------------------------------------------------------------------------
# Thresholds: where a regime stops being a stable attractor along its branch

SEDIMENT_HOPF = dict(s=0.7, h=0.15, b=0.01, r=0.15, m=0.6, q=8.0)
"""Invented demo parameters (the Brellow Reservoir demo) for the Carpenter 2005 model, where the
turbid equilibrium loses stability at a Hopf point before its fold."""


def _sediment_hopf_reference() -> tuple[float, float, float]:
    """(L, X, M) where the Jacobian of the sediment model has trace 0 and a positive
    determinant on its equilibrium curve: a pair of eigenvalues crosses the imaginary axis.

    The equilibrium equations, trace and determinant are written and solved here with sympy
    (nsolve), independently of the continuation. References: Strogatz 2015, Nonlinear Dynamics
    and Chaos, 2nd ed., section 8.2 (in two dimensions eigenvalues are purely imaginary when
    tau = 0 and Delta > 0); model equations from Carpenter 2005, PNAS 102:10002-10005.
    """
    X, M, L = sympy.symbols("X M L")
    p = {k: sympy.nsimplify(v) for k, v in SEDIMENT_HOPF.items()}
    recycled = p["r"] * M * X ** p["q"] / (p["m"] ** p["q"] + X ** p["q"])
    f = L - (p["s"] + p["h"]) * X + recycled
    g = p["s"] * X - p["b"] * M - recycled
    jacobian = sympy.Matrix([f, g]).jacobian([X, M])
    solution = sympy.nsolve(
        [f, g, jacobian.trace()], [X, M, L], [0.72, 4.0, 0.146], tol=1e-25, prec=40
    )
    values = {X: solution[0], M: solution[1], L: solution[2]}
    assert float(jacobian.det().subs(values)) > 0  # a Hopf point, not a saddle
    return float(solution[2]), float(solution[0]), float(solution[1])


def test_hopf_before_the_fold_is_the_recovery_threshold():
    """The turbid equilibrium of the sediment model (demo parameters) stops being stable at a
    Hopf point above its fold: the recovery threshold is the Hopf point, of kind "hopf", and
    held between the fold and the Hopf point the lake leaves the turbid state (checked with
    scipy's LSODA from the turbid equilibrium just above the Hopf point).

    References: the Hopf point from the trace and determinant (sympy), Strogatz 2015, section
    8.2; Carpenter 2005, PNAS 102:10002-10005 (model).
    """
    L_hopf, X_hopf, M_hopf = _sediment_hopf_reference()
    system = compile_model(BUILTIN_MODELS["recycling-sediment"], "L").bind(
        {"L": 0.2, **SEDIMENT_HOPF}
    )
    diagram = compute_diagram(
        system, (0.0, 0.375), reference_state=np.array([1.0, 7.5]), current_control=0.2
    )
    fold = [f for f in diagram.folds if f.kind == "recovery"][0]
    assert fold.control < L_hopf  # the Hopf point comes first as the load falls
    assert diagram.recovery.kind == "hopf"
    assert abs(diagram.recovery_threshold - L_hopf) < 1e-8
    np.testing.assert_allclose(diagram.recovery.state, [X_hopf, M_hopf], rtol=1e-6)
    assert diagram.window.recovery == diagram.recovery_threshold
    # between the fold and the Hopf point the turbid state is no attractor: the lake leaves it
    held = 0.5 * (fold.control + L_hopf)
    turbid = [e for e in diagram.equilibria_at(L_hopf + 0.0025) if e.stable]
    start = max(turbid, key=lambda e: e.state[0]).state

    def rhs(t, y):
        return system.rhs(y, held)

    run = solve_ivp(rhs, (0.0, 20000.0), start, method="LSODA", rtol=1e-9, atol=1e-9)
    clear = min((e for e in diagram.equilibria_at(held) if e.stable), key=lambda e: e.state[0])
    np.testing.assert_allclose(run.y[:, -1], clear.state, rtol=1e-4)


def test_recovery_threshold_below_the_lowest_load_is_not_reachable():
    """Recycling model x' = L - s P + r P^8 / (m^8 + P^8) with s = 0.5, r = 2, m = 2: the recovery
    fold lies at a negative load (the minimum of L(P) = s P - r f(P) over the upper part of the
    curve, found here with scipy brentq on dL/dP = 0). The diagram reports it as a fold outside
    the range, the recovery threshold has no value, says why, and the lake's standing has no
    "must fall by".

    Reference: Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771 (model);
    Strogatz 2015, section 3.1 (a fold is where f = 0 and df/dP = 0).
    """
    s_, r_, m_ = 0.5, 2.0, 2.0

    def load(P):
        return s_ * P - r_ * P**8 / (m_**8 + P**8)

    def slope(P):
        return s_ - r_ * 8 * m_**8 * P**7 / (m_**8 + P**8) ** 2

    grid = np.linspace(0.5, 6.0, 400)
    roots = _sign_change_roots(slope, grid)
    recovery_fold = min(load(P) for P in roots)
    assert recovery_fold < 0
    system = _system(
        {"P": "L - s*P + r*P**8/(m**8 + P**8)"}, {"L": 1.0, "s": s_, "r": r_, "m": m_}, "L"
    )
    diagram = compute_diagram(
        system, (0.0, 1.0), reference_state=np.array([4.0]), current_control=0.4
    )
    fold = [f for f in diagram.folds if f.kind == "recovery"][0]
    assert abs(fold.control - recovery_fold) < FOLD_AGREEMENT
    assert not fold.in_range
    assert diagram.classification == "irreversible"
    assert diagram.recovery is not None and not diagram.recovery.reachable
    assert diagram.recovery_threshold is None
    assert "lowest achievable" in diagram.recovery.reason
    standing = locate(diagram, np.array([4.0]), 0.4)
    assert standing.desired is False
    assert standing.to_recovery is None and standing.to_collapse is None


def test_three_stable_states_thresholds_follow_the_lake_branch():
    """x' = u - p(x), p = x^5 - 5x^3 + 4x: stable where p'(x) > 0, so at u = 0 three stable
    states coexist (x < x1, x2 < x < x3, x > x4 with x1..x4 the roots of p', numpy.roots). At
    the same control the thresholds depend on the branch the lake is on: on the lowest branch
    (desired) the collapse threshold is p(x1); on the middle one the recovery threshold is
    p(x2); on the top one it is p(x4).

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 2.2 (stability
    on the line from the sign of f') and 3.1 (folds at f = f' = 0).
    """
    p = np.poly1d([1.0, 0.0, -5.0, 0.0, 4.0, 0.0])
    x1, x2, _, x4 = np.sort(np.roots(p.deriv().coeffs).real)
    system = _system({"x": "u - (x**5 - 5*x**3 + 4*x)"}, {"u": 0.0}, "u")
    expected = {-2.0: ("collapse", p(x1)), 0.0: ("recovery", p(x2)), 2.0: ("recovery", p(x4))}
    for start, (which, value) in expected.items():
        diagram = compute_diagram(
            system, (-5.0, 5.0), reference_state=np.array([start]), current_control=0.0
        )
        assert diagram.most_stable_states == 3
        threshold = diagram.collapse if which == "collapse" else diagram.recovery
        assert abs(threshold.value - value) < FOLD_AGREEMENT, (start, threshold)
    # the same lowest branch at other loads keeps its own collapse threshold, p(x1)
    for u in (-2.0, 2.0):
        roots = np.roots([1.0, 0.0, -5.0, 0.0, 4.0, -u])
        lowest = np.min(roots[np.abs(roots.imag) < 1e-9].real)
        diagram = compute_diagram(
            system, (-5.0, 5.0), reference_state=np.array([lowest]), current_control=u
        )
        assert abs(diagram.collapse.value - p(x1)) < FOLD_AGREEMENT, u
