"""A model that runs away (a finite-time blow-up, an overflow, a pole) is a "diverged" outcome
with its time in every command, never a traceback."""

from __future__ import annotations

import contextlib
import io
import json
import math
import tomllib
from pathlib import Path

import pytest
import tomli_w

from planner.cli import main

ALDER = Path(__file__).resolve().parent.parent / "scenarios" / "alder-mere.toml"
LOAD, START, LIMIT = 0.26, 0.71, 1e6


def _scenario(tmp_path, equations: dict, parameters: dict, **model) -> Path:
    """The Alder Mere demo with another model, one schedule holding the load, no priors."""
    data = tomllib.loads(ALDER.read_text(encoding="utf-8"))
    data.pop("uncertainty", None)
    if equations:
        data["model"] = {"kind": "formula", "equations": equations, "parameters": parameters}
    else:
        data["model"]["parameters"].update(parameters)
    data["model"].update(model)
    data["schedules"] = [{"name": "Hold", "kind": "path", "points": [[0.0, LOAD]]}]
    data["simulation"]["state_limit"] = LIMIT
    path = tmp_path / "runaway.toml"
    path.write_text(tomli_w.dumps(data), encoding="utf-8")
    return path


def _run(*argv) -> tuple[int, str, str]:
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main([str(a) for a in argv])
    return code, out.getvalue(), err.getvalue()


def test_a_finite_time_blow_up_is_dated_to_its_closed_form(tmp_path):
    """P' = L + P^2 from P0 = 0.71 at L = 0.26 is P = sqrt(L) tan(sqrt(L) t + arctan(P0/sqrt(L))):
    it passes the state limit 1e6 at t = (arctan(1e6/sqrt(L)) - arctan(P0/sqrt(L)))/sqrt(L).
    `compare` says diverged at that time (to 1e-6 years), not at the next output.

    Reference: Strogatz 2015, Nonlinear Dynamics and Chaos, 2nd ed., section 2.5 (blow-up of
    x' = 1 + x^2, whose solution is tan t).
    """
    path = _scenario(tmp_path, {"P": "L + P**2"}, {"L": LOAD})
    code, out, err = _run("compare", path, "--json")
    assert code == 0, err
    outcome = json.loads(out)["schedules"][0]
    root = math.sqrt(LOAD)
    expected = (math.atan(LIMIT / root) - math.atan(START / root)) / root
    assert outcome["verdict"] == "diverged" and outcome["recovered"] is False
    assert outcome["diverged_at"] == pytest.approx(expected, abs=1e-6)


@pytest.mark.parametrize(
    "equations, parameters",
    [
        ({"P": "L + P**2"}, {"L": LOAD}),  # blow-up
        ({}, {"q": 200.0}),  # P^200 overflows far out on the curve
        ({}, {"r": 1e300}),  # a huge rate
        ({"P": "L - s*P + 0.01/(P - 0.5)"}, {"L": LOAD, "s": 1.2}),  # a pole
        # a parameter tower no float holds (sympy would evaluate it exactly when specialising)
        ({"P": "L - s*P - b**(b**b)*P"}, {"L": LOAD, "s": 1.2, "b": 1e300}),
    ],
)
@pytest.mark.parametrize("command", ["diagram", "compare", "sweep", "frontier", "ensemble"])
def test_runaway_models_never_end_in_a_traceback(tmp_path, equations, parameters, command):
    path = _scenario(tmp_path, equations, parameters)
    extra = ["--members", "50"] if command == "ensemble" else []
    code, out, err = _run(command, path, *extra)
    assert code in (0, 2), err
    assert "Traceback" not in err and "internal error" not in err
    if code == 2:  # a refusal names the file and a field
        assert str(path) in err


def test_an_overflowing_parameter_is_a_divergence_not_a_failure(tmp_path):
    """b**(b**b) with b = 1e300 is no float: the right-hand side is -inf at the start, and the
    run is reported as diverged (the state leaves every range at once)."""
    path = _scenario(tmp_path, {"P": "L - s*P - b**(b**b)*P"}, {"L": LOAD, "s": 1.2, "b": 1e300})
    code, out, err = _run("compare", path, "--json")
    assert code == 0, err
    assert json.loads(out)["schedules"][0]["verdict"] == "diverged"


def test_the_sweep_reports_where_the_state_ran_away(tmp_path):
    """P' = L + P^2 has no equilibrium for L > 0: settling at the first load runs away, and
    the sweep says so with that load (Strogatz 2015, section 2.5)."""
    path = _scenario(tmp_path, {"P": "L + P**2"}, {"L": LOAD})
    code, out, err = _run("sweep", path, "--json")
    assert code == 0, err
    data = json.loads(out)
    low = tomllib.loads(path.read_text(encoding="utf-8"))["control"]["range"][0]
    assert data["diverged_at"] == low  # the first load of the sweep
    assert "Diverged" in _run("sweep", path)[1]


def test_ensemble_counts_runaway_members_as_diverged(tmp_path):
    path = _scenario(tmp_path, {"P": "L + P**2"}, {"L": LOAD})
    code, out, err = _run("ensemble", path, "--members", "20", "--json")
    assert code == 0, err
    schedule = json.loads(out)["schedules"][0]
    assert schedule["diverged_members"] == 20 and schedule["p_recovered"] == 0.0
    assert "RuntimeWarning" not in err
