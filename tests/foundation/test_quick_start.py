"""The README's quick start and CI run the same test command; the suite brings or names what windows need."""

import importlib.util
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def _conftest():
    spec = importlib.util.spec_from_file_location("suite_conftest", ROOT / "tests" / "conftest.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _quick_start_commands() -> list[str]:
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    section = re.search(r"^## Quick start\n(.*?)(?=^## )", text, re.S | re.M).group(1)
    # the section's first code block (indented lines up to the first text line)
    block = re.match(r"\s*\n((?:    \S.*\n)+)", section).group(1)
    return [line.strip() for line in block.splitlines()]


def test_readme_quick_start_is_two_commands_and_the_second_runs_the_tests():
    commands = _quick_start_commands()
    assert len(commands) == 2, commands
    assert commands[1] == "python -m pytest -q"


def test_ci_runs_the_very_test_command_of_the_readme():
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    runs = [line.strip() for line in ci.splitlines()
            if "pytest" in line and not line.lstrip().startswith(("#", "echo"))]
    assert runs == [_quick_start_commands()[1]], runs


def test_display_plan_installs_as_root_and_tells_otherwise():
    plan = _conftest().plan
    assert plan(":0", False, ["xvfb"], is_root=False, have_apt=False) == "use"
    assert plan(None, True, [], is_root=False, have_apt=False) == "start"
    assert plan(None, False, ["xvfb"], is_root=True, have_apt=True) == "install"
    assert plan(None, True, ["libgl1-mesa-dri"], is_root=True, have_apt=True) == "install"
    assert plan(None, False, ["xvfb"], is_root=False, have_apt=True) == "tell"
    assert plan(None, False, ["xvfb"], is_root=True, have_apt=False) == "tell"
    assert plan(None, False, ["xvfb"], is_root=True, have_apt=True, apt_allowed=False) == "tell"


def test_missing_packages_are_named_and_the_hint_installs_them():
    mod = _conftest()
    installed = {"xvfb", "libgl1"}
    assert mod.missing_packages(("xvfb", "libgl1", "libgl1-mesa-dri"), query=installed.__contains__) \
        == ["libgl1-mesa-dri"]
    for package in ("xvfb", "libgl1-mesa-dri"):
        assert package in mod.WINDOW_PACKAGES and package in mod.INSTALL_HINT
    # the README tells a developer without root the same packages
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert mod.INSTALL_HINT in readme
