"""The README's promises: its set-up commands, CI running its test command, documented commands."""

from __future__ import annotations

import doctest
import importlib
import pkgutil
import re

import pytest

import attrib
from attrib.cli import _COMMANDS, cli
from tests.conftest import ROOT


def _readme_commands() -> list[str]:
    text = (ROOT / "README.md").read_text()
    return re.findall(r"```bash\n(python3 -m venv[^\n]*)\n```", text)


def test_readme_has_exactly_two_setup_commands_demo_then_tests():
    commands = _readme_commands()
    assert len(commands) == 2
    assert commands[0].endswith("attrib demo")
    assert "pytest" in commands[1]


def test_ci_runs_the_readme_test_command_verbatim():
    ci = (ROOT / ".ci" / "run").read_text().splitlines()
    assert _readme_commands()[1] in ci


def test_readme_opens_with_the_job_paragraph():
    text = (ROOT / "README.md").read_text()
    first_paragraph = text.split("\n\n")[1]
    assert "route" in first_paragraph and "database" in first_paragraph


@pytest.mark.parametrize("name", sorted(_COMMANDS))
def test_every_command_has_help_and_is_in_the_user_guide(name):
    command = cli.get_command(None, name)
    assert command is not None and (command.help or "").strip()
    guide = (ROOT / "docs" / "user-guide.md").read_text()
    assert f"attrib {name}" in guide


def _modules():
    for package in ("attrib", "fingerprints"):
        module = importlib.import_module(package)
        yield module
        for info in pkgutil.walk_packages(module.__path__, prefix=f"{package}."):
            yield importlib.import_module(info.name)


def test_docstring_examples_run():
    failures = 0
    for module in _modules():
        failures += doctest.testmod(module, verbose=False).failed
    assert failures == 0


def test_version_is_reported():
    assert attrib.__version__
