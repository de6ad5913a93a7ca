"""Shared pieces of the scenario schema: the strict base model, read-only containers and
cross-field problem raising."""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from typing import TYPE_CHECKING, Annotated, Any, Self, TypeVar

from pydantic import (
    AfterValidator,
    BaseModel,
    ConfigDict,
    Field,
    ValidationError,
    WrapSerializer,
)
from pydantic_core import InitErrorDetails, PydanticCustomError

Loc = tuple[str | int, ...]

NonNegative = Annotated[float, Field(ge=0.0)]
Positive = Annotated[float, Field(gt=0.0)]
Name = Annotated[str, Field(min_length=1, max_length=120)]

T = TypeVar("T")
K = TypeVar("K")
V = TypeVar("V")


class FrozenMapping(Mapping[K, V]):
    """A read-only dict: lookups, iteration and equality as a dict, no way to change it.

    Unlike ``types.MappingProxyType`` it owns its items (nobody holds the dict behind it) and it
    pickles, which ensemble workers and the web app's disk cache need.
    """

    __slots__ = ("_items",)

    def __init__(self, items: Mapping[K, V] | Iterable[tuple[K, V]] = ()) -> None:
        object.__setattr__(self, "_items", dict(items))

    def __getitem__(self, key: K) -> V:
        return self._items[key]

    def __iter__(self) -> Iterator[K]:
        return iter(self._items)

    def __len__(self) -> int:
        return len(self._items)

    def __repr__(self) -> str:
        return f"{type(self).__name__}({self._items!r})"

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError(f"{type(self).__name__} is read-only")

    def __delattr__(self, name: str) -> None:
        raise AttributeError(f"{type(self).__name__} is read-only")

    def __reduce__(self) -> tuple[type[FrozenMapping[K, V]], tuple[dict[K, V]]]:
        return type(self), (dict(self._items),)


def _dump_as_list(value: tuple[Any, ...], handler: Any) -> Any:
    return handler(list(value))


def _dump_as_dict(value: Mapping[Any, Any], handler: Any) -> Any:
    return handler(dict(value))


if TYPE_CHECKING:
    FrozenList = tuple[T, ...]
    FrozenDict = FrozenMapping[K, V]
else:
    # Validated as a list / dict, so error messages and the JSON Schema read as before; stored
    # as a tuple / FrozenMapping, so a scenario shared between requests cannot be changed;
    # dumped as a plain list / dict, so TOML and JSON output is unchanged.
    FrozenList = Annotated[list[T], AfterValidator(tuple), WrapSerializer(_dump_as_list)]
    FrozenDict = Annotated[dict[K, V], AfterValidator(FrozenMapping), WrapSerializer(_dump_as_dict)]


def _freeze(value: object) -> object:
    """Lists become tuples and dicts FrozenMappings, all the way down (models stay as they are)."""
    if isinstance(value, list | tuple):
        return tuple(_freeze(item) for item in value)
    if isinstance(value, dict):
        return FrozenMapping({key: _freeze(item) for key, item in value.items()})
    return value


class Strict(BaseModel):
    """Every scenario block: unknown keys refused, frozen, no NaN or infinity anywhere."""

    model_config = ConfigDict(
        extra="forbid", frozen=True, allow_inf_nan=False, str_strip_whitespace=True
    )

    def model_copy(self, *, update: Mapping[str, Any] | None = None, deep: bool = False) -> Self:
        """A copy with some fields replaced, unvalidated as in pydantic; lists and dicts in
        ``update`` are frozen so that the copy is as immutable as the original."""
        if update:
            update = {key: _freeze(value) for key, value in update.items()}
        return super().model_copy(update=update, deep=deep)


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
