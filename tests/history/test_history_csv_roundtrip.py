"""The CSV export reads back through the tool's own import, whatever the spacing of the ticks."""

from __future__ import annotations

from pathlib import Path

import pytest
from history_site import T0, VIENNA, write_site

from roomloop.cli import main
from roomloop.history.csvfile import read_csv
from roomloop.history.store import HistoryFile, Tick, history_path


def _tick(at: float, relay: bool) -> Tick:
    return Tick(
        at=at, temperature=20.0 + (at - T0) / 1e4, setpoint=20.0, level="comfort",
        mode="auto", relay=relay, anticipator_k=0.0, droop_k=0.0, fail_safe=False,
        reason="cut-in" if relay else "cut-out", points=(("t1", 20.0, "ok"),),
    )


def _export(tmp_path: Path, times: list[float]) -> Path:
    site = write_site(tmp_path)
    state = tmp_path / "state"
    state.mkdir()
    db = HistoryFile(history_path(state, "test-house"))
    db.write({"den": [_tick(at, k % 2 == 1) for k, at in enumerate(times)]})
    db.close()
    out = tmp_path / "den.csv"
    assert main(["history", "-c", str(site), "--zone", "den", "--csv", str(out)]) == 0
    return out


def test_two_ticks_in_one_second_read_back(tmp_path: Path) -> None:
    """A command wakes a zone for an extra step between two ticks: 0.4 s after a tick here,
    and another 0.35 s before the next. With times written to whole seconds the export held
    two rows of the same second, and its own import refused them ('time does not go
    forward'); to the millisecond, every tick reads back at its time."""
    times = [T0, T0 + 10.0, T0 + 10.4, T0 + 19.65, T0 + 20.0, T0 + 30.0]
    out = _export(tmp_path, times)
    rows = out.read_text().splitlines()
    assert rows[2].startswith("2026-01-02T00:00:10.000+01:00,")
    assert rows[3].startswith("2026-01-02T00:00:10.400+01:00,")
    back = read_csv(out, zone="den", tz=VIENNA, units="C")
    assert back.time == pytest.approx(times, abs=1e-3)
    assert back.relay == [k % 2 == 1 for k in range(len(times))]


def test_ticks_within_one_millisecond_are_written_once(tmp_path: Path) -> None:
    """The history file keeps times to 1 ms (store.pack_chunk), so two steps at one instant
    of a virtual clock are two ticks of one time: the export writes the later (the state
    that then held), and the file still reads back."""
    times = [T0, T0 + 10.0, T0 + 10.0, T0 + 10.0002, T0 + 20.0]
    out = _export(tmp_path, times)
    back = read_csv(out, zone="den", tz=VIENNA, units="C")
    assert back.time == pytest.approx([T0, T0 + 10.0, T0 + 20.0], abs=1e-3)
    assert back.relay == [False, True, False]  # the later of the three at T0 + 10
