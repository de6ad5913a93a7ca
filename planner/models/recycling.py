"""One-variable lake phosphorus with internal recycling.

dP/dt = L - s P + r P^q / (m^q + P^q)   (Carpenter, Ludwig & Brock 1999, Ecological
Applications 9:751-771): L external load, s loss rate (sedimentation, outflow), r maximum
recycling rate, m the P level at half the maximum recycling, q the steepness of recycling.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from planner.models.info import ModelInfo, ParameterInfo

if TYPE_CHECKING:
    import sympy

INFO = ModelInfo(
    kind="recycling",
    variables=("P",),
    variable_meanings=("lake phosphorus",),
    parameters=(
        ParameterInfo("L", "external P load", lower=0.0),
        ParameterInfo("s", "loss rate of lake P (per year)", lower=0.0, strict=True),
        ParameterInfo("r", "maximum recycling rate", lower=0.0),
        ParameterInfo("m", "P level at half the maximum recycling", lower=0.0, strict=True),
        ParameterInfo("q", "steepness of recycling", lower=1.0),
    ),
    nonnegative_state=True,
    source="Carpenter, Ludwig & Brock 1999, Ecological Applications 9:751-771",
)


def equations() -> tuple[sympy.Expr, ...]:
    """dP/dt as a sympy expression (sympy is imported here, when a model is compiled)."""
    import sympy

    P, L, s, r, m, q = sympy.symbols("P L s r m q")
    return (L - s * P + r * P**q / (m**q + P**q),)
