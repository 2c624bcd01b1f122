"""A password typed by mistake into ``password_env`` or ``password_file`` is never printed.

``check`` and ``run`` name the key only: not in the resolved site, not in a validation error,
not in the start-up refusal of a missing variable or file.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from roomloop.cli import main

SECRET = "Tr0ub4dor"
"""Looks like a variable name, so it passes validation: only never printing it protects it."""


def _site(tmp_path: Path, broker_lines: str) -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(
        "site: {name: secrets}\n"
        "broker:\n  host: 127.0.0.1\n  username: roomloop\n"
        f"{broker_lines}"
        "points:\n"
        "  - {name: t1, type: mqtt-input, topic: sensors/t1}\n"
        "  - {name: r1, type: mqtt-output, command_topic: relays/r1}\n"
        "zones:\n  - {name: hall, inputs: [t1], output: r1, heating: electric}\n",
        encoding="utf-8",
    )
    return path


def _check(capsys: pytest.CaptureFixture[str], path: Path) -> tuple[int, str]:
    code = main(["check", "-c", str(path)])
    captured = capsys.readouterr()
    return code, captured.out + captured.err


@pytest.mark.parametrize(
    ("key", "value", "fragment"),
    [
        ("password_env", "hunter2 !x", "is not an environment variable's name"),
        ("password_env", "12345", "(got a value that is not shown)"),
        ("password_file", "correct-horse-battery", "must be the absolute path"),
        ("password_file", "[1, 2]", "input should be a valid string (got a value that is not"),
        ("password_env", "{a: 1}", "input should be a valid string"),
    ],
)
def test_a_password_in_the_wrong_key_is_refused_unseen(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, key: str, value: str, fragment: str
) -> None:
    code, text = _check(capsys, _site(tmp_path, f"  {key}: {value}\n"))
    assert code == 2
    assert f"broker.{key}: " in text and fragment in text, text
    for piece in ("hunter2", "12345", "correct-horse", "[1, 2]", "'a'"):
        assert piece not in text


@pytest.mark.parametrize("key", ["password_env", "password_file"])
def test_check_names_the_key_not_its_value(
    capsys: pytest.CaptureFixture[str], tmp_path: Path, key: str
) -> None:
    value = SECRET if key == "password_env" else f"/{SECRET}"
    code, text = _check(capsys, _site(tmp_path, f"  {key}: {value}\n"))
    assert code == 0, text
    assert f"password from the {'variable' if key == 'password_env' else 'file'} broker.{key}" in (
        text
    )
    assert SECRET not in text


@pytest.mark.parametrize("key", ["password_env", "password_file"])
def test_run_refuses_a_missing_variable_or_file_without_echoing_it(
    tmp_path: Path, key: str
) -> None:
    value = SECRET if key == "password_env" else f"/{SECRET}"
    env = {k: v for k, v in os.environ.items() if k != SECRET}
    done = subprocess.run(
        [
            sys.executable,
            "-m",
            "roomloop",
            "run",
            "-c",
            str(_site(tmp_path, f"  {key}: {value}\n")),
            "--state-dir",
            str(tmp_path / "state"),
        ],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
        env=env,
    )
    assert done.returncode == 2, done.stdout + done.stderr
    assert f"broker.{key}: " in done.stderr
    assert SECRET not in done.stdout + done.stderr
