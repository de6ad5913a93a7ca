"""Reading and writing scenario files, with errors that name file, field and reason."""

from __future__ import annotations

import os
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import tomli_w
from pydantic import ValidationError

from planner.errors import InputError, Problem, capped, describe_key, listing, quote
from planner.models.kinds import BUILTIN_INFO
from planner.scenario._base import Boolean
from planner.scenario.root import Scenario
from planner.scenario.schedule_blocks import ACTION_KINDS, SCHEDULE_KINDS
from planner.scenario.uncertainty import PRIOR_KINDS
from planner.textfiles import read_user_text, write_user_text

MAX_SCENARIO_BYTES = 1_000_000
MAX_NESTING = 12
"""Most levels of lists and tables inside one another; the deepest field of a scenario
(``uncertainty.joint.covariance.0.0``) has five."""
BYTE_ORDER_MARK = "\ufeff"
_KINDS = {
    "model": (*BUILTIN_INFO, "formula"),
    "schedules": SCHEDULE_KINDS,
    "actions": ACTION_KINDS,
    "priors": PRIOR_KINDS,
}
"""The kinds of each tagged list or table, by its key."""
_TAGS = {kind for kinds in _KINDS.values() for kind in kinds}
_EXPECTED = {
    "float_type": "a number",
    "float_parsing": "a number",
    "int_type": "a whole number",
    "int_parsing": "a whole number",
    "int_from_float": "a whole number",
    "string_type": "text in quotes",
    "list_type": "a list",
    "tuple_type": "a list",
    "dict_type": "a table",
    "model_type": "a table",
    "model_attributes_type": "a table",
}
_BOUNDS = {"greater_than", "greater_than_equal", "less_than", "less_than_equal"}


def field_path(loc: tuple[str | int, ...]) -> str:
    """Dotted path of a pydantic location, without the tags pydantic adds for tagged unions;
    odd keys (empty, over-long, with dots or control characters) are quoted or cut short."""
    parts: list[str] = []
    previous: str | int | None = None
    for element in loc:
        is_tag = element in _TAGS and (previous == "model" or isinstance(previous, int))
        if not is_tag:
            parts.append(describe_key(element))
        previous = element
    return ".".join(parts) or "(top level)"


def _reason(item: Mapping[str, Any]) -> str:
    """One pydantic error in our words; any input it repeats goes through :func:`quote`."""
    kind, value, context = item["type"], item.get("input"), item.get("ctx") or {}
    if kind == "missing":
        return "required field is missing"
    if kind == "union_tag_not_found":
        keys = [key for key in item["loc"] if isinstance(key, str)]
        kinds = _KINDS.get(keys[-1] if keys else "", ())
        return "kind is missing" + (f"; give one of {listing(kinds)}" if kinds else "")
    if kind == "extra_forbidden":
        return "unknown field; check its spelling (see `planner schema`)"
    if kind == "float_type" and isinstance(value, int) and not isinstance(value, bool):
        return f"{quote(value)} is too large for a number"
    if kind in _EXPECTED:
        shown = str(value) if isinstance(value, Boolean) else quote(value)
        return f"expected {_EXPECTED[kind]}, got {shown}"
    if kind == "finite_number":
        return f"must be a finite number, got {quote(value)}"
    if kind == "literal_error":
        return f"expected {context['expected']}, got {quote(value)}"
    if kind == "union_tag_invalid":
        tag = value.get("kind", context.get("tag")) if isinstance(value, Mapping) else None
        return f"unknown kind {quote(tag)}; expected one of {context['expected_tags']}"
    message = str(item["msg"]).removeprefix("Value error, ")
    if kind in _BOUNDS:
        return f"{message.replace('Input should be', 'must be', 1)}, got {quote(value)}"
    return message


def problems_from(error: ValidationError, source: str) -> list[Problem]:
    """One problem per pydantic error (at most :data:`planner.errors.MAX_PROBLEMS`, then a
    count of the rest), with our field paths and wording."""
    problems = [
        Problem(source, field_path(tuple(item["loc"])), _reason(item))
        for item in error.errors(include_url=False, include_context=True)
    ]
    return capped(problems, source)


def _too_deep(data: object) -> tuple[str | int, ...] | None:
    """Where lists and tables first nest more than MAX_NESTING levels deep, or None (walked
    without recursion, so any depth is safe)."""
    pending: list[tuple[object, tuple[str | int, ...]]] = [(data, ())]
    while pending:
        node, loc = pending.pop()
        if len(loc) > MAX_NESTING:
            return loc
        if isinstance(node, Mapping):
            pending.extend((value, (*loc, key)) for key, value in node.items())
        elif isinstance(node, list | tuple):
            pending.extend((value, (*loc, index)) for index, value in enumerate(node))
    return None


def scenario_from_data(data: Any, source: str = "<data>", *, strict: bool = False) -> Scenario:
    """Validate already-parsed data; raise InputError naming every problem.

    A boolean is never a number. Text that reads as a number is one (the web editor sends what
    was typed) unless ``strict``, as for files: there ``"40"`` is text and ``2.0`` not a whole
    number, as TOML's types say.
    """
    if (loc := _too_deep(data)) is not None:
        reason = f"lists or tables nested more than {MAX_NESTING} levels deep"
        raise InputError([Problem(source, field_path(loc), reason)])
    try:
        return Scenario.model_validate(data, strict=strict)
    except ValidationError as error:
        raise InputError(problems_from(error, source)) from None


def toml_data(text: str, source: str = "<text>") -> dict[str, Any]:
    """The data of TOML text, a leading byte-order mark ignored; InputError (field "(file)")
    when it is larger than MAX_SCENARIO_BYTES or not valid TOML."""
    text = text.removeprefix(BYTE_ORDER_MARK)
    if len(text.encode("utf-8", errors="replace")) > MAX_SCENARIO_BYTES:
        raise InputError([Problem(source, "(file)", f"larger than {MAX_SCENARIO_BYTES} bytes")])
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        reason = f"not valid TOML: {error}"
    except RecursionError:
        reason = f"not usable: lists or tables nested far more than {MAX_NESTING} levels deep"
    except ValueError as error:  # Python's own refusal, e.g. of an integer with 5000 digits
        digits = "digits" in str(error)
        reason = "not usable: an integer has too many digits" if digits else f"not usable: {error}"
    raise InputError([Problem(source, "(file)", reason)])


def parse_scenario(text: str, source: str = "<text>") -> Scenario:
    """Validate TOML text (from a file, an upload or an editor)."""
    return scenario_from_data(toml_data(text, source), source, strict=True)


def load_scenario(path: str | os.PathLike[str]) -> Scenario:
    """Read and validate a scenario file."""
    text = read_user_text(path, MAX_SCENARIO_BYTES)
    return parse_scenario(text, str(path))


def scenario_to_toml(scenario: Scenario) -> str:
    """TOML text of a scenario, omitting unset optional keys; reads back to an equal scenario."""
    data = scenario.model_dump(mode="json", exclude_none=True)
    return tomli_w.dumps(data)


def save_scenario(
    scenario: Scenario, path: str | os.PathLike[str], *, overwrite: bool = False
) -> Path:
    """Write atomically (:func:`planner.textfiles.write_user_text`); refuses to replace an
    existing file unless ``overwrite`` is set, so nothing saved is lost."""
    return write_user_text(path, scenario_to_toml(scenario), overwrite=overwrite)
