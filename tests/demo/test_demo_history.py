"""``roomloop demo --state-dir DIR`` leaves a history that ``report`` and ``tune`` read.

Real processes: the demo (on the virtual clock, the ``ROOMLOOP_CLOCK=virtual`` test hook)
with its Modbus TCP plants on loopback, then the exact commands it prints at the end, run
as the user would run them. A two-hour demo is too short for ``tune``, which must say so;
``ROOMLOOP_LONG_TESTS=1`` also runs a 30-hour demo (about a minute of CPU), on which
``tune`` identifies each zone.
"""

from __future__ import annotations

import os
import shlex
import subprocess
import sys
from pathlib import Path

import pytest

RUN_TIMEOUT_S = 120.0
ZONES = ("small-hall", "meeting-room", "kitchen")


def _env() -> dict[str, str]:
    env = dict(os.environ)
    env["PYTHONUNBUFFERED"] = "1"
    env["ROOMLOOP_CLOCK"] = "virtual"
    env.pop("STATE_DIRECTORY", None)
    return env


def _roomloop(
    args: list[str], timeout_s: float = RUN_TIMEOUT_S
) -> subprocess.CompletedProcess[str]:
    return subprocess.run(
        [sys.executable, "-m", "roomloop", *args],
        capture_output=True, text=True, timeout=timeout_s, env=_env(), check=False,
    )


def _demo_with_history(state_dir: Path, hours: str) -> list[list[str]]:
    """Run the demo keeping its history; the commands it prints at the end (argv lists)."""
    done = _roomloop(["demo", "--hours", hours, "--state-dir", str(state_dir)], 300.0)
    assert done.returncode == 0, done.stdout + done.stderr
    out = done.stdout
    assert f"history and state kept in {state_dir}" in out, out
    commands = [
        shlex.split(line.strip())[1:]
        for line in out.splitlines()
        if line.startswith("  roomloop ")
    ]
    assert [c[0] for c in commands] == ["report", "tune", "tune", "tune"], out
    assert [c[-1] for c in commands[1:]] == list(ZONES)
    assert (state_dir / "site.yaml").is_file()
    assert (state_dir / "quillby-green-hall.history.sqlite").is_file()
    return commands


def test_short_demo_history_is_read_by_report_and_tune_says_it_is_too_short(
    tmp_path: Path,
) -> None:
    state_dir = tmp_path / "demo"
    commands = _demo_with_history(state_dir, "2")
    report = _roomloop(commands[0])
    assert report.returncode == 0, report.stdout + report.stderr
    for zone in ZONES:
        assert f"zone {zone} (" in report.stdout
    # one row per day: the run starts 2026-01-12 06:24 (30 % of 2 h before 07:00)
    assert "2026-01-12   2.0" in report.stdout, report.stdout
    tune = _roomloop(commands[3])  # kitchen
    assert tune.returncode == 1, tune.stdout + tune.stderr
    assert "refused: too little data: 2.0 h of history, at least 24 h needed" in tune.stderr
    # the exported CSV is read the same way (tune --history)
    csv = tmp_path / "kitchen.csv"
    export = _roomloop(
        ["history", "-c", str(state_dir / "site.yaml"), "--zone", "kitchen", "--csv", str(csv)]
    )
    assert export.returncode == 0, export.stderr
    tune_csv = _roomloop([*commands[3], "--history", str(csv)])
    assert tune_csv.returncode == 1
    assert "too little data: 2.0 h of history" in tune_csv.stderr


def test_demo_refuses_a_state_dir_that_is_not_empty(tmp_path: Path) -> None:
    (tmp_path / "something").write_text("x")
    done = _roomloop(["demo", "--hours", "1", "--state-dir", str(tmp_path)])
    assert done.returncode == 2
    assert f"--state-dir {tmp_path}: not empty" in done.stderr
    assert "demo:" not in done.stdout  # refused before the run


@pytest.mark.slow
@pytest.mark.skipif(
    os.environ.get("ROOMLOOP_LONG_TESTS") != "1",
    reason="long variant: ROOMLOOP_LONG_TESTS=1 runs it (a 30 h demo, about a minute of CPU)",
)
def test_long_demo_history_is_identified_by_tune(tmp_path: Path) -> None:
    commands = _demo_with_history(tmp_path / "demo", "30")
    tune = _roomloop([*commands[3], "--no-recommend"], 300.0)  # kitchen
    assert tune.returncode == 0, tune.stdout + tune.stderr
    assert "30.0 h of history, without outdoor temperature" in tune.stdout
    assert "RMS residual" in tune.stdout and "verdict:" in tune.stdout
