"""The project's own promises: README commands, CI running the README's test command, cautions."""

from __future__ import annotations

import re

from .conftest import ROOT


def _readme_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```\n(.+?)\n```", text.split("## ")[0], flags=re.S)


def test_readme_has_exactly_two_setup_commands():
    commands = _readme_commands()
    assert len(commands) == 2
    assert "policy demo" in commands[0]
    assert '".[test]"' in commands[1] and "pytest" in commands[1]


def test_ci_runs_the_readme_test_command():
    test_command = _readme_commands()[1]
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    # CI makes its own fresh environment, then runs the README's install-and-test part verbatim
    assert test_command.split(" && ", 2)[2] in ci


def test_readme_shows_the_cautions():
    text = " ".join((ROOT / "README.md").read_text(encoding="utf-8").lower().split())
    assert "not an assessment of any individual" in text
    assert "local law" in text and "discretion" in text
