"""The demo scenarios shipped with the planner (invented lakes) and their synthetic monitoring
record: found in one way, through :mod:`importlib.resources`, in a source checkout and in an
installed wheel alike.

The files live once, in the repository's top-level ``scenarios/`` folder; pyproject.toml maps
that folder onto the data package ``planner.demo_files``, which a built wheel carries inside
``planner/``. Nothing here reads numpy or the scenario schema on import.
"""

from __future__ import annotations

import os
from pathlib import Path, PurePosixPath

from planner.errors import InputError, Problem, listing

DEMO_PACKAGE = "planner.demo_files"
"""The data package holding the demos (the ``scenarios/`` folder of a source checkout)."""
SCENARIO_SUFFIX = ".toml"
RECORD_FOLDER = "data"
"""Where the demos' monitoring records sit, beside the scenarios."""
RECORD_SUFFIX = ".csv"
SOURCE = "<demos>"
"""How a problem with a demo name is reported (there is no file the user named)."""


def demo_folder() -> Path:
    """The folder of the bundled demos, a real folder on disk (the web app lists it)."""
    from importlib import resources  # on first use: it loads tempfile and random

    folder = resources.files(DEMO_PACKAGE)
    if not isinstance(folder, Path):  # e.g. a planner imported from a zip archive
        raise RuntimeError(f"the demos of {DEMO_PACKAGE} are not a folder on disk: {folder}")
    return folder


def demo_names() -> list[str]:
    """The bundled demo scenarios by name (their file names without ``.toml``), sorted."""
    return sorted(
        p.stem
        for p in demo_folder().iterdir()
        if p.suffix == SCENARIO_SUFFIX and p.is_file() and not p.name.startswith(".")
    )


def demo_files() -> list[str]:
    """Every bundled file as a path relative to :func:`demo_folder`, with ``/`` between parts:
    the scenarios (``alder-mere.toml``), then the monitoring records (``data/....csv``)."""
    records = demo_folder() / RECORD_FOLDER
    csv = (
        sorted(p.name for p in records.iterdir() if p.suffix == RECORD_SUFFIX and p.is_file())
        if records.is_dir()
        else []
    )
    return [name + SCENARIO_SUFFIX for name in demo_names()] + [
        f"{RECORD_FOLDER}/{name}" for name in csv
    ]


def demo_path(name: str) -> Path:
    """The file of one bundled demo: a scenario by name (``"alder-mere"``, with or without
    ``.toml``) or any file of :func:`demo_files` (``"data/alder-mere-monitoring.csv"``).
    An unknown name raises :class:`planner.errors.InputError` listing the demos."""
    if name in demo_names():
        return demo_folder() / (name + SCENARIO_SUFFIX)
    if name in demo_files():
        return demo_folder().joinpath(*PurePosixPath(name).parts)
    reason = f"no bundled demo of that name; the demos are {listing(demo_names())}"
    raise InputError([Problem(SOURCE, name, reason)])


def copy_demos(
    folder: str | os.PathLike[str], *, overwrite: bool = False, option: str = "--copy-to"
) -> list[Path]:
    """Copy every bundled file (:func:`demo_files`, keeping ``data/``) into ``folder`` for
    editing, creating the folder when its parent exists. Every target is checked before the
    first is written (:func:`planner.textfiles.check_output`): existing files are kept
    (one InputError naming each of them and ``option``) unless ``overwrite``. Returns the files
    written."""
    from planner.textfiles import check_output, write_user_text

    folder = Path(folder)
    names = demo_files()
    targets = [folder.joinpath(*PurePosixPath(name).parts) for name in names]
    if folder.exists() and not folder.is_dir():
        raise InputError([Problem(str(folder), option, "is a file; give a folder")])
    if not folder.exists():
        check_output(folder, option)  # a new folder: its parent exists and is writable
    problems = []
    for target in targets:
        if target.parent.is_dir():
            try:
                check_output(target, option, overwrite=overwrite)
            except InputError as error:
                problems += error.problems
        elif target.parent.exists():
            problems.append(Problem(str(target.parent), option, "is a file; give a folder"))
    if problems:
        raise InputError(list(dict.fromkeys(problems)))  # every file in the way, once
    written = []
    for name, target in zip(names, targets, strict=True):
        target.parent.mkdir(parents=True, exist_ok=True)
        text = demo_path(name).read_text(encoding="utf-8")
        written.append(write_user_text(target, text, overwrite=overwrite))
    return written
