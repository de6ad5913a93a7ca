"""Reading and writing scenario files, with errors that name file, field and reason."""

from __future__ import annotations

import json
import os
import tomllib
from collections.abc import Mapping
from difflib import SequenceMatcher
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


def scenario_to_toml(scenario: Scenario, *, template: str | None = None) -> str:
    """TOML text of a scenario, omitting unset optional keys; reads back to an equal scenario.

    With ``template`` (the text of the file the scenario was opened from) the text is that file
    with only what changed rewritten: its comments, blank lines, key order and array layout stay,
    values that changed are replaced in place (keeping the comment on their line), keys and
    tables are added or removed as needed, and a list of tables (``[[schedules]]``) keeps the
    tables of the items that were not touched. The result is checked by reading it back; if it
    did not read back to exactly ``scenario`` (or the template is not a valid scenario) the
    plain text without the template's layout is returned instead, so a save never changes what
    was saved.
    """
    data = scenario.model_dump(mode="json", exclude_none=True)
    if template is not None:
        for leave_out_empty in (True, False):
            text = _patched(template, data, leave_out_empty=leave_out_empty)
            if text is not None and _reads_back(text, scenario):
                return text
    return tomli_w.dumps(data)


def save_scenario(
    scenario: Scenario,
    path: str | os.PathLike[str],
    *,
    overwrite: bool = False,
    template: str | None = None,
) -> Path:
    """Write atomically (:func:`planner.textfiles.write_user_text`); refuses to replace an
    existing file unless ``overwrite`` is set, so nothing saved is lost. ``template``: the text
    of the file the scenario came from, whose comments and layout are kept
    (:func:`scenario_to_toml`). A replaced file keeps its permissions."""
    return write_user_text(path, scenario_to_toml(scenario, template=template), overwrite=overwrite)


# ---------------------------------------------------------------------------------------------
# Writing into the layout of an existing file (tomlkit keeps comments and formatting)

_ABSENT = object()


def _reads_back(text: str, scenario: Scenario) -> bool:
    try:
        return parse_scenario(text, "<saved text>") == scenario
    except InputError:
        return False


def _patched(template: str, data: dict[str, Any], *, leave_out_empty: bool) -> str | None:
    """``template`` with the values of ``data`` written into it, or None when the template is
    not a valid scenario (there is then no reliable "before" to tell what changed)."""
    import tomlkit
    from tomlkit.exceptions import TOMLKitError

    try:
        before = parse_scenario(template, "<template>").model_dump(mode="json", exclude_none=True)
        document = tomlkit.parse(template.removeprefix(BYTE_ORDER_MARK))
    except (InputError, TOMLKitError):
        return None
    try:
        _patch_table(document, before, data, leave_out_empty)
        return tomlkit.dumps(document)
    except (TOMLKitError, ValueError, TypeError, KeyError, IndexError):
        return None  # a layout tomlkit cannot edit in place: the plain text is written instead


def _same(a: object, b: object) -> bool:
    return _canonical(a) == _canonical(b)


def _canonical(value: object) -> str:
    return json.dumps(value, sort_keys=True, separators=(",", ":"))


def _patch_table(table: Any, before: Mapping[str, Any], after: Mapping[str, Any], leave_out_empty):
    """Make ``table`` (a tomlkit table or document whose data validated to ``before``) hold
    ``after``: keys whose value did not change are left as written (even when the file wrote
    them differently, e.g. ``40`` for ``40.0``); keys the file left to their default stay out."""
    from tomlkit.items import AoT, InlineTable, Table

    written = set(table.keys())
    for key in written:
        if key in before and key not in after:
            del table[key]
    for key, value in after.items():
        old = before.get(key, _ABSENT)
        if old is not _ABSENT and _same(old, value):
            continue
        if key not in written:
            table[key] = _fresh(value, leave_out_empty)
            continue
        if leave_out_empty and value == []:
            del table[key]  # as a file that never had any: the schema's default
            continue
        item = table[key]
        if (
            isinstance(item, Table | InlineTable)
            and isinstance(old, dict)
            and isinstance(value, dict)
        ):
            _patch_table(item, old, value, leave_out_empty)
        elif (
            isinstance(item, AoT)
            and isinstance(old, list)
            and isinstance(value, list)
            and len(item) == len(old)
            and all(isinstance(element, dict) for element in value)
        ):
            _patch_tables(item, old, value, leave_out_empty)
        else:
            table[key] = _fresh(value, leave_out_empty)


def _patch_tables(tables: Any, before: list, after: list, leave_out_empty) -> None:
    """A list of tables: items left as they were keep their table (and its comments) even when
    others were inserted or deleted around them; an item changed in place is patched.

    In the file, the comment and blank lines above an item's header belong to the end of the
    item before it. They are taken off first and put back above the same item afterwards, so a
    comment stays with the table it describes, and the lines after the last item (above the
    next section) stay there."""
    from tomlkit.items import Whitespace

    trails = [_take_trailing(table) for table in tables]
    leads: list[list | None] = [None, *trails[:-1]]  # above the first: in the parent, untouched
    tail = trails[-1] if trails else []
    matcher = SequenceMatcher(
        a=[_canonical(x) for x in before], b=[_canonical(x) for x in after], autojunk=False
    )
    # From the end, so the positions of the blocks still to do do not move.
    for tag, i1, i2, j1, j2 in reversed(matcher.get_opcodes()):
        if tag == "equal":
            continue
        common = min(i2 - i1, j2 - j1)
        for k in range(common):
            _patch_table(tables[i1 + k], before[i1 + k], after[j1 + k], leave_out_empty)
        for k in reversed(range(i1 + common, i2)):
            del tables[k]
            del leads[k]
        for k in range(j1 + common, j2):
            tables.insert(i1 + (k - j1), _fresh_table(after[k], leave_out_empty, blank=False))
            leads.insert(i1 + (k - j1), None)
    for i in range(1, len(tables)):
        _put_trailing(
            tables[i - 1], leads[i] if leads[i] is not None else [(None, Whitespace("\n"))]
        )
    if len(tables):
        _put_trailing(tables[len(tables) - 1], tail)


def _innermost_last(table: Any) -> Any:
    """The table whose end is the end of ``table`` in the file (its last sub-table, if any)."""
    from tomlkit.items import AoT, Table

    body = table.value.body
    while body and body[-1][0] is not None and isinstance(body[-1][1], Table | AoT):
        last = body[-1][1]
        if isinstance(last, AoT):
            if not len(last):
                break
            last = last[len(last) - 1]
        table = last
        body = table.value.body
    return table


def _take_trailing(table: Any) -> list:
    """Remove and return the comments and blank lines at the end of ``table`` in the file."""
    from tomlkit.items import Comment, Whitespace

    body = _innermost_last(table).value.body
    taken = []
    while body and body[-1][0] is None and isinstance(body[-1][1], Comment | Whitespace):
        taken.insert(0, body.pop())
    return taken


def _put_trailing(table: Any, items: list) -> None:
    _innermost_last(table).value.body.extend(items)


def _fresh(value: Any, leave_out_empty: bool) -> Any:
    import tomlkit

    if isinstance(value, dict):
        return _fresh_table(value, leave_out_empty)
    if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        tables = tomlkit.aot()
        for element in value:
            tables.append(_fresh_table(element, leave_out_empty))
        return tables
    return tomlkit.item(value)


def _fresh_table(data: Mapping[str, Any], leave_out_empty: bool, *, blank: bool = True) -> Any:
    """A new table: plain values first, then sub-tables (an empty line between them, and after
    the table when ``blank``); empty lists (the schema's default) left out when
    ``leave_out_empty``."""
    import tomlkit

    table = tomlkit.table()
    nested = []
    for key, value in data.items():
        if leave_out_empty and value == []:
            continue
        if isinstance(value, dict) or (
            isinstance(value, list) and value and all(isinstance(v, dict) for v in value)
        ):
            nested.append((key, value))
        else:
            table.add(key, tomlkit.item(value))
    if nested or blank:
        table.add(tomlkit.nl())
    for key, value in nested:
        table.add(key, _fresh(value, leave_out_empty))
    return table
