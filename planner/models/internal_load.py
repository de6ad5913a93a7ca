"""Lake phosphorus mass balance with internal loading from sediment release under anoxia.

dP/dt = L + RR AF / 1000 * P^q / (m^q + P^q) - (rho + sigma) P

P is lake total phosphorus as an areal store (g P / m2), L the external areal load
(g P / m2 / yr), rho the flushing rate (per year), sigma the net sedimentation rate (per year).
The internal load is Nuernberg's release rate times anoxic factor, L_int = RR AF (Nuernberg
1984, Limnology and Oceanography 29:111-124): RR the sediment release rate (mg P / m2 / day),
AF the anoxic factor (days per year during which an area equal to the lake's is anoxic); the
1/1000 turns mg into g.

That the anoxic factor rises with the lake's phosphorus, as AF P^q / (m^q + P^q) with AF its
value in a eutrophic lake, m the lake P at half of it and q the steepness, is this project's
simplification: it lets internal loading switch on with the trophic state, so that the lake can
hold two stable states for one external load.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from planner.models.info import ModelInfo, ParameterInfo
from planner.models.retention import MASS_BALANCE_PARAMETERS

if TYPE_CHECKING:
    import sympy

MG_PER_G = 1000
"""Release rates are quoted in mg P / m2 / day; loads here are in g P / m2 / yr."""

INFO = ModelInfo(
    kind="internal-load",
    variables=("P",),
    variable_meanings=("lake phosphorus (areal store)",),
    parameters=(
        *MASS_BALANCE_PARAMETERS,
        ParameterInfo("RR", "sediment P release rate under anoxia (mg P / m2 / day)", lower=0.0),
        ParameterInfo("AF", "anoxic factor of the eutrophic lake (days per year)", lower=0.0),
        ParameterInfo("m", "lake P at half the anoxic factor (g P / m2)", lower=0.0, strict=True),
        ParameterInfo("q", "steepness of the onset of anoxia", lower=1.0),
    ),
    nonnegative_state=True,
    source="Nuernberg 1984, Limnology and Oceanography 29:111-124",
)


def equations() -> tuple[sympy.Expr, ...]:
    """dP/dt as a sympy expression (sympy is imported here, when a model is compiled)."""
    import sympy

    P, L, rho, sigma, RR, AF, m, q = sympy.symbols("P L rho sigma RR AF m q")
    internal = RR * AF / MG_PER_G * P**q / (m**q + P**q)
    return (L + internal - (rho + sigma) * P,)
