"""Trophic state from lake total phosphorus, in the trade's terms.

- OECD (1982) fixed boundaries on the annual mean TP: oligotrophic up to 10 ug/L, mesotrophic
  10-35, eutrophic 35-100, hypertrophic from 100 (Vollenweider & Kerekes 1982, Eutrophication of
  waters: monitoring, assessment and control, OECD, Paris).
- Carlson's trophic state index (Carlson 1977, A trophic state index for lakes, Limnology and
  Oceanography 22:361-369): TSI(TP) = 14.42 ln(TP) + 4.15 and TSI(Chl) = 9.81 ln(Chl) + 30.6,
  TP and chlorophyll-a in ug/L; TSI(SD) = 60 - 14.41 ln(SD), Secchi depth in m.
- Expected summer chlorophyll-a from TP: log10 Chl = 1.449 log10 TP - 1.136, both in ug/L
  (Dillon & Rigler 1974, The phosphorus-chlorophyll relationship in lakes, Limnology and
  Oceanography 19:767-773; coefficients from memory). An expectation across lakes: one lake may
  differ several-fold (light, nitrogen, grazing). Above about 100 ug/L TP chlorophyll rises
  more slowly than this straight line (the relation across lakes is sigmoid: McCauley, Downing
  & Watson 1989, Canadian Journal of Fisheries and Aquatic Sciences 46:1171-1175; Brown et al.
  2000, same journal 57:1574-1583, a lessening of slope above 100 ug/L), so there the line's
  value is flagged as an extrapolation that overstates chlorophyll.

Every function takes concentrations in ug/L (= mg/m3) and works on floats or numpy arrays.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass
from typing import Any

import numpy as np

from planner.units import significant

OECD_CLASSES = ("oligotrophic", "mesotrophic", "eutrophic", "hypertrophic")
OECD_UPPER_TP = (10.0, 35.0, 100.0)  # ug/L: the upper boundary of each class but the last
CARLSON_TP = (14.42, 4.15)
CARLSON_CHL = (9.81, 30.6)
CARLSON_SECCHI = (60.0, 14.41)
DILLON_RIGLER = (1.449, -1.136)
CHLOROPHYLL_LINE_UPPER_TP = 100.0
"""ug/L of TP above which the log-log chlorophyll line overstates chlorophyll (see above)."""


def oecd_class(tp_ug_l: float) -> str:
    """The OECD (1982) trophic class of an annual mean TP (ug/L); a boundary value belongs to
    the lower class (10 ug/L is oligotrophic), as "up to 10" reads."""
    if not np.isfinite(tp_ug_l) or tp_ug_l < 0:
        raise ValueError(f"TP must be a non-negative number of ug/L, got {tp_ug_l!r}")
    for name, upper in zip(OECD_CLASSES, OECD_UPPER_TP, strict=False):
        if tp_ug_l <= upper:
            return name
    return OECD_CLASSES[-1]


def tsi_tp(tp_ug_l):
    """Carlson's TSI from total phosphorus (ug/L)."""
    slope, offset = CARLSON_TP
    return slope * np.log(tp_ug_l) + offset


def tsi_chlorophyll(chl_ug_l):
    """Carlson's TSI from chlorophyll-a (ug/L)."""
    slope, offset = CARLSON_CHL
    return slope * np.log(chl_ug_l) + offset


def tsi_secchi(depth_m):
    """Carlson's TSI from Secchi depth (m)."""
    offset, slope = CARLSON_SECCHI
    return offset - slope * np.log(depth_m)


def expected_chlorophyll(tp_ug_l):
    """Summer chlorophyll-a (ug/L) expected from TP (ug/L) across lakes (Dillon & Rigler)."""
    slope, offset = DILLON_RIGLER
    return 10.0 ** (slope * np.log10(tp_ug_l) + offset)


@dataclass(frozen=True)
class TrophicState:
    """What a limnologist reads from one TP value: the class, both indices and chlorophyll."""

    tp_ug_l: float
    oecd_class: str
    tsi_tp: float
    chlorophyll_ug_l: float
    tsi_chlorophyll: float
    chlorophyll_extrapolated: bool = False
    """True above CHLOROPHYLL_LINE_UPPER_TP, where the line overstates chlorophyll."""

    def as_json(self) -> dict[str, Any]:
        """Plain data for JSON output; an index that does not exist (TP 0) is null."""
        return {
            key: None if isinstance(value, float) and not math.isfinite(value) else value
            for key, value in asdict(self).items()
        }


def trophic_state(tp_ug_l: float) -> TrophicState:
    """The trophic state of a lake with annual mean TP ``tp_ug_l`` (ug/L)."""
    tp = float(tp_ug_l)
    chlorophyll = float(expected_chlorophyll(tp)) if tp > 0 else 0.0
    return TrophicState(
        tp_ug_l=tp,
        oecd_class=oecd_class(tp),
        tsi_tp=float(tsi_tp(tp)) if tp > 0 else float("-inf"),
        chlorophyll_ug_l=chlorophyll,
        tsi_chlorophyll=float(tsi_chlorophyll(chlorophyll)) if chlorophyll > 0 else float("-inf"),
        chlorophyll_extrapolated=tp > CHLOROPHYLL_LINE_UPPER_TP,
    )


def _index(value: float) -> str:
    return f"{value:.0f}" if math.isfinite(value) else "undefined"


def trophic_words(state: TrophicState) -> str:
    """One line: "TP 24 ug/L: mesotrophic (OECD 1982); TSI(TP) 50; expected chlorophyll-a
    7.3 ug/L, TSI(Chl) 50 (Carlson 1977)", saying when the chlorophyll is an extrapolation."""
    beyond = (
        f" (extrapolated above {CHLOROPHYLL_LINE_UPPER_TP:.0f} ug/L TP: an overestimate)"
        if state.chlorophyll_extrapolated
        else ""
    )
    return (
        f"TP {significant(state.tp_ug_l)} ug/L: {state.oecd_class} (OECD 1982); "
        f"TSI(TP) {_index(state.tsi_tp)}; expected chlorophyll-a "
        f"{significant(state.chlorophyll_ug_l, 2)} ug/L{beyond}, "
        f"TSI(Chl) {_index(state.tsi_chlorophyll)} (Carlson 1977)"
    )


def trophic_brief(state: TrophicState) -> str:
    """Short form for tables and lists: "TP 24 ug/L, mesotrophic, TSI(TP) 50"."""
    tp = significant(state.tp_ug_l)
    return f"TP {tp} ug/L, {state.oecd_class}, TSI(TP) {_index(state.tsi_tp)}"
