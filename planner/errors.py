"""Error types a user can cause, kept apart from internal failures (which are bugs)."""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a user's input.

    ``source`` is the file (or "<text>"), ``field`` the dotted path inside it
    (``schedules.2.floor``) and ``reason`` a sentence that says what to do.
    """

    source: str
    field: str
    reason: str

    def __str__(self) -> str:
        return f"{self.source}: {self.field}: {self.reason}"


class InputError(Exception):
    """Invalid user input: carries one or more problems, each naming file, field and reason."""

    def __init__(self, problems: list[Problem]):
        if not problems:
            raise ValueError("InputError needs at least one problem")
        self.problems = list(problems)
        super().__init__("\n".join(str(p) for p in self.problems))


class FormulaError(ValueError):
    """A formula the whitelist parser refuses; the message says why and what is allowed."""
