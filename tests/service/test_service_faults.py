"""The service in-process against faults found in review: absurd commands, slow devices, stops.

Real parts: mosquitto, pymodbus TCP servers playing rooms (``service_rooms.RoomPlant``).
The service, the rooms and the slow devices share one virtual clock.
"""

from __future__ import annotations

import asyncio
import threading
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, Watcher, running, site_yaml, until
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock, wait_for
from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.service.app import Service, TickReport

PREFIX = "roomloop/test-annex"


def write_site(tmp_path: Path, data: dict[str, Any]) -> Site:
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


@pytest.mark.needs_mosquitto
async def test_absurd_numbers_are_refused_and_state_is_still_published(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = write_site(
        tmp_path, site_yaml(modbus_port=server.port, broker_port=mosquitto.port)
    )
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    async with (
        RoomPlant(server, [17.0], clock),
        Watcher(mosquitto.host, mosquitto.port, PREFIX, clock=clock) as w,
        running(service),
    ):
        await w.wait_for(lambda: w.state() is not None, 15)
        before = service.zones["room0"].state
        for field, payload in [
            ("hold_until", "1e300"),
            ("hold_until", '{"value": 1e300}'),
            ("setpoint", "1" + "0" * 400),
            ("setpoint", '{"value": 1' + "0" * 400 + "}"),
        ]:
            n = len(w.results)
            await w.command("room0", field, payload)
            answer = await w.answer(n)
            assert answer["ok"] is False, (field, payload, answer)
            assert answer["reason"], answer
        # Nothing changed, and the state is still published afterwards.
        after = service.zones["room0"].state
        assert (after.mode, after.hold_until, after.hold_setpoint) == (
            before.mode,
            before.hold_until,
            before.hold_setpoint,
        )
        w.latest.pop(f"{PREFIX}/zone/room0/state", None)
        n = len(w.results)
        await w.command("room0", "setpoint", "21")
        assert (await w.answer(n))["ok"] is True
        await w.wait_for(lambda: (w.state() or {}).get("setpoint") == 21.0, 10)
    assert not service.restarts, service.restarts


def two_link_site(tmp_path: Path, slow_port: int, fast_port: int) -> Site:
    """room0 behind a device that may turn slow (1 s timeout, 2 retries), room1 on its own link."""
    data = site_yaml(modbus_port=slow_port, broker_port=1, zones=2)
    del data["broker"]
    data["links"][0].update(timeout_s=1.0, retries=2)
    data["links"].append(dict(data["links"][0], name="rooms-b", port=fast_port, timeout_s=0.5))
    data["links"][1]["retries"] = 0
    for point in data["points"]:
        if point["name"] in ("t1", "relay1"):
            point.update(link="rooms-b", address=0)
    return write_site(tmp_path, data)


async def test_a_slow_device_does_not_hold_up_another_zones_output(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    slow = await modbus_tcp_server()
    fast = await modbus_tcp_server()
    slow.clock = fast.clock = clock
    site = two_link_site(tmp_path, slow.port, fast.port)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    async with (
        RoomPlant(slow, [23.0], clock),
        RoomPlant(fast, [23.0], clock, step_s=0.5) as plant_b,
        running(service),
    ):
        await until(clock, lambda: all(z.decided for z in service.zones.values()))
        await until(clock, lambda: service.outputs.written == {"relay0": False, "relay1": False})
        await clock.sleep(0.5)  # let the start-up writes finish
        slow.delay_s = 5.0  # every request to room0's device now times out (3 attempts each)
        # Both zones want heat at once; room0 comes first in the output round.
        service.apply_command("room0", "setpoint", 26.0)
        service.apply_command("room1", "setpoint", 26.0)
        await until(clock, lambda: service.outputs.wanted["relay1"], 5, step_s=0.5)
        # A serial round would wait out room0's write and read-back (over 6 s) first.
        await until(clock, lambda: plant_b.rooms[0].coil, 3.0, step_s=0.5)
        slow.delay_s = 0.0


async def test_at_stop_every_output_on_a_slow_link_gets_its_safe_write(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    server.clock = clock
    data = site_yaml(modbus_port=server.port, broker_port=1, zones=4)
    del data["broker"]
    data["links"][0].update(timeout_s=1.0, retries=2)
    service = Service(write_site(tmp_path, data), clock=clock, state_dir=tmp_path / "state")
    stop = asyncio.Event()
    with capture_logs() as events:
        async with RoomPlant(server, [17.0] * 4, clock) as plant:
            task = asyncio.create_task(service.run(stop))
            await until(clock, lambda: all(room.coil for room in plant.rooms))
            plant.frozen = True
            seen = len(server.requests)
            server.delay_s = 0.6  # answers, but slowly: a serial stop with retries runs out
            stop.set()
            await wait_for(clock, task, 10)
    writes = {r.address for r in server.requests[seen:] if r.function_code == 5}
    assert writes == {0, 1, 2, 3}, server.requests[seen:]
    safe = [e for e in events if e["event"] == "output.safe_state"]
    assert sorted(e["point"] for e in safe) == ["relay0", "relay1", "relay2", "relay3"]
    # Whatever was not confirmed safe is named, one event per output and one summary.
    unconfirmed = sorted(e["point"] for e in safe if not e["confirmed"])
    summary = [e for e in events if e["event"] == "service.outputs_not_confirmed_safe"]
    assert (summary[0]["points"] if summary else []) == unconfirmed


async def test_cancelled_from_outside_the_outputs_still_go_safe_and_the_state_is_saved(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1)
    del data["broker"]
    service = Service(write_site(tmp_path, data), clock=clock, state_dir=tmp_path / "state")
    async with RoomPlant(server, [17.0], clock) as plant:
        task = asyncio.create_task(service.run(asyncio.Event()))
        await until(clock, lambda: plant.rooms[0].coil)  # heating; the safe state is off
        service.apply_command("room0", "setpoint", 23.5)
        task.cancel()
        with pytest.raises(asyncio.CancelledError):
            await wait_for(clock, task, 10)
    assert (await server.get_coils(0, 1)) == [False]
    assert service.store.load()["room0"]["hold_setpoint"] == 23.5


async def test_a_slow_disk_stalls_no_zone_loop_and_the_last_state_is_saved(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    # A disk slower than the control loop: virtual time goes on while the write's thread works.
    clock = VirtualClock(jump_during_threads=True)
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1)
    del data["broker"]
    ticked = threading.Event()

    def on_tick(_report: TickReport) -> None:
        ticked.set()

    service = Service(
        write_site(tmp_path, data), clock=clock, state_dir=tmp_path / "state", on_tick=on_tick
    )
    real_save = service.store.save
    zone_went_on: list[bool] = []

    def slow_save(
        zones: dict[str, Any],
        now: float,
        warm_up: dict[str, Any] | None = None,
        *,
        sources: dict[str, Any] | None = None,
    ) -> bool:
        """A card that takes its time: waits (each wait bounded) for the zone to step 3 times."""
        runtime = service.zones["room0"]
        steps = runtime.steps
        while runtime.steps < steps + 3 and ticked.wait(3.0):
            ticked.clear()
        zone_went_on.append(runtime.steps >= steps + 3)
        return real_save(zones, now, warm_up, sources=sources)

    service.store.save = slow_save  # type: ignore[method-assign]
    async with RoomPlant(server, [17.0], clock), running(service):
        await until(clock, lambda: "room0" in service.zones and service.zones["room0"].decided)
        for setpoint in (21.0, 22.0, 23.0):
            service.apply_command("room0", "setpoint", setpoint)
            await clock.sleep(0.1)
        await until(clock, lambda: len(zone_went_on) >= 1)
        while_running = list(zone_went_on)
        # The final save runs with the zone loops stopped: a plain disk again for it.
        service.store.save = real_save  # type: ignore[method-assign]
        clock.jump_during_threads = False
    assert while_running and all(while_running), while_running
    assert service.store.load()["room0"]["hold_setpoint"] == 23.0


async def test_a_state_file_that_cannot_be_saved_for_an_hour_is_a_few_lines_then_one_recovery(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """A real write error: the state directory replaced by a file (a lost mount, a full
    disk alike: the save raises), while a changed hold makes every zone step try again."""
    import shutil

    clock = VirtualClock()
    server = await modbus_tcp_server()
    server.clock = clock
    data = site_yaml(modbus_port=server.port, broker_port=1)
    del data["broker"]
    state_dir = tmp_path / "state"
    service = Service(write_site(tmp_path, data), clock=clock, state_dir=state_dir)
    with capture_logs() as events:
        async with RoomPlant(server, [19.0], clock), running(service):
            await until(clock, service.store.path.is_file)
            shutil.rmtree(state_dir)
            state_dir.write_text("not a directory\n")
            started = clock.now()
            setpoint = 20.0
            while clock.now() - started < 3600.0:  # commands keep the state changing
                setpoint = 41.0 - setpoint
                service.apply_command("room0", "setpoint", setpoint)
                await clock.sleep(60.0)
            assert service.store.status.startswith("failed: cannot write")
            failed = [e for e in events if e["event"] == "persist.save_failed"]
            tries = 1 + sum(e.get("suppressed", 0) for e in failed)
            assert tries >= 60, failed  # tried at every change ...
            # ... and said at once, then after 5, 10, 20 minutes: not once a try
            assert 2 <= len(failed) <= 5, failed
            assert all(e["log_level"] == "warning" for e in failed)
            assert "cannot write" in failed[0]["reason"]
            # the switches' own records fail on the same disk: folded alike
            records = [e for e in events if e["event"] == "persist.switch_record_failed"]
            assert 1 <= len(records) <= 5, records
            assert not [e for e in events if e["event"] == "persist.recovered"]
            state_dir.unlink()  # the disk is back
            await until(clock, lambda: service.store.status == "ok", 30)
            recovered = [e for e in events if e["event"] == "persist.save_recovered"]
            # one event closes both stories
            assert len(recovered) == 1 and recovered[0]["failures"] >= tries, recovered
            assert recovered[0]["failed_for_s"] >= 3500.0, recovered
            service.apply_command("room0", "setpoint", 22.0)
            await clock.sleep(60.0)
    assert len([e for e in events if e["event"] == "persist.save_recovered"]) == 1
    assert len([e for e in events if e["event"] == "persist.save_failed"]) == len(failed)
