"""Units: reading the unit labels a scenario is written in, and converting between them.

Two halves, so that validating a scenario stays fast:

- Reading (plain Python, no pint): :func:`read_unit` and :func:`read_quantity` take the labels
  as a manager writes them ("g P / m2 / yr", "2.4 km2", "240 ha", "g m-2 yr-1") apart into known
  unit symbols with whole exponents and work out their dimension (mass, length, time). A
  substance tag written after a mass ("g P", "t TP") is a label of what is weighed, never a unit
  (pint would read "P" as the poise). ``m2`` means m**2. Everything after a "/" up to the next
  "/" divides, so "kg / ha yr" is kilograms per hectare per year.
- Converting (pint, imported on first use; it takes most of a second): :func:`quantity` turns a
  read label into a pint quantity, and every conversion the reports show goes through pint:
  a lake TP concentration from an areal store over the mean depth (C = store / depth,
  1 g/m2 over 1 m = 1 g/m3 = 1000 ug/L), a lake-wide load from an areal load over the area and
  back, and :class:`LakeConversion`, which says each conversion in words.

The symbols read here are a small fixed set (:data:`UNIT_SYMBOLS`); their dimensions are checked
against pint by the tests, so the fast reading and pint cannot disagree.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from functools import cache
from typing import TYPE_CHECKING, Any, NamedTuple

from planner.errors import listing, quote, shorten

if TYPE_CHECKING:
    import pint


class Dimension(NamedTuple):
    """Exponents of mass, length and time."""

    mass: int = 0
    length: int = 0
    time: int = 0


LENGTH = Dimension(length=1)
AREA = Dimension(length=2)
VOLUME = Dimension(length=3)
TIME = Dimension(time=1)
MASS = Dimension(mass=1)
FLOW = Dimension(length=3, time=-1)
AREAL_STORE = Dimension(mass=1, length=-2)
CONCENTRATION = Dimension(mass=1, length=-3)
AREAL_LOAD = Dimension(mass=1, length=-2, time=-1)
LOAD = Dimension(mass=1, time=-1)

DIMENSION_WORDS = {
    LENGTH: "a length",
    AREA: "an area",
    VOLUME: "a volume",
    TIME: "a time",
    MASS: "a mass",
    FLOW: "a flow (volume per time)",
    AREAL_STORE: "an areal store (mass per area)",
    CONCENTRATION: "a concentration (mass per volume)",
    AREAL_LOAD: "an areal load (mass per area per year)",
    LOAD: "a load (mass per time)",
    Dimension(): "a plain number",
}

UNIT_SYMBOLS: Mapping[str, Dimension] = {
    **dict.fromkeys(("g", "mg", "ug", "µg", "μg", "kg", "t", "tonne", "tonnes"), MASS),
    **dict.fromkeys(("m", "km", "cm", "mm", "dm"), LENGTH),
    **dict.fromkeys(("ha", "hectare", "hectares"), AREA),
    **dict.fromkeys(("L", "l", "mL", "ml", "ML", "GL"), VOLUME),
    **dict.fromkeys(
        ("s", "h", "d", "day", "days", "week", "weeks", "month", "months", "yr", "year", "years"),
        TIME,
    ),
}
"""Every unit symbol a scenario may use, by dimension (pint's spellings, checked by the tests)."""

SUBSTANCE_TAGS = ("P", "TP", "SRP", "N", "TN")
"""Labels of what is weighed, written after a mass ("g P / m2"); never units."""

MAX_EXPONENT = 4
LARGE_LOAD_KG_PER_YEAR = 10_000.0
"""Lake-wide loads from this many kg/yr up are shown in t/yr."""

_NUMBER = re.compile(r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?")
_FACTOR = re.compile(
    r"\s*(?P<word>[A-Za-zµμ]+)(?:\s*(?:\*\*|\^)\s*(?P<power>[+-]?\d+)|(?P<digits>-?\d+)"
    r"|(?P<super>[²³]))?\s*(?:[*·]\s*)?"
)
_SUPERSCRIPTS = {"²": 2, "³": 3}


class UnitTextError(ValueError):
    """A unit label or quantity text that cannot be read; the message is the reason in words
    (the caller adds the file and the field)."""


@dataclass(frozen=True)
class UnitLabel:
    """A unit label read into symbols with whole exponents, e.g. "g P / m2 / yr" is
    ``(("g", 1), ("m", -2), ("yr", -1))`` with substance "P"."""

    text: str
    factors: tuple[tuple[str, int], ...]
    substance: str | None = None

    @property
    def dimension(self) -> Dimension:
        total = [0, 0, 0]
        for symbol, power in self.factors:
            for axis, exponent in enumerate(UNIT_SYMBOLS[symbol]):
                total[axis] += power * exponent
        return Dimension(*total)

    @property
    def expression(self) -> str:
        """The unit as pint reads it ("g * m**-2 * yr**-1"), the substance tag left out."""
        return " * ".join(f"{symbol}**{power}" for symbol, power in self.factors) or "dimensionless"


@dataclass(frozen=True)
class QuantityText:
    """A number with its unit, read from text such as "2.4 km2"."""

    text: str
    magnitude: float
    unit: UnitLabel


def read_unit(text: str) -> UnitLabel:
    """Read a unit label; UnitTextError (the reason in words) when it is not one."""
    if not isinstance(text, str):
        raise UnitTextError(f"expected a unit as text, got {quote(text)}")
    stripped = text.strip()
    if not stripped:
        raise UnitTextError("no unit given")
    factors: list[tuple[str, int]] = []
    substance: str | None = None
    for index, part in enumerate(stripped.split("/")):
        sign = 1 if index == 0 else -1
        if not part.strip():
            raise UnitTextError(f"{quote(stripped)} has nothing between or after a '/'")
        position, previous_is_mass = 0, False
        while position < len(part):
            match = _FACTOR.match(part, position)
            if match is None or match.end() == position:
                rest = part[position:].strip()
                raise UnitTextError(f"cannot read {quote(rest)} in the unit {quote(stripped)}")
            position = match.end()
            word = match["word"]
            power = _power(match, stripped)
            if word in SUBSTANCE_TAGS and previous_is_mass and power == 1 and substance is None:
                substance = word
                previous_is_mass = False
                continue
            if word not in UNIT_SYMBOLS:
                if word in SUBSTANCE_TAGS:
                    reason = "is a substance tag: write it after a mass, as in 'g P / m2'"
                else:
                    reason = f"is not a known unit (known: {listing(UNIT_SYMBOLS, limit=40)})"
                where = "" if word == stripped else f" in {quote(stripped)}"
                raise UnitTextError(f"{quote(word)}{where} {reason}")
            factors.append((word, sign * power))
            previous_is_mass = UNIT_SYMBOLS[word] == MASS and power == 1
    return UnitLabel(text=stripped, factors=tuple(factors), substance=substance)


def _power(match: re.Match[str], text: str) -> int:
    if match["super"]:
        return _SUPERSCRIPTS[match["super"]]
    digits = match["power"] or match["digits"]
    if digits is None:
        return 1
    power = int(digits) if len(digits) <= 3 else None  # int() of thousands of digits is slow
    if power is None or power == 0 or abs(power) > MAX_EXPONENT:
        raise UnitTextError(
            f"exponent {shorten(digits, 8)} in {quote(text)}: give a whole power from "
            f"-{MAX_EXPONENT} to {MAX_EXPONENT}, not 0"
        )
    return power


def read_quantity(text: str) -> QuantityText:
    """Read "number unit" ("2.4 km2", "3.1 m", "1.5 yr"); UnitTextError when it is not one."""
    if not isinstance(text, str):
        raise UnitTextError(f"expected a number and its unit in quotes, got {quote(text)}")
    stripped = text.strip()
    match = _NUMBER.match(stripped)
    if match is None:
        raise UnitTextError(f"{quote(stripped)} does not start with a number")
    magnitude = float(match.group())
    if not math.isfinite(magnitude):
        raise UnitTextError(f"the number in {quote(stripped)} is too large")
    unit_text = stripped[match.end() :]
    if not unit_text.strip():
        raise UnitTextError(f"{quote(stripped)} has no unit")
    return QuantityText(text=stripped, magnitude=magnitude, unit=read_unit(unit_text))


def describe_dimension(dimension: Dimension) -> str:
    """The dimension in words ("an area"), or as exponents when it has no common name."""
    if dimension in DIMENSION_WORDS:
        return DIMENSION_WORDS[dimension]
    names = ("mass", "length", "time")
    parts = [f"{name}^{power}" for name, power in zip(names, dimension, strict=True) if power]
    return "a quantity of dimension " + " ".join(parts)


def significant(value: float, digits: int = 3) -> str:
    """A number for a reader: ``digits`` significant figures, thousands separated, no
    exponent below a trillion (2290.3 -> "2,290", 7.14 -> "7.14", 0.01234 -> "0.0123")."""
    if not math.isfinite(value):
        return str(value)
    if value == 0:
        return "0"
    rounded = float(f"{value:.{digits}g}")
    if abs(rounded) >= 10 ** (digits - 1) and abs(rounded) < 1e12:
        return f"{rounded:,.0f}"
    if abs(rounded) < 1e-4 or abs(rounded) >= 1e12:
        return f"{rounded:.{digits}g}"
    decimals = digits - 1 - math.floor(math.log10(abs(rounded)))
    return f"{rounded:.{max(decimals, 0)}f}".rstrip("0").rstrip(".")


# ---------------------------------------------------------------------------------------------
# Converting, through pint


@cache
def registry() -> pint.UnitRegistry:
    """The one pint registry (created on first use: importing pint takes most of a second)."""
    import pint

    return pint.UnitRegistry()


def quantity(magnitude: Any, unit: UnitLabel | str) -> pint.Quantity:
    """A pint quantity of ``magnitude`` (a float or an array) in a unit label (read first when
    text)."""
    label = read_unit(unit) if isinstance(unit, str) else unit
    return registry().Quantity(magnitude, label.expression)


def parse_quantity(text: str | QuantityText) -> pint.Quantity:
    """A pint quantity from "number unit" text ("2.4 km2")."""
    read = read_quantity(text) if isinstance(text, str) else text
    return quantity(read.magnitude, read.unit)


def _expect(value: pint.Quantity, dimension: Dimension, what: str) -> None:
    dimensionality = value.dimensionality
    found = Dimension(*(int(dimensionality.get(f"[{name}]", 0)) for name in Dimension._fields))
    if found != dimension or len(dimensionality) > sum(1 for power in found if power):
        raise ValueError(f"{what} must be {describe_dimension(dimension)}, got {value.units}")


def concentration(store: pint.Quantity, depth: pint.Quantity) -> pint.Quantity:
    """Lake concentration (ug/L) of an areal store (mass per area) spread over the mean depth:
    C = store / depth, the water column of the mean depth holding the store."""
    _expect(store, AREAL_STORE, "the store")
    _expect(depth, LENGTH, "the mean depth")
    return (store / depth).to("ug / L")


def areal_store(lake_concentration: pint.Quantity, depth: pint.Quantity) -> pint.Quantity:
    """The areal store (g/m2) that a concentration over the mean depth holds: store = C depth."""
    _expect(lake_concentration, CONCENTRATION, "the concentration")
    _expect(depth, LENGTH, "the mean depth")
    return (lake_concentration * depth).to("g / m**2")


def total_load(areal: pint.Quantity, area: pint.Quantity, unit: str = "kg / yr") -> pint.Quantity:
    """The lake-wide load of an areal load (mass per area per time) over the lake's area."""
    _expect(areal, AREAL_LOAD, "the areal load")
    _expect(area, AREA, "the area")
    return (areal * area).to(unit)


def areal_load(
    total: pint.Quantity, area: pint.Quantity, unit: str = "g / m**2 / yr"
) -> pint.Quantity:
    """The areal load of a lake-wide load (mass per time) spread over the lake's area."""
    _expect(total, LOAD, "the load")
    _expect(area, AREA, "the area")
    return (total / area).to(unit)


def tp_concentration(
    value: Any, unit: UnitLabel | str, *, depth: pint.Quantity, area: pint.Quantity
) -> pint.Quantity:
    """Lake TP (ug/L) of a state given in ``unit``: an areal store over the mean depth, a
    lake-wide mass over the volume (area x mean depth), or a concentration as it is."""
    amount = quantity(value, unit)
    label = read_unit(unit) if isinstance(unit, str) else unit
    if label.dimension == AREAL_STORE:
        return concentration(amount, depth)
    if label.dimension == MASS:
        return (amount / (area * depth)).to("ug / L")
    if label.dimension == CONCENTRATION:
        return amount.to("ug / L")
    raise ValueError(f"{label.text} is {describe_dimension(label.dimension)}, not a P amount")


# ---------------------------------------------------------------------------------------------
# One scenario's conversions, said in words

TP_UNIT = "ug/L"
AREAL_LOAD_UNIT = "mg/m2/yr"


def _with_substance(unit: str, substance: str | None) -> str:
    """ "kg/yr" with substance "P" -> "kg P/yr" (the substance after the mass, as written)."""
    if not substance:
        return unit
    mass, _, rest = unit.partition("/")
    return f"{mass} {substance}/{rest}" if rest else f"{mass} {substance}"


@dataclass(frozen=True)
class LakeConversion:
    """How one scenario's numbers read in the trade's units, each factor worked out by pint.

    ``tp_per_state`` is lake TP in ug/L per one unit of the target variable (None, with
    ``tp_unavailable`` saying why, when the variable is not a P amount); ``load_per_control``
    is the control in ``load_unit`` per one control unit (None, with ``load_unavailable``,
    when the control is not a load). All conversions are linear, so one factor each is exact.
    """

    area: QuantityText
    mean_depth: QuantityText
    area_km2: float
    mean_depth_m: float
    volume_m3: float
    residence_time_yr: float | None
    residence_time_from: str | None
    variable: str
    state_unit: str
    tp_per_state: float | None
    tp_unavailable: str | None
    control_unit: str
    load_unit: str | None
    load_per_control: float | None
    load_unavailable: str | None

    def tp(self, state_value: float) -> float:
        """Lake TP (ug/L) of a value of the target variable."""
        if self.tp_per_state is None:
            raise ValueError(self.tp_unavailable or "no TP conversion")
        return float(state_value) * self.tp_per_state

    def load(self, control_value: float) -> float:
        """A control value in :attr:`load_unit`."""
        if self.load_per_control is None:
            raise ValueError(self.load_unavailable or "no load conversion")
        return float(control_value) * self.load_per_control

    def tp_words(self, state_value: float) -> str:
        """ "TP 2,290 ug/L = 7.1 g P / m2 over a mean depth of 3.1 m"."""
        tp = significant(self.tp(state_value))
        amount = f"{significant(state_value)} {self.state_unit}".strip()
        label = read_unit(self.state_unit)
        if label.dimension == AREAL_STORE:
            where = f" over a mean depth of {self.mean_depth.text}"
        elif label.dimension == MASS:
            where = f" in a volume of {significant(self.volume_m3)} m3"
        else:
            where = ""
        return f"TP {tp} {TP_UNIT} = {amount}{where}"

    def load_words(self, control_value: float) -> str:
        """ "2.6 g P / m2 / yr = 6,240 kg P/yr over an area of 2.4 km2"."""
        converted = significant(self.load(control_value))
        amount = f"{significant(control_value)} {self.control_unit}".strip()
        return f"{amount} = {converted} {self.load_unit} over an area of {self.area.text}"

    def morphometry_words(self) -> str:
        """ "area 2.4 km2, mean depth 3.1 m, volume 7.44 million m3, water residence time
        0.8 yr"."""
        volume = self.volume_m3
        if volume >= 1e6:
            shown = f"{significant(volume / 1e6)} million m3"
        else:
            shown = f"{significant(volume)} m3"
        text = f"area {self.area.text}, mean depth {self.mean_depth.text}, volume {shown}"
        if self.residence_time_yr is not None:
            text += f", water residence time {significant(self.residence_time_yr)} yr"
            if self.residence_time_from:
                text += f" ({self.residence_time_from})"
        return text


def lake_conversion(
    lake: Any, variable: str, state_unit: str, control_unit: str, current_control: float
) -> LakeConversion:
    """The conversions of a scenario with a ``[lake]`` block (``lake``: its
    :class:`planner.scenario.lake.Lake`): the target variable ``variable`` in ``state_unit``
    to lake TP, and control values in ``control_unit`` to lake-wide loads (kg/yr, or t/yr from
    :data:`LARGE_LOAD_KG_PER_YEAR` at the current control) or, for a lake-wide control, to areal
    loads (mg/m2/yr)."""
    area, depth = parse_quantity(lake.area), parse_quantity(lake.mean_depth)
    volume = (area * depth).to("m**3")
    residence, residence_from = None, None
    if lake.residence_time is not None:
        residence = float(parse_quantity(lake.residence_time).to("yr").magnitude)
    elif getattr(lake, "outflow", None) is not None:
        residence = float((volume / parse_quantity(lake.outflow)).to("yr").magnitude)
        residence_from = f"volume / outflow of {read_quantity(lake.outflow).text}"

    tp_per_state, tp_unavailable = None, None
    try:
        if not state_unit.strip():
            raise UnitTextError(f"state_units.{variable} is not given")
        tp_per_state = float(tp_concentration(1.0, state_unit, depth=depth, area=area).magnitude)
    except (UnitTextError, ValueError) as error:
        tp_unavailable = (
            f"{variable} is not read as lake P ({error}); give state_units.{variable} as an "
            "areal store such as 'g P / m2' or a concentration such as 'ug/L'"
        )

    load_unit, load_per_control, load_unavailable = None, None, None
    try:
        label = read_unit(control_unit)
        if label.dimension == AREAL_LOAD:
            per_unit = total_load(quantity(1.0, label), area)
            large = abs(current_control) * per_unit.magnitude >= LARGE_LOAD_KG_PER_YEAR
            load_unit = "t/yr" if large else "kg/yr"
            load_per_control = float(per_unit.to(read_unit(load_unit).expression).magnitude)
        elif label.dimension == LOAD:
            load_unit = AREAL_LOAD_UNIT
            per_unit = areal_load(quantity(1.0, label), area, read_unit(load_unit).expression)
            load_per_control = float(per_unit.magnitude)
        else:
            raise UnitTextError(f"{quote(label.text)} is {describe_dimension(label.dimension)}")
        load_unit = _with_substance(load_unit, label.substance)
    except UnitTextError as error:
        load_unit = None
        load_unavailable = f"the control is not read as a P load ({error})"

    return LakeConversion(
        area=read_quantity(lake.area),
        mean_depth=read_quantity(lake.mean_depth),
        area_km2=float(area.to("km**2").magnitude),
        mean_depth_m=float(depth.to("m").magnitude),
        volume_m3=float(volume.magnitude),
        residence_time_yr=residence,
        residence_time_from=residence_from,
        variable=variable,
        state_unit=state_unit.strip(),
        tp_per_state=tp_per_state,
        tp_unavailable=tp_unavailable,
        control_unit=control_unit.strip(),
        load_unit=load_unit,
        load_per_control=load_per_control,
        load_unavailable=load_unavailable,
    )


def scenario_lake_conversion(scenario: Any) -> LakeConversion | None:
    """The lake conversions of a scenario, None when it has no ``[lake]`` block."""
    if getattr(scenario, "lake", None) is None:
        return None
    variable = scenario.target.variable
    return lake_conversion(
        scenario.lake,
        variable,
        scenario.state_units.get(variable, ""),
        scenario.control.unit,
        scenario.current_control,
    )
