"""Reading and writing scenario files, with errors that name file, field and reason."""

from __future__ import annotations

import os
import tomllib
from pathlib import Path
from typing import Any

import tomli_w
from pydantic import ValidationError

from planner.errors import InputError, Problem
from planner.scenario.root import Scenario
from planner.scenario.schedule_blocks import ACTION_KINDS, SCHEDULE_KINDS
from planner.scenario.uncertainty import PRIOR_KINDS
from planner.textfiles import read_user_text, write_user_text

MAX_SCENARIO_BYTES = 1_000_000
_TAGS = {
    "recycling",
    "recycling-sediment",
    "formula",
    *SCHEDULE_KINDS,
    *ACTION_KINDS,
    *PRIOR_KINDS,
}
_FRIENDLY = {
    "missing": "required field is missing",
    "extra_forbidden": "unknown field; check its spelling (see `planner schema`)",
    "finite_number": "must be a finite number",
}


def field_path(loc: tuple[str | int, ...]) -> str:
    """Dotted path of a pydantic location, without the tags pydantic adds for tagged unions."""
    parts: list[str] = []
    previous: str | int | None = None
    for element in loc:
        is_tag = element in _TAGS and (previous == "model" or isinstance(previous, int))
        if not is_tag:
            parts.append(str(element) or '""')  # an empty key still needs a visible name
        previous = element
    return ".".join(parts) or "(top level)"


def problems_from(error: ValidationError, source: str) -> list[Problem]:
    """One problem per pydantic error, with our field paths and friendlier wording."""
    problems = []
    for item in error.errors(include_url=False):
        reason = _FRIENDLY.get(item["type"], item["msg"])
        if reason.startswith("Value error, "):
            reason = reason.removeprefix("Value error, ")
        problems.append(Problem(source, field_path(tuple(item["loc"])), reason))
    return problems


def scenario_from_data(data: Any, source: str = "<data>") -> Scenario:
    """Validate already-parsed data; raise InputError naming every problem."""
    try:
        return Scenario.model_validate(data)
    except ValidationError as error:
        raise InputError(problems_from(error, source)) from None


def parse_scenario(text: str, source: str = "<text>") -> Scenario:
    """Validate TOML text (from a file, an upload or an editor)."""
    if len(text.encode("utf-8", errors="replace")) > MAX_SCENARIO_BYTES:
        raise InputError([Problem(source, "(file)", f"larger than {MAX_SCENARIO_BYTES} bytes")])
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise InputError([Problem(source, "(file)", f"not valid TOML: {error}")]) from None
    return scenario_from_data(data, source)


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
