"""Reading a user's text file with a size cap, and writing one without losing anything: both
with errors that name the file."""

from __future__ import annotations

import contextlib
import os
import stat
import tempfile
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


TEMPORARY_SUFFIX = ".tmp"
STALE_SECONDS = 600.0  # a temporary this old belongs to no save still running: removed


def clean_stale_temporaries(folder: str | os.PathLike[str]) -> int:
    """Remove the temporaries of saves that were killed before their rename (hidden
    ``.NAME.*.tmp`` files older than STALE_SECONDS); returns how many went."""
    import time

    removed = 0
    cutoff = time.time() - STALE_SECONDS
    with contextlib.suppress(OSError):
        for candidate in Path(folder).glob(f".*{TEMPORARY_SUFFIX}"):
            with contextlib.suppress(OSError):
                if candidate.is_file() and candidate.stat().st_mtime < cutoff:
                    candidate.unlink()
                    removed += 1
    return removed


def write_user_text(
    path: str | os.PathLike[str], text: str | bytes, *, overwrite: bool = False
) -> Path:
    """Write ``text`` (UTF-8; bytes, e.g. an image or a Parquet table, as given) atomically: a
    temporary file in the same folder, flushed to disk (fsync),
    then renamed over the name, so a crash leaves either the old file or the new one, never a
    half-written one. An existing file is kept (InputError) unless ``overwrite``.

    Permissions: a new file gets the usual ones (what a plain ``open`` gives under the user's
    umask: 0644 under the common umask 022), never the 0600 of a bare temporary file; a file
    replaced keeps its own mode. Replacing a symbolic link writes the file it points to, so the
    link stays a link.
    """
    path = Path(path)
    if overwrite and path.is_symlink():
        path = path.resolve()
    clean_stale_temporaries(path.parent)
    exists = Problem(str(path), "(file)", "exists already; choose another name (or overwrite)")
    if path.exists() and not overwrite:
        raise InputError([exists])
    mode = _kept_mode(path) if overwrite else None
    try:
        handle, temporary = tempfile.mkstemp(
            dir=path.parent, prefix=f".{path.name}.", suffix=TEMPORARY_SUFFIX
        )
    except OSError as error:
        raise InputError(
            [Problem(str(path), "(file)", f"cannot write: {error.strerror or error}")]
        ) from None
    try:
        data = text if isinstance(text, bytes) else text.encode("utf-8")
        with os.fdopen(handle, "wb") as stream:
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        os.chmod(temporary, 0o666 & ~_umask() if mode is None else mode)
        if overwrite:
            os.replace(temporary, path)
        else:
            os.link(temporary, path)  # fails if the name appeared meanwhile: no overwrite race
            os.unlink(temporary)
        _sync_folder(path.parent)
    except FileExistsError:
        os.unlink(temporary)
        raise InputError([exists]) from None
    except OSError as error:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        raise InputError(
            [Problem(str(path), "(file)", f"cannot write: {error.strerror or error}")]
        ) from None
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(temporary)
        raise
    return path


def _kept_mode(path: Path) -> int | None:
    """The permission bits of the file about to be replaced (None: no such file)."""
    try:
        return stat.S_IMODE(path.stat().st_mode)
    except OSError:
        return None


def _umask() -> int:
    """The process umask. Read from /proc where there is one: setting and restoring it (the
    only portable way to read it) would, for an instant, change it for every thread."""
    with contextlib.suppress(OSError, ValueError):
        for line in Path("/proc/self/status").read_text().splitlines():
            if line.startswith("Umask:"):
                return int(line.split()[1], 8)
    mask = os.umask(0o022)
    os.umask(mask)
    return mask


def _sync_folder(folder: Path) -> None:
    """Flush the folder entry too, so the rename itself survives a power cut (POSIX)."""
    with contextlib.suppress(OSError, AttributeError):
        descriptor = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(descriptor)
        finally:
            os.close(descriptor)


def check_output(path: str | os.PathLike[str], option: str, *, overwrite: bool = False) -> None:
    """Fail early, before any long work, when ``path`` cannot take the output asked with
    ``option`` (e.g. "--html"): its folder does not exist or is not writable, it names a folder,
    or it exists already and ``overwrite`` is not set."""
    target = Path(path)
    folder = target.parent
    if target.is_dir():
        raise InputError([Problem(str(target), option, "is a folder; give a file name")])
    if target.exists() and not overwrite:
        reason = "exists already; choose another name, or add --force to replace it"
        raise InputError([Problem(str(target), option, reason)])
    if not folder.is_dir():
        raise InputError([Problem(str(target), option, f"its folder {folder} does not exist")])
    if not os.access(folder, os.W_OK):
        raise InputError([Problem(str(target), option, f"its folder {folder} is not writable")])
