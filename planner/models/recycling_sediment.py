"""Lake water phosphorus X and sediment ("mud") phosphorus M.

dX/dt = L - (s + h) X + r M f(X)
dM/dt = s X - b M - r M f(X),       f(X) = X^q / (m^q + X^q)

(Carpenter 2005, PNAS 102:10002-10005): s sedimentation, h outflow, b permanent burial,
r recycling from the sediment, m and q the shape of recycling. The sediment pool turns over in
centuries while water P turns over in about a year: a stiff slow-fast system.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from planner.models.info import ModelInfo, ParameterInfo

if TYPE_CHECKING:
    import sympy

INFO = ModelInfo(
    kind="recycling-sediment",
    variables=("X", "M"),
    variable_meanings=("water phosphorus", "sediment phosphorus"),
    parameters=(
        ParameterInfo("L", "external P load", lower=0.0),
        ParameterInfo("s", "sedimentation rate (per year)", lower=0.0, strict=True),
        ParameterInfo("h", "outflow rate (per year)", lower=0.0),
        ParameterInfo("b", "burial rate of sediment P (per year)", lower=0.0, strict=True),
        ParameterInfo("r", "recycling rate from sediment (per year)", lower=0.0),
        ParameterInfo("m", "water P at half the maximum recycling", lower=0.0, strict=True),
        ParameterInfo("q", "steepness of recycling", lower=1.0),
    ),
    nonnegative_state=True,
    source="Carpenter 2005, PNAS 102:10002-10005",
)


def equations() -> tuple[sympy.Expr, ...]:
    """dX/dt and dM/dt as sympy expressions (sympy is imported here, when a model is compiled)."""
    import sympy

    X, M, L, s, h, b, r, m, q = sympy.symbols("X M L s h b r m q")
    recycled = r * M * X**q / (m**q + X**q)
    return (L - (s + h) * X + recycled, s * X - b * M - recycled)
