"""Tests for the steady-state mass-balance loading models: "retention" (Vollenweider-type) and
"internal-load" (internal loading from sediment release, Nuernberg-type).

Every lake and parameter value here is invented. Reference values come from closed forms, from
scipy brentq on a right-hand side written out in this file, or from sympy; the source of each
formula is named in the docstring.
"""

from __future__ import annotations

import contextlib
import io
import json
from functools import cache

import numpy as np
import pytest
import sympy
from scipy.optimize import brentq

from planner.cli import main
from planner.equilibria import Diagram, compute_diagram
from planner.integrate import Problem, Save, Status, Tolerance, held, integrate, settle
from planner.models import BUILTIN_MODELS, compile_model

STEADY_AGREEMENT = 1e-10
"""Agreement between an equilibrium from the continuation and its closed form or brentq root."""
PATH_AGREEMENT = 1e-8
"""Agreement between an integrated run and the exact exponential solution."""
FOLD_AGREEMENT = 1e-8
"""Agreement between a fold from the continuation and the sympy fold condition."""

# Invented lakes: (external areal load L in g P / m2 / yr, flushing rate rho and net
# sedimentation rate sigma, both per year).
RETENTION_LAKES = [
    (0.6, 1.0, 1.0),
    (2.5, 0.2, 0.45),
    (0.05, 12.0, 0.8),
    (1.3, 0.0, 0.35),  # a closed basin: no outflow
]

# Invented lakes given as the trade gives them: (areal load L in g P / m2 / yr, mean depth z
# in m, water residence time tau_w in years).
VOLLENWEIDER_LAKES = [
    (0.4, 3.0, 0.5),
    (1.2, 12.0, 2.0),
    (0.08, 25.0, 6.0),
    (3.0, 2.0, 0.1),
]

# An invented stratified lake with internal loading: residence time 1 yr (rho = 1, sigma =
# 1/sqrt(1)), release rate 10 mg P / m2 / day over an anoxic factor of up to 80 days a year.
INTERNAL = dict(rho=1.0, sigma=1.0, RR=10.0, AF=80.0, m=0.4, q=8.0)
INTERNAL_RANGE = (0.0, 1.0)


def _retention_system(L: float, rho: float, sigma: float):
    model = compile_model(BUILTIN_MODELS["retention"], "L")
    return model.bind({"L": L, "rho": rho, "sigma": sigma})


def _internal_rhs(P: float, L: float) -> float:
    """dP/dt of the internal-load model written out by hand (independent of the planner)."""
    p = INTERNAL
    internal = p["RR"] * p["AF"] / 1000.0 * P ** p["q"] / (p["m"] ** p["q"] + P ** p["q"])
    return L + internal - (p["rho"] + p["sigma"]) * P


@cache
def _internal_diagram() -> Diagram:
    system = compile_model(BUILTIN_MODELS["internal-load"], "L").bind({"L": 0.6, **INTERNAL})
    return compute_diagram(system, INTERNAL_RANGE, reference_state=np.array([0.7]))


@cache
def _sympy_folds() -> list[tuple[float, float]]:
    """(L, P) at the folds: f(P, L) = 0 and df/dP = 0 for f = L + A P^q/(m^q + P^q) - k P with
    A = RR AF / 1000 and k = rho + sigma. df/dP = 0 does not involve L; cleared of its
    denominator it is the polynomial A q m^q P^(q-1) - k (m^q + P^q)^2, whose positive real
    roots sympy finds; L then follows from f = 0."""
    P = sympy.Symbol("P", positive=True)
    p = {name: sympy.nsimplify(value) for name, value in INTERNAL.items()}
    A, k, m, q = p["RR"] * p["AF"] / 1000, p["rho"] + p["sigma"], p["m"], p["q"]
    f_without_L = A * P**q / (m**q + P**q) - k * P
    numerator, _ = sympy.fraction(sympy.together(sympy.diff(f_without_L, P)))
    roots = sympy.Poly(sympy.expand(numerator), P).nroots(n=30)
    folds = []
    for root in roots:
        if abs(sympy.im(root)) < 1e-20 and sympy.re(root) > 0:
            P_fold = sympy.re(root)
            folds.append((float(-f_without_L.subs(P, P_fold)), float(P_fold)))
    return sorted(folds)


# --------------------------------------------------------------------------------------------
# retention


@pytest.mark.parametrize(("L", "rho", "sigma"), RETENTION_LAKES)
def test_retention_steady_state_is_the_closed_form(L, rho, sigma):
    """dP/dt = L - (rho + sigma) P has the single equilibrium P* = L / (rho + sigma), stable
    (Vollenweider 1976, Advances in defining critical loading levels for phosphorus in lake
    eutrophication, Mem. Ist. Ital. Idrobiol. 33:53-83, the mass-balance model). Found here by
    the planner's continuation, at the lake's load and at two other loads of the range."""
    system = _retention_system(L, rho, sigma)
    diagram = compute_diagram(system, (0.0, 2.0 * L), reference_state=np.array([L]))
    assert diagram.classification == "reversible"
    assert not [f for f in diagram.folds if f.in_range]
    for load in (0.3 * L, L, 1.7 * L):
        (equilibrium,) = diagram.equilibria_at(load)
        expected = load / (rho + sigma)
        assert abs(equilibrium.state[0] - expected) < STEADY_AGREEMENT * max(1.0, expected)
        assert equilibrium.stable
        np.testing.assert_allclose(equilibrium.eigenvalues.real, [-(rho + sigma)], rtol=1e-12)


@pytest.mark.parametrize(("L", "z", "tau_w"), VOLLENWEIDER_LAKES)
def test_retention_with_vollenweider_sedimentation_gives_his_loading_relation(L, z, tau_w):
    """With rho = 1/tau_w and sigma = 1/sqrt(tau_w) the steady concentration P*/z is
    Vollenweider's C = (L / q_s) / (1 + sqrt(tau_w)), q_s = z / tau_w (Vollenweider 1976,
    Mem. Ist. Ital. Idrobiol. 33:53-83; the same form underlies OECD 1982, Eutrophication of
    waters: monitoring, assessment and control, the loading relationships; exact form from
    memory). Checked against the equilibrium the planner's engine settles to."""
    rho, sigma = 1.0 / tau_w, 1.0 / np.sqrt(tau_w)
    run = settle(_retention_system(L, rho, sigma), np.array([0.0]), L)
    assert run.status is Status.SETTLED
    diagram = compute_diagram(
        _retention_system(L, rho, sigma), (0.0, 2.0 * L), reference_state=np.array([L])
    )
    (equilibrium,) = diagram.equilibria_at(L)
    q_s = z / tau_w
    expected = (L / q_s) / (1.0 + np.sqrt(tau_w))
    assert abs(equilibrium.state[0] / z - expected) < STEADY_AGREEMENT * max(1.0, expected)
    # settling stops once the state barely moves: close, not exact
    assert abs(run.final_state[0, 0] / z - expected) < 1e-6 * max(1.0, expected)


@pytest.mark.parametrize(("L", "rho", "sigma"), RETENTION_LAKES)
@pytest.mark.parametrize("start", [0.0, 3.0])
def test_retention_approach_is_the_exact_exponential(L, rho, sigma, start):
    """Under a held load, P(t) = P* + (P0 - P*) exp(-(rho + sigma) t), P* = L/(rho + sigma)
    (first-order linear equation, integrating factor; e.g. Boyce & DiPrima, Elementary
    Differential Equations, section 2.1). The planner's engine, sampled at exact cut times."""
    times = (0.25, 1.0, 3.0, 10.0)
    run = integrate(
        Problem(_retention_system(L, rho, sigma), np.array([start]), held(L), times[-1]),
        save=Save(at=times),
        tolerance=Tolerance(1e-11, 1e-13),
    )
    assert run.status is Status.FINISHED
    steady = L / (rho + sigma)
    exact = steady + (start - steady) * np.exp(-(rho + sigma) * np.array(times))
    np.testing.assert_allclose(run.samples[:, 0, 0], exact, rtol=0, atol=PATH_AGREEMENT)


# --------------------------------------------------------------------------------------------
# internal loading


@pytest.mark.parametrize("L", [0.05, 0.2, 0.32, 0.42, 0.52, 0.6, 0.9])
def test_internal_load_equilibria_match_brentq(L):
    """Every equilibrium of L + RR AF/1000 P^q/(m^q + P^q) - (rho + sigma) P agrees with scipy
    brentq on the sign changes of the right-hand side (written out here) over a dense P grid.

    Model: internal load RR AF after Nuernberg 1984, The prediction of internal phosphorus load
    in lakes with anoxic hypolimnia, Limnology and Oceanography 29:111-124; the switch of AF
    with P is this project's simplification.
    """
    grid = np.linspace(0.0, 5.0, 50001)
    values = np.array([_internal_rhs(P, L) for P in grid])
    expected = [
        brentq(_internal_rhs, grid[i], grid[i + 1], args=(L,), xtol=1e-15, rtol=1e-15)
        for i in np.nonzero(np.sign(values[:-1]) * np.sign(values[1:]) < 0)[0]
    ]
    assert len(expected) in (1, 3)
    found = np.sort([e.state[0] for e in _internal_diagram().equilibria_at(L)])
    assert len(found) == len(expected)
    np.testing.assert_allclose(found, expected, rtol=0, atol=STEADY_AGREEMENT)


def test_internal_load_folds_match_the_sympy_fold_condition():
    """The invented lake is bistable: the continuation's two folds are the solutions of f = 0,
    df/dP = 0 found with sympy (see _sympy_folds); the lower-load fold is the recovery one.

    Model: Nuernberg 1984, Limnology and Oceanography 29:111-124 (internal load RR AF); the
    switch of AF with P is this project's simplification.
    """
    expected = _sympy_folds()
    assert len(expected) == 2
    diagram = _internal_diagram()
    folds = sorted((f for f in diagram.folds if f.in_range), key=lambda f: f.control)
    assert [f.kind for f in folds] == ["recovery", "collapse"]
    for fold, (L, P) in zip(folds, expected, strict=True):
        assert abs(fold.control - L) < FOLD_AGREEMENT
        assert abs(fold.state[0] - P) < 1e-7
    assert diagram.classification == "hysteretic"
    assert abs(diagram.recovery_threshold - expected[0][0]) < FOLD_AGREEMENT
    assert abs(diagram.collapse_threshold - expected[1][0]) < FOLD_AGREEMENT


def test_internal_load_without_release_is_the_retention_model():
    """With no sediment release (RR = 0) the internal-load model reduces to the mass balance
    with retention: one equilibrium, L / (rho + sigma) (Vollenweider 1976, Mem. Ist. Ital.
    Idrobiol. 33:53-83)."""
    L = 0.6
    parameters = {**INTERNAL, "RR": 0.0, "L": L}
    system = compile_model(BUILTIN_MODELS["internal-load"], "L").bind(parameters)
    diagram = compute_diagram(system, INTERNAL_RANGE, reference_state=np.array([0.7]))
    (equilibrium,) = diagram.equilibria_at(L)
    expected = L / (INTERNAL["rho"] + INTERNAL["sigma"])
    assert abs(equilibrium.state[0] - expected) < STEADY_AGREEMENT


# --------------------------------------------------------------------------------------------
# scenario files with each kind

SCENARIO = """
# Invented lake and invented numbers.
name = "Invented stratified lake ({kind})"

[model]
kind = "{kind}"
[model.parameters]
{parameters}

[control]
parameter = "L"
unit = "g P / m2 / yr"
range = [0.0, 1.0]
lowest_achievable = 0.15

[state]
P = 0.7

[state_units]
P = "g P / m2"

[lake]
area = "3.0 km2"
mean_depth = "5.0 m"
residence_time = "1.0 yr"

[target]
variable = "P"
regime = "lowest"
threshold = 0.35

[simulation]
horizon = 30.0

[[schedules]]
name = "Cut to 0.25 and hold"
kind = "path"
points = [[0.0, 0.6], [4.0, 0.25]]
"""

KIND_PARAMETERS = {
    "retention": {"L": 0.6, "rho": 1.0, "sigma": 1.0},
    "internal-load": {"L": 0.6, **INTERNAL},
}


def _scenario_file(tmp_path, kind: str):
    parameters = "\n".join(f"{name} = {value!r}" for name, value in KIND_PARAMETERS[kind].items())
    path = tmp_path / f"{kind}.toml"
    path.write_text(SCENARIO.format(kind=kind, parameters=parameters), encoding="utf-8")
    return path


def _run(argv: list[str]) -> tuple[int, str, str]:
    """Exit code, standard output and standard error of the `planner` command."""
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(argv)
    return code, out.getvalue(), err.getvalue()


@pytest.mark.parametrize("kind", sorted(KIND_PARAMETERS))
def test_scenario_with_each_kind_passes_check_and_diagram(tmp_path, kind):
    """`planner check` accepts a file of each kind and `planner diagram` classifies it: the
    retention lake has one equilibrium at every load, the invented internal-load lake the two
    folds of the sympy fold condition (Nuernberg 1984, Limnology and Oceanography
    29:111-124, internal load RR AF; the switch of AF with P is this project's simplification).
    """
    path = _scenario_file(tmp_path, kind)
    code, out, err = _run(["check", str(path)])
    assert code == 0, err
    assert out.startswith(f"{path}: valid")
    code, out, err = _run(["diagram", str(path), "--json"])
    assert code == 0, err
    data = json.loads(out)
    folds = [fold for fold in data["folds"] if fold["in_range"]]
    if kind == "retention":
        assert data["classification"] == "reversible"
        assert folds == []
    else:
        assert data["classification"] == "hysteretic"
        for fold, (L, _) in zip(folds, _sympy_folds(), strict=True):
            assert abs(fold["control"] - L) < FOLD_AGREEMENT


def test_negative_sedimentation_is_refused(tmp_path):
    """A net sedimentation rate must be positive: every lake retains some phosphorus (common
    practice, no source). The file names the field."""
    bad = {"L": 0.6, "rho": 1.0, "sigma": -0.2}
    parameters = "\n".join(f"{name} = {value!r}" for name, value in bad.items())
    path = tmp_path / "bad.toml"
    path.write_text(SCENARIO.format(kind="retention", parameters=parameters), encoding="utf-8")
    code, out, err = _run(["check", str(path)])
    assert code == 2
    assert "model.parameters.sigma" in out + err
