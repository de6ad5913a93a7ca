"""Packaging: the demo scenarios live once, in the top-level scenarios/ folder, and travel inside a
built wheel as ``planner.demo_files``; ``planner.demos`` finds them in a source checkout and in a
non-editable install alike; ``planner demos`` lists them and copies them for editing.

The expected demos are read independently of the planner: the files of scenarios/ (``glob``) and
their names and schedules with the standard library's ``tomllib``. The wheel test builds the
distribution with pip, installs it into a fresh virtual environment (dependencies from the
registry, through pip's cache) and runs the installed command from a folder outside the
repository.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
import sys
import tomllib
import zipfile
from pathlib import Path

import pytest

import planner
from planner.cli import EXIT_INPUT, EXIT_OK, main
from planner.errors import InputError

ROOT = Path(__file__).resolve().parent.parent
SCENARIOS = ROOT / "scenarios"
SCENARIO_FILES = sorted(SCENARIOS.glob("*.toml"))
RECORD_FILES = sorted((SCENARIOS / "data").glob("*.csv"))
BUNDLED = [p.relative_to(SCENARIOS).as_posix() for p in SCENARIO_FILES + RECORD_FILES]
"""Every file the demos consist of, relative to scenarios/ (``data/...csv`` for records)."""
NOT_BUILT = (".git", ".venv", "build", "dist", "*.egg-info", "__pycache__", ".*_cache", "cache")
"""What a build from a copy of the checkout leaves behind: local environments and leftovers."""


def _title(path: Path) -> str:
    return tomllib.loads(path.read_text(encoding="utf-8"))["name"]


def test_there_are_demos_to_ship():
    assert len(SCENARIO_FILES) >= 2 and RECORD_FILES


def test_the_checkout_demos_are_the_files_of_scenarios_itself():
    """No second copy: the package finds the top-level folder (through the editable install)."""
    assert planner.demos.demo_folder().resolve() == SCENARIOS.resolve()
    assert planner.demo_names() == [p.stem for p in SCENARIO_FILES]
    assert planner.demos.demo_files() == BUNDLED
    assert planner.demo_path("alder-mere") == planner.demo_path("alder-mere.toml")
    assert planner.demo_path("alder-mere").resolve() == (SCENARIOS / "alder-mere.toml").resolve()
    record = RECORD_FILES[0]
    assert planner.demo_path(f"data/{record.name}").resolve() == record.resolve()


def test_the_web_app_lists_the_bundled_demos_by_default():
    from webapp.files import default_scenario_dir

    assert default_scenario_dir() == planner.demos.demo_folder()


@pytest.mark.parametrize("name", ["no-such-lake", "../pyproject.toml", "data", ""])
def test_an_unknown_demo_is_an_input_error_listing_the_demos(name):
    with pytest.raises(InputError) as caught:
        planner.demo_path(name)
    (problem,) = caught.value.problems
    assert problem.field == name and "alder-mere" in problem.reason


def test_demos_lists_each_demo_with_its_name(capsys):
    assert main(["demos"]) == EXIT_OK
    lines = capsys.readouterr().out.splitlines()
    assert [line.split()[0] for line in lines] == [p.stem for p in SCENARIO_FILES]
    for line, path in zip(lines, SCENARIO_FILES, strict=True):
        assert line.endswith(_title(path))


def _copied(folder: Path) -> dict[str, bytes]:
    return {name: (folder / name).read_bytes() for name in BUNDLED if (folder / name).exists()}


def test_copy_to_writes_the_demos_as_they_are(tmp_path, capsys):
    target = tmp_path / "my-lakes"  # a new folder in an existing one
    assert main(["demos", "--copy-to", str(target)]) == EXIT_OK
    assert _copied(target) == {name: (SCENARIOS / name).read_bytes() for name in BUNDLED}
    assert sorted(p.relative_to(target).as_posix() for p in target.rglob("*.*")) == sorted(BUNDLED)
    for path in sorted(target.glob("*.toml")):
        assert main(["check", str(path)]) == EXIT_OK
    capsys.readouterr()


def test_copy_to_keeps_existing_files_unless_forced(tmp_path, capsys):
    """Every target is checked before the first is written: a refused copy writes nothing."""
    assert main(["demos", "--copy-to", str(tmp_path)]) == EXIT_OK
    edited = tmp_path / BUNDLED[-1]  # the last one written: the check must come first
    edited.write_text("my edits\n", encoding="utf-8")
    removed = [tmp_path / name for name in BUNDLED[:-2]]
    for path in removed:
        path.unlink()
    kept = tmp_path / BUNDLED[-2]
    capsys.readouterr()

    assert main(["demos", "--copy-to", str(tmp_path)]) == EXIT_INPUT
    err = capsys.readouterr().err.splitlines()
    assert [line.split(": ")[:2] for line in err] == [
        [str(kept), "--copy-to"],
        [str(edited), "--copy-to"],
    ]
    assert all("exists already" in line and "--force" in line for line in err)
    assert edited.read_text(encoding="utf-8") == "my edits\n"
    assert not any(path.exists() for path in removed)

    assert main(["demos", "--copy-to", str(tmp_path), "--force"]) == EXIT_OK
    assert _copied(tmp_path) == {name: (SCENARIOS / name).read_bytes() for name in BUNDLED}


def test_copy_to_refuses_a_file_and_a_folder_without_parent(tmp_path, capsys):
    a_file = tmp_path / "notes.txt"
    a_file.write_text("keep\n", encoding="utf-8")
    assert main(["demos", "--copy-to", str(a_file)]) == EXIT_INPUT
    assert main(["demos", "--copy-to", str(tmp_path / "missing" / "lakes")]) == EXIT_INPUT
    err = capsys.readouterr().err
    assert f"{a_file}: --copy-to: is a file" in err
    assert "missing does not exist" in err
    assert a_file.read_text(encoding="utf-8") == "keep\n"
    assert not (tmp_path / "missing").exists()


# ---------------------------------------------------------------------------------------------
# A built wheel in a fresh virtual environment


def _run(command: list[str], cwd: Path, timeout: float = 600) -> subprocess.CompletedProcess:
    """Run outside the checkout, with nothing of it on the module path."""
    env = {k: v for k, v in os.environ.items() if k not in ("PYTHONPATH", "VIRTUAL_ENV")}
    result = subprocess.run(
        command, cwd=cwd, env=env, capture_output=True, text=True, timeout=timeout
    )
    assert result.returncode == 0, f"{command}\n{result.stdout}\n{result.stderr}"
    return result


@pytest.fixture(scope="module")
def installed(tmp_path_factory):
    """(wheel, virtual environment, a work folder outside the repository)."""
    base = tmp_path_factory.mktemp("wheel")
    source = base / "source"  # a copy, so the build writes nothing into the checkout
    shutil.copytree(ROOT, source, ignore=shutil.ignore_patterns(*NOT_BUILT))
    dist = base / "dist"
    _run([sys.executable, "-m", "pip", "wheel", "--no-deps", "-w", str(dist), str(source)], base)
    (wheel,) = dist.glob("regime_planner-*.whl")
    venv = base / "venv"
    _run([sys.executable, "-m", "venv", str(venv)], base)  # no system site-packages
    install = [str(venv / "bin" / "python"), "-m", "pip", "install", "--no-compile", str(wheel)]
    _run(install, base, timeout=900)  # no byte-compiling of the dependencies: much quicker
    work = base / "work"
    work.mkdir()
    return wheel, venv, work


@pytest.mark.slow
def test_the_wheel_carries_every_demo_file(installed):
    wheel, _, _ = installed
    names = set(zipfile.ZipFile(wheel).namelist())
    missing = [name for name in BUNDLED if f"planner/demo_files/{name}" not in names]
    assert not missing, f"not in {wheel.name}: {missing}"


@pytest.mark.slow
def test_the_installed_planner_finds_its_own_demos(installed):
    _, venv, work = installed
    code = (
        "import json, planner, webapp.files; print(json.dumps([planner.__file__, "
        "str(planner.demo_path('alder-mere')), str(webapp.files.default_scenario_dir())]))"
    )
    found = json.loads(_run([str(venv / "bin" / "python"), "-c", code], work).stdout)
    for path in map(Path, found):
        assert path.resolve().is_relative_to(venv.resolve()), path
        assert not path.resolve().is_relative_to(ROOT), path
    assert Path(found[1]).read_bytes() == (SCENARIOS / "alder-mere.toml").read_bytes()


@pytest.mark.slow
def test_the_installed_command_lists_checks_and_compares_a_demo(installed):
    _, venv, work = installed
    command = str(venv / "bin" / "planner")
    listed = _run([command, "demos"], work).stdout.splitlines()
    assert [line.split()[0] for line in listed] == [p.stem for p in SCENARIO_FILES]
    assert listed[0].endswith(_title(SCENARIO_FILES[0]))

    code = "import planner; print(planner.demo_path('alder-mere'))"
    demo = _run([str(venv / "bin" / "python"), "-c", code], work).stdout.strip()
    assert "valid" in _run([command, "check", demo], work).stdout
    compared = json.loads(_run([command, "compare", demo, "--json"], work).stdout)
    expected = tomllib.loads((SCENARIOS / "alder-mere.toml").read_text(encoding="utf-8"))
    assert [s["name"] for s in compared["schedules"]] == [s["name"] for s in expected["schedules"]]

    _run([command, "demos", "--copy-to", "lakes"], work)
    assert _copied(work / "lakes") == {name: (SCENARIOS / name).read_bytes() for name in BUNDLED}


def test_readme_caution_is_the_one_caution():
    """The README's caution is the project's one wording (planner.report.CAUTION), not a second
    one (project rule: one caution, shown by the README, the app and every briefing)."""
    from planner.report import CAUTION

    readme = (Path(__file__).resolve().parent.parent / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Caution", 1)[1].split("\n## ", 1)[0]
    words = " ".join(section.split())
    assert " ".join(CAUTION.removeprefix("Caution: ").split()).lower() == words.lower()
