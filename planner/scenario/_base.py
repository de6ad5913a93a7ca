"""Shared pieces of the scenario schema: the strict base model, read-only containers and
cross-field problem raising."""

from __future__ import annotations

from collections.abc import Iterable, Iterator, Mapping
from types import UnionType
from typing import TYPE_CHECKING, Annotated, Any, Self, TypeVar, Union, get_args, get_origin

from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    ValidationError,
    WrapSerializer,
    model_validator,
)
from pydantic_core import InitErrorDetails, PydanticCustomError

Loc = tuple[str | int, ...]

MAX_YEARS = 10_000.0
"""Longest horizon, and the latest time or longest duration a schedule may name (years)."""
MAX_LABEL = 120
"""Most characters of a name, label or unit."""

NonNegative = Annotated[float, Field(ge=0.0)]
Positive = Annotated[float, Field(gt=0.0)]
Years = Annotated[float, Field(ge=0.0, le=MAX_YEARS)]
PositiveYears = Annotated[float, Field(gt=0.0, le=MAX_YEARS)]
Name = Annotated[str, Field(min_length=1, max_length=MAX_LABEL)]
Label = Annotated[str, Field(max_length=MAX_LABEL)]

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


def _list_as_tuple(value: object) -> object:
    return tuple(value) if isinstance(value, list) else value


if TYPE_CHECKING:
    Pair = tuple[T, V]
else:
    # Strict validation (of files) takes only a tuple for a tuple; TOML and JSON give a list.
    Pair = Annotated[tuple[T, V], BeforeValidator(_list_as_tuple)]


def _freeze(value: object) -> object:
    """Lists become tuples and dicts FrozenMappings, all the way down (models stay as they are)."""
    if isinstance(value, list | tuple):
        return tuple(_freeze(item) for item in value)
    if isinstance(value, dict):
        return FrozenMapping({key: _freeze(item) for key, item in value.items()})
    return value


class Boolean(str):
    """A boolean found where a number is expected, spelled as in TOML ("true", "false").

    Python counts ``True`` as 1, and so would validation; put in the boolean's place, this text
    is refused there like any other text, and the message shows the boolean as it was written.
    """


def _unwrap(annotation: Any) -> Any:
    while get_origin(annotation) is Annotated:
        annotation = get_args(annotation)[0]
    return annotation


def _mark_booleans(annotation: Any, value: Any) -> Any:
    """``value`` with every boolean where ``annotation`` expects a number replaced by a
    :class:`Boolean` (containers are copied only when something changed; models nested inside
    are left to their own validation)."""
    annotation = _unwrap(annotation)
    if annotation is float or annotation is int:
        return Boolean(str(value).lower()) if isinstance(value, bool) else value
    origin, args = get_origin(annotation), get_args(annotation)
    if origin is Union or origin is UnionType:
        numeric = any(_unwrap(arg) in (float, int) for arg in args)
        return Boolean(str(value).lower()) if numeric and isinstance(value, bool) else value
    if origin is list and isinstance(value, list):
        items = [_mark_booleans(args[0], item) for item in value]
    elif origin is tuple and isinstance(value, list | tuple):
        kinds = [args[0]] * len(value) if args[-1:] == (Ellipsis,) else args
        items = [
            _mark_booleans(kinds[i], item) if i < len(kinds) else item
            for i, item in enumerate(value)
        ]
    elif origin is dict and isinstance(value, dict):
        marked = {key: _mark_booleans(args[1], item) for key, item in value.items()}
        changed = any(marked[key] is not item for key, item in value.items())
        return marked if changed else value
    else:
        return value
    changed = any(new is not old for new, old in zip(items, value, strict=True))
    return type(value)(items) if changed else value


class Strict(BaseModel):
    """Every scenario block: unknown keys refused, frozen, no NaN or infinity anywhere, and
    no boolean taken for a number.

    Validation converts text to numbers (the web editor sends what was typed); files are
    validated with ``strict=True`` (:func:`planner.scenario.io.parse_scenario`), where ``"40"``
    is not a number and ``2.0`` is not a whole number. Whole numbers are numbers everywhere.
    """

    model_config = ConfigDict(
        extra="forbid", frozen=True, allow_inf_nan=False, str_strip_whitespace=True
    )

    @model_validator(mode="before")
    @classmethod
    def _booleans_are_not_numbers(cls, data: Any) -> Any:
        """The block's raw table with each boolean in a number's place marked (:class:`Boolean`)."""
        if not isinstance(data, dict):
            return data
        fields = cls.model_fields
        return {
            key: _mark_booleans(fields[key].annotation, value) if key in fields else value
            for key, value in data.items()
        }

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
