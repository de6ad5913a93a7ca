"""Scenario files for the app: the folders it lists, reading a pick or an upload, saving.

The browser only ever sends a folder number and a file name that must appear in that folder's
listing, so no path from a request reaches the file system.

Saving writes the scenario into the layout of the file it came from (``template``: its text),
so comments, blank lines and array layout survive (``planner.scenario.io.scenario_to_toml``).
"""

from __future__ import annotations

import base64
import binascii
import re
from dataclasses import dataclass
from pathlib import Path

import planner
from planner.errors import InputError, Problem
from planner.scenario import Scenario, load_scenario, parse_scenario, save_scenario
from planner.scenario.io import MAX_SCENARIO_BYTES, toml_data
from planner.textfiles import read_user_text

SUFFIX = ".toml"
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9 ._-]{0,79}$")


def default_scenario_dir() -> Path:
    """The bundled demo scenarios (:func:`planner.demos.demo_folder`): the scenarios/ folder of
    a source checkout, the installed package's copy in a wheel."""
    return planner.demos.demo_folder()


@dataclass(frozen=True)
class Folder:
    label: str
    path: Path


def scenario_files(folder: Path) -> list[Path]:
    """The scenario files of a folder, sorted by name (hidden and temporary files skipped)."""
    try:
        return sorted(
            p
            for p in folder.iterdir()
            if p.suffix == SUFFIX and p.is_file() and not p.name.startswith(".")
        )
    except OSError:
        return []


def scenario_title(path: Path) -> str:
    """The scenario's name from its file, without validating it (for the picker's labels)."""
    try:
        if path.stat().st_size > MAX_SCENARIO_BYTES:
            return ""
        name = toml_data(path.read_text(encoding="utf-8"), str(path)).get("name", "")
    except (OSError, UnicodeDecodeError, InputError):
        return ""  # a broken file is listed by its name; loading it says what is wrong
    return name if isinstance(name, str) else ""


def picker_options(folders: list[Folder]) -> list[dict]:
    """Dropdown options: value ``"<folder number>/<file name>"``, label file name and title."""
    options = []
    for number, folder in enumerate(folders):
        for path in scenario_files(folder.path):
            title = scenario_title(path)
            label = f"{path.name}: {title}" if title else path.name
            if len(folders) > 1:
                label = f"{folder.label} / {label}"
            options.append({"label": label, "value": f"{number}/{path.name}"})
    return options


def resolve_choice(folders: list[Folder], value: str) -> Path:
    """The file a picker value names, only if it is listed; else InputError."""
    number, _, name = str(value).partition("/")
    if number.isdigit() and int(number) < len(folders):
        folder = folders[int(number)]
        for path in scenario_files(folder.path):
            if path.name == name:
                return path
    raise InputError([Problem(str(value), "(file)", "no such scenario in the listed folders")])


def listed_text(folders: list[Folder], value: str) -> tuple[Path, str]:
    """The path and text of the listed file a picker value names; InputError naming the file
    when it is not listed or cannot be read."""
    path = resolve_choice(folders, value)
    return path, read_user_text(path, MAX_SCENARIO_BYTES)


def is_bundled_demo(path: Path) -> bool:
    """Whether ``path`` is one of the demos shipped with the planner (never overwritten)."""
    try:
        return path.resolve().parent == default_scenario_dir().resolve()
    except OSError:
        return False


def read_choice(folders: list[Folder], value: str) -> tuple[str, Scenario]:
    """Load the picked file: (its name, the scenario). Raises InputError as ``planner check``."""
    path = resolve_choice(folders, value)
    return path.name, load_scenario(path)


def upload_text(contents: str, source: str, limit: int, *, encoding: str = "utf-8") -> str:
    """The text of an uploaded file (a base64 data URL), refused above ``limit`` bytes or when
    it is not text; problems name the file."""
    _, _, payload = str(contents).partition(",")
    too_large = Problem(source, "(file)", f"larger than {limit} bytes")
    if len(payload) > 4 * (limit // 3 + 2):
        raise InputError([too_large])
    try:
        raw = base64.b64decode(payload, validate=True)
    except (binascii.Error, ValueError):
        raise InputError(
            [Problem(source, "(file)", "could not be read (not a file upload)")]
        ) from None
    if len(raw) > limit:
        raise InputError([too_large])
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError:
        raise InputError([Problem(source, "(file)", "not UTF-8 text")]) from None


def read_upload(contents: str, filename: str | None) -> Scenario:
    """Validate an uploaded scenario, size-capped, with ``planner check``'s messages
    (``file: field: reason``)."""
    source = filename or "uploaded file"
    return parse_scenario(upload_text(contents, source, MAX_SCENARIO_BYTES), source)


def save_name(text: str | None) -> str:
    """A plain file name for "Save as" (``.toml`` added); InputError naming the field if not."""
    name = (text or "").strip()
    if name and not name.endswith(SUFFIX):
        name += SUFFIX
    stem = name[: -len(SUFFIX)] if name.endswith(SUFFIX) else name
    if not stem or not _NAME.fullmatch(stem) or ".." in name:
        raise InputError(
            [
                Problem(
                    "save as",
                    "file name",
                    "use letters, digits, spaces, '.', '_' or '-' (up to 80), e.g. my-plan.toml",
                )
            ]
        )
    return name


def save(
    scenario: Scenario,
    folder: Path,
    name: str,
    *,
    overwrite: bool = False,
    template: str | None = None,
) -> Path:
    """Write atomically through the planner; never replaces a file unless ``overwrite``. The
    path is decided here from the folder and a plain name (checked again: whatever a request
    carried, nothing outside ``folder`` is written). ``template``: the text whose comments and
    layout the file keeps."""
    name = save_name(name)
    target = folder / name
    if target.resolve().parent != folder.resolve():
        raise InputError([Problem("save as", "file name", "must name a file in the save folder")])
    try:
        return save_scenario(scenario, target, overwrite=overwrite, template=template)
    except OSError as error:
        raise InputError(
            [Problem(str(target), "(file)", f"cannot write: {error.strerror or error}")]
        ) from None


def save_back(scenario: Scenario, folders: list[Folder], value: str, template: str) -> Path:
    """Plain "Save": replace the listed file ``value`` names (the one the scenario was opened
    from) keeping its comments, layout and permissions; the bundled demos are never replaced."""
    path = resolve_choice(folders, value)
    if is_bundled_demo(path):
        reason = "is one of the bundled demos and is kept as it is: use Save as"
        raise InputError([Problem(path.name, "(file)", reason)])
    return save_scenario(scenario, path, overwrite=True, template=template)
