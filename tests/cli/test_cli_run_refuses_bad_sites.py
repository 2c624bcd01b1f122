"""``roomloop run`` reads the site through the loader ``check`` uses: a bad site file gets the same
lines and exit 2 from both, before any state directory, broker or device is touched."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest

BAD = Path(__file__).resolve().parents[1] / "config" / "bad"
CASES = [
    "host_strings.yaml",
    "point_topics_in_own_tree.yaml",
    "topic_prefix_dollar.yaml",
    "strict_numbers.yaml",
    "typing_habits.yaml",
    "dedented_keys.yaml",
]


def _roomloop(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "roomloop", *args],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )


@pytest.mark.parametrize("name", CASES)
def test_run_refuses_what_check_refuses(tmp_path: Path, name: str) -> None:
    path = BAD / name
    state = tmp_path / "state"
    checked = _roomloop("check", "-c", str(path))
    ran = _roomloop("run", "-c", str(path), "--state-dir", str(state))
    assert checked.returncode == ran.returncode == 2, ran.stderr
    assert "Traceback" not in ran.stdout + ran.stderr
    assert ran.stderr == checked.stderr
    assert ran.stderr.startswith(f"{path}:")
    assert not state.exists()  # refused before anything was set up
