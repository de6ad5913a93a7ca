"""Steady-state mass balance of lake phosphorus with retention (one well-mixed box).

dP/dt = L - (rho + sigma) P

P is lake total phosphorus as an areal store (g P / m2; divide by the mean depth z for a
concentration), L the external areal load (g P / m2 / yr), rho the flushing rate (1 / the
water residence time tau_w, per year) and sigma the net sedimentation rate (per year). The
steady state is P* = L / (rho + sigma), a concentration C* = L / (z (rho + sigma)).

With sigma = 1 / sqrt(tau_w) this is Vollenweider's loading relation
C* = (L / q_s) / (1 + sqrt(tau_w)), q_s = z / tau_w the areal hydraulic load (Vollenweider 1976,
Mem. Ist. Ital. Idrobiol. 33:53-83; the form behind the OECD 1982 loading relationships).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from planner.models.info import ModelInfo, ParameterInfo

if TYPE_CHECKING:
    import sympy

MASS_BALANCE_PARAMETERS = (
    ParameterInfo("L", "external P load (g P / m2 / yr)", lower=0.0),
    ParameterInfo("rho", "flushing rate, 1 / water residence time (per year)", lower=0.0),
    ParameterInfo("sigma", "net sedimentation rate of lake P (per year)", lower=0.0, strict=True),
)
"""External load, flushing and net sedimentation: the parameters of every mass-balance kind."""

INFO = ModelInfo(
    kind="retention",
    variables=("P",),
    variable_meanings=("lake phosphorus (areal store)",),
    parameters=MASS_BALANCE_PARAMETERS,
    nonnegative_state=True,
    source="Vollenweider 1976, Mem. Ist. Ital. Idrobiol. 33:53-83; OECD 1982",
)


def equations() -> tuple[sympy.Expr, ...]:
    """dP/dt as a sympy expression (sympy is imported here, when a model is compiled)."""
    import sympy

    P, L, rho, sigma = sympy.symbols("P L rho sigma")
    return (L - (rho + sigma) * P,)
