"""Reading a user's text file with a size cap and errors that name the file."""

from __future__ import annotations

import os
from pathlib import Path

from planner.errors import InputError, Problem


def read_user_text(path: str | os.PathLike[str], limit: int, *, encoding: str = "utf-8") -> str:
    """The file's text; InputError (field "(file)") when missing, unreadable, over ``limit``
    bytes or not text in ``encoding``."""
    source = str(path)
    path = Path(path)
    try:
        if path.stat().st_size > limit:
            raise InputError([Problem(source, "(file)", f"larger than {limit} bytes")])
        raw = path.read_bytes()
    except OSError as error:
        raise InputError([Problem(source, "(file)", f"cannot read: {error.strerror}")]) from None
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError:
        raise InputError([Problem(source, "(file)", "not UTF-8 text")]) from None
