"""The README's set-up commands work on a PEP 668 system, and CI runs exactly the test one."""

from __future__ import annotations

import re
from pathlib import Path

REPO = Path(__file__).resolve().parents[2]


def _setup_commands() -> list[str]:
    readme = (REPO / "README.md").read_text()
    section = readme.split("## Set-up on a fresh machine", 1)[1].split("\n## ", 1)[0]
    return [block.strip() for block in re.findall(r"```sh\n(.*?)```", section, re.S)]


def test_two_setup_commands_each_self_contained_in_a_venv() -> None:
    commands = _setup_commands()
    assert len(commands) == 2, commands
    for command in commands:
        assert "\n" not in command, command
        # Debian 12 / Raspberry Pi OS refuse a bare `pip install` (PEP 668 [published]).
        assert command.startswith("python3 -m venv .venv && .venv/bin/pip install "), command
        assert " pip install" not in command.replace(".venv/bin/pip install", ""), command


def test_ci_runs_the_readme_test_command_verbatim() -> None:
    test_command = _setup_commands()[1]
    assert "pytest" in test_command
    lines = [line.strip() for line in (REPO / ".ci" / "run").read_text().splitlines()]
    assert test_command in lines
