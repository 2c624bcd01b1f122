"""The history file and its recorder: packing, batching, pruning, a full disk, a damaged file,
kill -9 during writes, and the service going on through all of them.

Real parts: SQLite files in a temporary folder (a "full disk" is SQLite's own page limit,
which fails the write exactly as a full disk does: SQLITE_FULL), a real subprocess killed
with SIGKILL, a pymodbus TCP server playing rooms for the in-process service.
"""

from __future__ import annotations

import asyncio
import dataclasses
import os
import random
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time
from pathlib import Path
from typing import Any

import yaml
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.history.recorder import HistoryRecorder
from roomloop.history.store import HistoryFile, Tick, history_path, read_zone
from roomloop.service.app import Service

sys.path.insert(0, str(Path(__file__).parents[1] / "service"))
from service_rooms import RoomPlant, running, site_yaml, until


def _tick(at: float, temp: float | None = 20.0, relay: bool = False, **kw: Any) -> Tick:
    return Tick(
        at=at,
        temperature=temp,
        setpoint=kw.get("setpoint", 20.0),
        level=kw.get("level", "comfort"),
        mode=kw.get("mode", "auto"),
        relay=relay,
        anticipator_k=kw.get("anticipator_k", 0.5),
        droop_k=kw.get("droop_k", 0.1),
        fail_safe=kw.get("fail_safe", False),
        reason=kw.get("reason", "cut-out"),
        points=kw.get("points", (("t1", temp, "ok"),)),
    )


def test_ticks_read_back_as_written_to_their_rounding(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    db = HistoryFile(path)
    ticks = [
        _tick(1000.0 + 10 * k, 20.0 + 0.0137 * k, relay=k % 3 == 0, anticipator_k=0.001 * k)
        for k in range(50)
    ]
    ticks[7] = _tick(1070.0, None, fail_safe=True, reason="fail-safe:off",
                     points=(("t1", None, "comm-failure"),))
    # the zone gains a point halfway: a new layout, both readable
    ticks += [
        _tick(1500.0 + 10 * k, 21.0, points=(("t1", 21.0, "ok"), ("t2", 21.5, "stale")))
        for k in range(5)
    ]
    db.write({"room": ticks})
    db.close()
    got = read_zone(path, "room")
    assert len(got) == 55
    assert got.time == [t.at for t in ticks]
    for k, tick in enumerate(ticks):
        if tick.temperature is None:
            assert got.temperature[k] is None
        else:
            assert abs(got.temperature[k] - tick.temperature) <= 0.0005 + 1e-9  # type: ignore[operator]
        assert got.relay[k] == tick.relay
        assert got.fail_safe[k] == tick.fail_safe
        assert got.reason[k] == tick.reason
        assert abs(got.anticipator_k[k] - tick.anticipator_k) <= 0.0005 + 1e-9
    assert got.points["t1"][7] == (None, "comm-failure")
    assert got.points["t2"][0] == (None, "absent")
    assert got.points["t2"][-1] == (21.5, "stale")
    window = read_zone(path, "room", since=1100.0, until=1200.0)
    assert window.time == [1100.0 + 10 * k for k in range(10)]
    assert len(read_zone(path, "other")) == 0


def test_a_chunk_closed_by_its_time_span_within_a_batch_is_written(tmp_path: Path) -> None:
    """A chunk spans at most CHUNK_SPAN_S (2 h). Within one batch, a chunk closed by that
    span (a gap of more than 2 h: the service stopped; or a tick over 40 s, whose 180 ticks
    span more) lost its ticks since the last write: at a 60 s tick committed every 50 min, the
    20 ticks before every second hour."""
    from roomloop.history.store import CHUNK_SPAN_S, CHUNK_TICKS

    assert CHUNK_TICKS * 60.0 > CHUNK_SPAN_S
    path = tmp_path / "h.sqlite"
    db = HistoryFile(path)
    ticks = [_tick(60.0 * k) for k in range(6 * 60)]  # 6 h at a 60 s tick
    for i in range(0, len(ticks), 50):  # a commit every 50 min
        db.write({"room": ticks[i : i + 50]})
    gap = [_tick(7 * 3600.0 + 10 * k) for k in range(30)] + [
        _tick(10 * 3600.0 + 10 * k) for k in range(30)
    ]
    db.write({"room": gap})  # the service stopped for 3 h inside one batch
    db.close()
    assert read_zone(path, "room").time == [t.at for t in ticks + gap]


def test_prune_removes_only_chunks_older_than_the_cutoff(tmp_path: Path) -> None:
    db = HistoryFile(tmp_path / "h.sqlite")
    day = 86400.0
    for d in range(5):
        db.write({"room": [_tick(d * day + 10 * k) for k in range(6)]})
    assert db.prune(2 * day) == 2
    assert read_zone(tmp_path / "h.sqlite", "room").time[0] == 2 * day
    db.close()


def _outputs_and_state() -> tuple[Any, Any]:
    from roomloop.core.controller import ZoneController
    from roomloop.core.settings import ZoneSettings
    from roomloop.core.types import PointSample, ZoneInputs

    settings = ZoneSettings.for_heating_type("electric")
    controller = ZoneController(settings)
    state = controller.initial_state(0.0)
    name = settings.inputs[0].name
    inputs = ZoneInputs(samples=(PointSample(name, 19.0, 0.0),))
    state, outputs = controller.step(state, inputs, 0.0)
    return outputs, state


async def test_recorder_batches_commits_and_flushes_at_stop(tmp_path: Path) -> None:
    outputs, state = _outputs_and_state()
    path = tmp_path / "h.sqlite"
    recorder = HistoryRecorder(path, commit_s=50.0)
    async with recorder:
        for k in range(200):  # a tick every recorded second
            recorder.record("room", 1000.0 + k, outputs, state)
            if k % 20 == 0:  # let the writer see the queue now and then
                taken = await asyncio.to_thread(recorder.wait_until, lambda r: r.queued == 0, 10.0)
                assert taken
    assert recorder.written == 200 and recorder.dropped == 0
    # at most one commit per commit_s of recorded time (200 s: 4), plus the final flush at stop
    assert 2 <= recorder.commits <= 200 / 50 + 1
    got = read_zone(path, "room")
    assert got.time == [1000.0 + k for k in range(200)]
    assert got.temperature[0] == outputs.temperature
    name = state.points[0].name
    assert got.points[name][0][1] == outputs.reliability[name]


async def test_a_clock_set_back_mid_batch_writes_the_batch_and_starts_over(
    tmp_path: Path,
) -> None:
    outputs, state = _outputs_and_state()
    recorder = HistoryRecorder(tmp_path / "h.sqlite", commit_s=60.0)
    async with recorder:
        for k in range(5):  # 40 recorded seconds: no commit due yet
            recorder.record("room", 10_000.0 + 10 * k, outputs, state)
        assert await asyncio.to_thread(recorder.wait_until, lambda r: r.queued == 0, 10.0)
        assert recorder.commits == 0
        # the wall clock is set back an hour: the batch must not wait an hour for its commit
        recorder.record("room", 10_000.0 - 3600.0, outputs, state)
        assert await asyncio.to_thread(recorder.wait_until, lambda r: r.written == 6, 10.0)
        for k in range(1, 5):  # from there, batches again every commit_s
            recorder.record("room", 10_000.0 - 3600.0 + 10 * k, outputs, state)
        assert await asyncio.to_thread(recorder.wait_until, lambda r: r.queued == 0, 10.0)
        assert recorder.commits == 1


async def test_ticks_that_stop_coming_are_written_after_the_stall_time(tmp_path: Path) -> None:
    outputs, state = _outputs_and_state()
    recorder = HistoryRecorder(tmp_path / "h.sqlite", commit_s=60.0, stall_s=0.2)
    async with recorder:
        for k in range(3):
            recorder.record("room", 1000.0 + 10 * k, outputs, state)
        # no further tick and no stop: the stall time (real seconds) writes them
        assert await asyncio.to_thread(recorder.wait_until, lambda r: r.written == 3, 10.0)
        assert read_zone(tmp_path / "h.sqlite", "room").time == [1000.0, 1010.0, 1020.0]


async def test_full_queue_drops_and_counts_without_blocking(tmp_path: Path) -> None:
    outputs, state = _outputs_and_state()
    recorder = HistoryRecorder(tmp_path / "h.sqlite", queue_ticks=10)
    with capture_logs() as events:
        for k in range(25):  # no writer thread yet: the queue fills
            recorder.record("room", float(k), outputs, state)
    assert recorder.dropped == 15
    assert [e["event"] for e in events if e["event"] == "history.dropped"] == ["history.dropped"]


async def test_full_disk_is_logged_and_recording_goes_on(tmp_path: Path) -> None:
    outputs, state = _outputs_and_state()
    recorder = HistoryRecorder(tmp_path / "h.sqlite", commit_s=0.05, max_pages=16)
    rng = random.Random(5)
    with capture_logs() as events:
        async with recorder:
            for k in range(3000):
                noisy = dataclasses.replace(outputs, temperature=15 + rng.random() * 10)
                recorder.record("room", 1000.0 + 10 * k, noisy, state)
                if k % 100 == 0:  # batches of about 100 ticks: what fits is written first
                    assert await asyncio.to_thread(
                        recorder.wait_until, lambda r: r.queued == 0, 10.0
                    )
    failed = [e for e in events if e["event"] == "history.write_failed"]
    assert failed, [e["event"] for e in events]
    assert "full" in failed[0]["error"]
    assert recorder.written > 0  # what fitted before the disk filled is there
    assert len(read_zone(tmp_path / "h.sqlite", "room")) == recorder.written


async def test_damaged_file_is_moved_aside_and_a_new_one_started(tmp_path: Path) -> None:
    outputs, state = _outputs_and_state()
    path = tmp_path / "h.sqlite"
    path.write_bytes(b"this is not a database, a half-written file from another program " * 40)
    recorder = HistoryRecorder(path, commit_s=0.05)
    with capture_logs() as events:
        async with recorder:
            recorder.record("room", 1000.0, outputs, state)  # written by the flush at stop
    moved = [e for e in events if e["event"] == "history.damaged_moved_aside"]
    assert len(moved) == 1
    aside = Path(moved[0]["moved_to"])
    assert _head(aside).startswith(b"this is not a database")
    assert read_zone(path, "room").time == [1000.0]


async def test_a_history_that_cannot_be_opened_is_said_once_then_folded_until_it_recovers(
    tmp_path: Path,
) -> None:
    """Tried every 30 s of recorded time, an hour of a missing state directory is a handful
    of journal lines, not 120; the opening that works closes it with one event."""
    outputs, state = _outputs_and_state()
    blocker = tmp_path / "state"
    blocker.write_text("a file where the state directory should be\n")
    recorder = HistoryRecorder(blocker / "h.sqlite", commit_s=60.0)
    with capture_logs() as events:
        async with recorder:
            for minute in range(60):
                for k in range(6):
                    recorder.record("room", 1000.0 + 60 * minute + 10 * k, outputs, state)
                assert await asyncio.to_thread(recorder.wait_until, lambda r: r.queued == 0, 10.0)
            blocker.unlink()  # the directory is back
            for k in range(12):
                recorder.record("room", 4600.0 + 10 * k, outputs, state)
            assert await asyncio.to_thread(recorder.wait_until, lambda r: r.written > 0, 10.0)
    unavailable = [e for e in events if e["event"] == "history.unavailable"]
    tries = recorder.failures
    assert tries >= 50  # it kept trying, every 30 to 60 recorded seconds
    assert 1 <= len(unavailable) <= 6, len(unavailable)
    assert unavailable[0]["reason"] and unavailable[0]["path"].endswith("h.sqlite")
    assert sum(e.get("suppressed", 0) for e in unavailable) + len(unavailable) <= tries
    recovered = [e for e in events if e["event"] == "history.recovered"]
    assert len(recovered) == 1 and recovered[0]["failures"] == tries
    assert recovered[0]["failed_for_s"] >= 3000.0


def _head(path: Path) -> bytes:
    return path.read_bytes()[:64]


CHILD = textwrap.dedent(
    """
    import asyncio, sys
    sys.path.insert(0, {tests!r})
    from test_history_store import _outputs_and_state
    from roomloop.history.recorder import HistoryRecorder

    async def main():
        outputs, state = _outputs_and_state()
        recorder = HistoryRecorder({path!r}, commit_s=0.2)
        async with recorder:
            k = 0
            while True:
                recorder.record("room", float(k), outputs, state)
                k += 1
                print("at", k, recorder.written, flush=True)
                await asyncio.sleep(0.005)

    asyncio.run(main())
    """
)


def test_kill_9_during_writes_loses_at_most_the_last_batch(tmp_path: Path) -> None:
    path = tmp_path / "h.sqlite"
    code = CHILD.format(tests=str(Path(__file__).parent), path=str(path))
    child = subprocess.Popen(
        [sys.executable, "-c", code], stdout=subprocess.PIPE, text=True, env=dict(os.environ)
    )
    assert child.stdout is not None
    written = 0
    deadline = time.monotonic() + 30
    try:
        while written < 300 and time.monotonic() < deadline:
            line = child.stdout.readline()
            if not line:
                break
            if line.startswith("at "):  # (log events go to stdout too)
                written = int(line.split()[2])
    finally:
        child.send_signal(signal.SIGKILL)
        child.wait(10)
    assert written >= 300, "the child never got going"
    db = sqlite3.connect(path)
    assert db.execute("PRAGMA integrity_check").fetchone() == ("ok",)
    db.close()
    kept = read_zone(path, "room").time
    assert kept == [float(k) for k in range(len(kept))]  # a prefix, nothing torn
    # every commit the child saw survived: lost is at most what it had recorded since its
    # last commit (the batch; how often batches commit is checked on a virtual clock above,
    # not here, where a loaded machine stretches the child's wall-clock ticks)
    assert len(kept) >= written


def _fill(path: Path, max_pages: int) -> None:
    """A history file as full as its page limit lets it be (the next new page fails)."""
    path.parent.mkdir(parents=True, exist_ok=True)
    db = HistoryFile(path, max_pages=max_pages)
    rng = random.Random(3)
    try:
        for day in range(10_000):
            ticks = [_tick(day * 86400.0 + 10 * k, 15 + 10 * rng.random()) for k in range(50)]
            db.write({"filler": ticks})
    except sqlite3.OperationalError as exc:
        assert "full" in str(exc)
    finally:
        db.close()


async def test_service_keeps_controlling_with_a_full_history_disk(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1, zones=1)
    del data["broker"]
    data["site"]["state_dir"] = str(tmp_path / "state")
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    site = load_site(path)
    # The writer paces itself on the recorded (virtual) times; waiting on the disk holds the
    # virtual clock still (a thread of the loop's executor), so no tick passes meanwhile.
    clock = VirtualClock()
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    assert service.history is not None
    assert service.history.path == history_path(tmp_path / "state", site.name)
    path = service.history.path
    history = service.history = HistoryRecorder(path, commit_s=0.05, max_pages=40)
    with capture_logs() as events:
        async with RoomPlant(server, [15.0], clock) as plant, running(service):
            await until(clock, lambda: "room0" in service.zones)
            zone = service.zones["room0"]
            await until(clock, lambda: zone.steps > 8)
            assert await asyncio.to_thread(history.wait_until, lambda h: h.written > 5, 30.0)
            # another writer takes every page there is: the disk is full now
            await asyncio.to_thread(_fill, path, 40)
            for _ in range(500):  # a tick at a time until a write fails (the last pages fill)
                tried, steps = history.commits + history.failures, zone.steps
                await until(clock, lambda: zone.steps > steps)  # noqa: B023 - awaited at once
                assert await asyncio.to_thread(
                    history.wait_until, lambda h: h.commits + h.failures > tried, 30.0  # noqa: B023
                )
                if history.failures:
                    break
            assert history.failures, "the full disk never refused a write"
            steps = zone.steps
            # a cold room: the heat goes on regardless, and the zone goes on stepping
            await until(clock, lambda: plant.rooms[0].coil, 1200.0)
            await until(clock, lambda: zone.steps > steps + 5, 600.0)
    failed = [e for e in events if e["event"] == "history.write_failed"]
    assert failed and "full" in failed[0]["error"]
    assert not [e for e in events if e["event"] == "service.task_failed"]
