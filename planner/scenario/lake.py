"""The optional ``[lake]`` block: the lake's morphometry, to read results in the trade's units.

```toml
[lake]
area = "2.4 km2"            # surface area: km2 (also written km**2 or km^2), ha or m2
mean_depth = "3.1 m"        # volume / area
residence_time = "0.8 yr"   # optional: water residence time (volume / outflow)
# outflow = "0.3 m3/s"      # optional instead of residence_time: the mean outflow
```

Each value is a number and its unit in quotes. Units are read without pint here (scenario
validation must stay fast; :mod:`planner.units` reads them and the tests check it against
pint): the area must be an area, the mean depth a length, the residence time a time and the
outflow a volume per time, all positive and finite.

With this block, reports show the target variable as lake TP (ug/L) with its trophic state when
the variable's unit (``[state_units]``) is an areal P store such as "g P / m2" (divided by the
mean depth) or a concentration, and loads also lake-wide (kg/yr or t/yr) when the control's
unit is an areal load such as "g P / m2 / yr" (times the area); each conversion is stated.
"""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import BeforeValidator, Field, model_validator
from pydantic_core import PydanticCustomError

from planner.errors import quote
from planner.scenario._base import MAX_LABEL, Strict, raise_problems
from planner.units import (
    AREA,
    FLOW,
    LENGTH,
    TIME,
    Dimension,
    UnitTextError,
    describe_dimension,
    read_quantity,
)

EXAMPLES = {
    AREA: "'2.4 km2' or '240 ha'",
    LENGTH: "'3.1 m'",
    TIME: "'0.8 yr' or '290 d'",
    FLOW: "'0.3 m3/s' or '8 ML/d'",
}
"""What each kind of value looks like, for messages."""


def _quantity_of(dimension: Dimension):
    """A validator of "number unit" text of ``dimension``, positive and finite; its error
    names what was expected and gives an example."""
    example = EXAMPLES[dimension]
    wanted = describe_dimension(dimension)

    def check(value: Any) -> str:
        reason = None
        if not isinstance(value, str):
            reason = (
                f"expected {wanted} as text in quotes, a number and its unit such as {example}, "
                f"got {quote(value)}"
            )
        elif len(value) > MAX_LABEL:
            reason = f"at most {MAX_LABEL} characters, got {quote(value)}"
        else:
            try:
                read = read_quantity(value)
            except UnitTextError as error:
                reason = f"{error}; give {wanted} such as {example}"
            else:
                if read.unit.dimension != dimension:
                    found = describe_dimension(read.unit.dimension)
                    reason = (
                        f"{quote(read.text)} is {found}, not {wanted}; give a value such as "
                        f"{example}"
                    )
                elif not read.magnitude > 0:
                    reason = f"must be positive, got {quote(read.text)}"
                else:
                    return read.text
        # the reason is the whole template's one value, so nothing in it is substituted again
        raise PydanticCustomError("quantity", "{reason}", {"reason": reason})

    return BeforeValidator(check)


AreaText = Annotated[str, _quantity_of(AREA)]
LengthText = Annotated[str, _quantity_of(LENGTH)]
TimeText = Annotated[str, _quantity_of(TIME)]
FlowText = Annotated[str, _quantity_of(FLOW)]


class Lake(Strict):
    """The lake's morphometry: surface area, mean depth and, optionally, the water residence
    time or the mean outflow (not both). Values are text: a number and its unit."""

    area: AreaText = Field(description="Surface area with its unit, e.g. '2.4 km2' or '240 ha'.")
    mean_depth: LengthText = Field(description="Mean depth (volume / area), e.g. '3.1 m'.")
    residence_time: TimeText | None = Field(
        default=None,
        description="Water residence time (volume / outflow), e.g. '0.8 yr' (default: none).",
    )
    outflow: FlowText | None = Field(
        default=None,
        description="Mean outflow, e.g. '0.3 m3/s', instead of residence_time (default: none).",
    )

    @model_validator(mode="after")
    def _one_way_to_the_residence_time(self) -> Lake:
        problems = []
        if self.residence_time is not None and self.outflow is not None:
            problems.append(
                (
                    ("outflow",),
                    "give either residence_time or outflow, not both (one follows "
                    "from the other through the volume)",
                )
            )
        raise_problems("lake", problems, self.outflow)
        return self
