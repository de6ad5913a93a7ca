"""Error types a user can cause, kept apart from internal failures (which are bugs), and the
one way a message shows a value taken from the user's input."""

from __future__ import annotations

import datetime
from collections.abc import Iterable, Mapping
from dataclasses import dataclass

MAX_QUOTED = 60
"""Most characters of a value a message repeats; a longer value shows its start and its length."""
MAX_REASON = 600
"""Most characters of a reason (a last guard, for messages that quote something not cut short)."""
MAX_FIELD = 200
"""Most characters of a field path (keys are cut short one by one; this guards the whole)."""
MAX_PROBLEMS = 20
"""Most problems one error lists; the rest are counted in a last line."""


def shorten(text: str, limit: int = MAX_QUOTED) -> str:
    """``text`` itself when it has at most ``limit`` characters, else its first ``limit``
    characters and how long it was: ``abc... (900000 characters)``."""
    if len(text) <= limit:
        return text
    return f"{text[:limit]}... ({len(text)} characters)"


def quote(value: object) -> str:
    """How a message shows a value from the user's input: spelled as in TOML (``true``,
    ``'text'``, ``1.5``), text longer than MAX_QUOTED characters by its start and its length
    (as :func:`shorten`), lists and tables by their size only (never their contents, which may
    be huge or nested hundreds of levels deep). Every message that repeats input uses this."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        if len(value) <= MAX_QUOTED:
            return repr(value)
        return f"{value[:MAX_QUOTED]!r}... ({len(value)} characters)"
    if isinstance(value, int):
        if value.bit_length() > 64:  # str() of a huge integer is slow, then refused by Python
            return f"an integer of about {int(value.bit_length() * 0.30103) + 1} digits"
        return str(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, list | tuple):
        return f"a list of {len(value)} item{'' if len(value) == 1 else 's'}" if value else "[]"
    if isinstance(value, Mapping):
        return f"a table of {len(value)} key{'' if len(value) == 1 else 's'}" if value else "{}"
    if isinstance(value, datetime.date | datetime.time):
        return f"the date or time {value.isoformat()}"
    if value is None:
        return "nothing"
    return f"a {type(value).__name__}"


def listing(names: Iterable[object], limit: int = 12) -> str:
    """Names for a message, comma-separated: at most ``limit`` of them (each cut short), then
    how many there are in all."""
    names = list(names)
    shown = ", ".join(shorten(str(name)) for name in names[:limit])
    return shown if len(names) <= limit else f"{shown}, ... ({len(names)} in all)"


def describe_key(key: object) -> str:
    """One part of a field path: a plain key as it is (cut short), anything odd (empty, with a
    dot or with control characters) quoted so that the path still reads as one line."""
    if isinstance(key, int) and not isinstance(key, bool):
        return str(key)
    if isinstance(key, str) and key and key.isprintable() and "." not in key:
        return shorten(key)
    return quote(key)


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a user's input.

    ``source`` is the file (or "<text>"), ``field`` the dotted path inside it
    (``schedules.2.floor``) and ``reason`` a sentence that says what to do. An over-long field
    or reason is cut short (:func:`shorten`), so that no message repeats a huge value.
    """

    source: str
    field: str
    reason: str

    def __post_init__(self) -> None:
        object.__setattr__(self, "field", shorten(self.field, MAX_FIELD))
        object.__setattr__(self, "reason", shorten(self.reason, MAX_REASON))

    def __str__(self) -> str:
        return f"{self.source}: {self.field}: {self.reason}"


def capped(problems: list[Problem], source: str, limit: int = MAX_PROBLEMS) -> list[Problem]:
    """The first ``limit`` problems and, when there were more, a last one that counts them."""
    if len(problems) <= limit:
        return list(problems)
    more = len(problems) - limit
    note = f"{more} more problem{'' if more == 1 else 's'} not shown; fix the ones above first"
    return [*problems[:limit], Problem(source, "(file)", note)]


class InputError(Exception):
    """Invalid user input: carries one or more problems, each naming file, field and reason."""

    def __init__(self, problems: list[Problem]):
        if not problems:
            raise ValueError("InputError needs at least one problem")
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class FormulaError(ValueError):
    """A formula the whitelist parser refuses; the message says why and what is allowed."""
