"""``history``, ``report`` and ``tune`` on a history file they cannot read, and on a pipe that
closes early: one clear line (no traceback), the exit code their module docstrings give."""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from roomloop.cli import main
from roomloop.history.store import HistoryFile, Tick, history_path

SITE = """\
site: {{name: test-house, timezone: Europe/Vienna, units: C, state_dir: {state}}}
links:
  - {{type: modbus-tcp, name: io, host: 127.0.0.1}}
points:
  - {{type: modbus-input, name: t1, link: io, address: 0}}
  - {{type: modbus-output, name: r, link: io, address: 0}}
  - {{type: modbus-input, name: t2, link: io, address: 1}}
  - {{type: modbus-output, name: r2, link: io, address: 1}}
zones:
  - {{name: den, inputs: [t1], output: r, heating: hydronic, heater_w: 1500}}
  - {{name: hall, inputs: [t2], output: r2, heating: electric}}
"""
T0 = 1_767_225_600.0 + 23 * 3600.0  # 2026-01-02 00:00 in Vienna (UTC+1)


def _site(tmp_path: Path, ticks: int = 8640) -> tuple[Path, Path]:
    """A site file and its history file: ``ticks`` ticks of zone den at 10 s, checkpointed
    (no WAL left beside it)."""
    site = tmp_path / "site.yaml"
    state = tmp_path / "state"
    site.write_text(SITE.format(state=state))
    state.mkdir()
    path = history_path(state, "test-house")
    db = HistoryFile(path)
    batch: list[Tick] = []
    for k in range(ticks):
        on = (k % 180) < 60
        batch.append(
            Tick(
                at=T0 + 10 * k, temperature=19.8 if on else 20.4, setpoint=20.0,
                level="comfort", mode="auto", relay=on, anticipator_k=0.3, droop_k=0.1,
                fail_safe=False, reason="cut-in" if on else "cut-out",
                points=(("t1", 20.0, "ok"),),
            )
        )
        if len(batch) == 360:
            db.write({"den": batch})
            batch = []
    if batch:
        db.write({"den": batch})
    db.db.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    db.close()
    return site, path


def _damage(path: Path, how: str) -> None:
    if how == "not-a-database":
        with open(path, "r+b") as handle:
            handle.write(b"this is no longer an SQLite file" * 4)
    elif how == "truncated":
        size = path.stat().st_size
        with open(path, "r+b") as handle:
            handle.truncate(size // 2)
    else:  # a sound database whose packed ticks are garbage
        db = sqlite3.connect(path)
        db.execute("UPDATE chunks SET data = ?", (b"\x01\x02\x03garbage" * 8,))
        db.commit()
        db.close()


COMMANDS = {
    "history": ["history", "--zone", "den", "--csv", "-"],
    "report": ["report"],
    "report-zone": ["report", "--zone", "den"],
    "tune": ["tune", "--zone", "den", "--no-recommend"],
}


@pytest.mark.parametrize("how", ["not-a-database", "truncated", "bad-chunk"])
@pytest.mark.parametrize("command", sorted(COMMANDS))
def test_a_damaged_history_file_is_one_clear_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], command: str, how: str
) -> None:
    """Exit 1: 'no history to read' in the exit codes of all three commands' docstrings. The
    line names the file and what to do (the service moves a damaged file aside itself)."""
    site, path = _site(tmp_path)
    _damage(path, how)
    argv = [COMMANDS[command][0], "-c", str(site), *COMMANDS[command][1:]]
    assert main(argv) == 1
    captured = capsys.readouterr()
    lines = captured.err.strip().splitlines()
    assert len(lines) == 1, captured.err
    line = lines[0]
    assert line.startswith(f"roomloop {argv[0]}: "), line
    assert str(path) in line
    assert "damaged" in line
    assert "moves a damaged history file aside" in line
    assert captured.out == ""
    assert path.read_bytes()  # the reader left the file as it was, for the service to move


def test_a_history_file_that_cannot_be_opened_is_one_line_too(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A file the reader cannot open (here: a directory where the file should be) is not
    called damaged, but still one line naming it, exit 1."""
    site = tmp_path / "site.yaml"
    state = tmp_path / "state"
    site.write_text(SITE.format(state=state))
    path = history_path(state, "test-house")
    path.mkdir(parents=True)
    assert main(["report", "-c", str(site)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and str(path) in err[0] and "cannot read" in err[0], err
    assert "damaged" not in err[0]


def test_export_to_a_pipe_closed_early_stops_quietly(tmp_path: Path) -> None:
    """``roomloop history ... --csv - | head -1``: the reader leaves after one line; the export
    stops without a traceback and without Python's 'Exception ignored ... BrokenPipeError'
    at exit (the approach of the Python docs' "Note on SIGPIPE", signal module), exit 0 as
    ``check | head`` does. A day at 10 s is about 400 kB, far more than a pipe's buffer."""
    site, _ = _site(tmp_path)
    err_path = tmp_path / "stderr"
    with open(err_path, "wb") as err_file:
        proc = subprocess.Popen(
            [sys.executable, "-m", "roomloop", "history", "-c", str(site), "--zone", "den",
             "--csv", "-"],
            stdout=subprocess.PIPE,
            stderr=err_file,
        )
    assert proc.stdout is not None
    try:
        first = proc.stdout.readline()
        proc.stdout.close()
        code = proc.wait(timeout=60)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=10)
    err = err_path.read_bytes()
    assert first.startswith(b"time,temperature,relay")
    assert err == b"", err.decode()
    assert code == 0
