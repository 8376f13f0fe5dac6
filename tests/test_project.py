"""The project's own promises: README commands, CI running the README's test command, cautions."""

from __future__ import annotations

import os
import re
import subprocess
import sys

from .conftest import ROOT

SETUP = "sh scripts/test-setup.sh"


def _readme_commands():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    return re.findall(r"```\n(.+?)\n```", text.split("## ")[0], flags=re.S)


def test_readme_has_exactly_two_setup_commands():
    commands = _readme_commands()
    assert len(commands) == 2
    assert "policy demo" in commands[0]
    assert '".[test]"' in commands[1] and "pytest" in commands[1]
    assert all("\n" not in command for command in commands)


def test_ci_runs_the_readme_test_command():
    # CI reads the command from README.md and runs it as it stands ...
    done = subprocess.run(["bash", ".ci/run", "--print-command"], capture_output=True, text=True,
                          cwd=ROOT, stdin=subprocess.DEVNULL, timeout=60)
    assert done.returncode == 0, done.stderr
    assert done.stdout == _readme_commands()[1] + "\n"
    # ... and sets nothing up of its own that the README's command would not do on a user's machine
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    code = "\n".join(line for line in ci.splitlines() if not line.lstrip().startswith("#"))
    for own_setup in ("apt-get", "chromium", "pip ", "venv", "activate", "test-setup"):
        assert own_setup not in code, own_setup


def test_readme_test_command_sets_up_the_system_first():
    steps = _readme_commands()[1].split(" && ")
    assert SETUP in steps
    setup = steps.index(SETUP)
    assert steps[:setup] == ["python3 -m venv .venv", ". .venv/bin/activate"]
    assert steps[setup + 1:] == ['pip install ".[test]"', "python -m pytest"]
    assert (ROOT / SETUP.split()[1]).is_file()


def _run_setup(tmp_path, chromium):
    """The setup script with ``POLICY_TEST_CHROMIUM`` set and apt-get and sudo that only log."""
    fake = tmp_path / "bin"
    fake.mkdir()
    log = tmp_path / "calls"
    for name in ("apt-get", "sudo"):
        (fake / name).write_text(f'#!/bin/sh\necho "{name} $*" >> "{log}"\n', encoding="utf-8")
        (fake / name).chmod(0o755)
    env = dict(os.environ, PATH=f"{fake}{os.pathsep}{os.environ['PATH']}", POLICY_TEST_CHROMIUM=str(chromium))
    done = subprocess.run(["sh", SETUP.split()[1]], capture_output=True, text=True, cwd=ROOT, env=env,
                          stdin=subprocess.DEVNULL, timeout=60)
    return done, (log.read_text(encoding="utf-8") if log.exists() else "")


def test_setup_script_leaves_a_present_browser_alone(tmp_path):
    done, calls = _run_setup(tmp_path, sys.executable)
    assert done.returncode == 0, done.stderr
    assert sys.executable in done.stdout
    assert calls == ""


def test_setup_script_stops_on_a_chosen_browser_that_is_not_there(tmp_path):
    missing = tmp_path / "no-such-chromium"
    done, calls = _run_setup(tmp_path, missing)
    assert done.returncode != 0
    assert "POLICY_TEST_CHROMIUM" in done.stderr and str(missing) in done.stderr
    assert calls == ""


def test_readme_shows_the_cautions():
    text = " ".join((ROOT / "README.md").read_text(encoding="utf-8").lower().split())
    assert "not an assessment of any individual" in text
    assert "local law" in text and "discretion" in text
