"""Shared pieces of the scenario schema: the strict base model and cross-field problem raising."""

from __future__ import annotations

from collections.abc import Iterable
from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field, ValidationError
from pydantic_core import InitErrorDetails, PydanticCustomError

Loc = tuple[str | int, ...]

NonNegative = Annotated[float, Field(ge=0.0)]
Positive = Annotated[float, Field(gt=0.0)]
Name = Annotated[str, Field(min_length=1, max_length=120)]


class Strict(BaseModel):
    """Every scenario block: unknown keys refused, frozen, no NaN or infinity anywhere."""

    model_config = ConfigDict(
        extra="forbid", frozen=True, allow_inf_nan=False, str_strip_whitespace=True
    )


def raise_problems(title: str, problems: Iterable[tuple[Loc, str]], value: object) -> None:
    """Raise one ValidationError carrying every cross-field problem at its exact location.

    Pydantic keeps the locations of a ValidationError raised inside a validator and prefixes them
    with the enclosing path, so ``schedules.2.actions.0.variable`` reaches the user intact.
    """
    details = [
        InitErrorDetails(
            type=PydanticCustomError("scenario_rule", "{reason}", {"reason": reason}),
            loc=loc,
            input=value,
        )
        for loc, reason in problems
    ]
    if details:
        raise ValidationError.from_exception_data(title, details)
