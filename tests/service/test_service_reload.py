"""SIGHUP reloads the site file of a real ``roomloop run`` (mosquitto, a pymodbus server).

A bad file is refused with its problems in the log and changes nothing; a good one
changes a set point, adds a zone and removes one, while a kept zone keeps its hold
and its relay, which is never written off around the reload (no off/on pulse).
The process runs on the paced clock (``ROOMLOOP_CLOCK_SPEED``); the in-process test of the
same seam on the virtual clock checks the kept anticipator. Every wait is bounded.
"""

from __future__ import annotations

import asyncio
import signal
import time
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, ServiceProcess, Watcher, site_yaml, until

from roomloop.clock import VirtualClock, wait_for
from roomloop.config.loader import load_site
from roomloop.service.reload import check_reload, serve
from roomloop.service.zones import TickReport

SPEED = 120.0
PREFIX = "roomloop/test-annex"


def _site(modbus_port: int, broker_port: int, zones: int, room1_comfort: float) -> dict[str, Any]:
    site = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=zones)
    site["zones"][1]["setpoints"]["comfort"] = room1_comfort
    return site


def _events(service: ServiceProcess, name: str) -> list[dict[str, Any]]:
    return [e for e in service.log_events() if e.get("event") == name]


@pytest.mark.needs_mosquitto
@pytest.mark.slow
async def test_sighup_reloads_a_good_file_and_refuses_a_bad_one(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server(units=(1,))
    coil_writes: list[tuple[int, bool]] = []

    def record(function_code: int, address: int, values: list[Any]) -> None:
        if function_code in (5, 15):
            coil_writes.extend((address + i, bool(v)) for i, v in enumerate(values))

    server.write_filter = record
    config = tmp_path / "site.yaml"
    config.write_text(yaml.safe_dump(_site(server.port, mosquitto.port, 2, 20.0)))
    service = ServiceProcess(
        config, tmp_path / "state", SPEED, tmp_path / "service.log", origin=time.time()
    )
    async with (
        RoomPlant(server, [17.0, 17.0, 17.0], SPEED) as plant,
        Watcher(mosquitto.host, mosquitto.port, PREFIX) as w,
    ):
        w.guard = service.died
        plant.frozen = True  # the rooms stay at 17 C: room0's demand never ends by itself
        try:
            await service.start()
            await w.wait_for(lambda: w.text("status") == "online", 15)
            n = len(w.results)
            await w.command("room0", "setpoint", "23")
            assert (await w.answer(n))["ok"] is True
            await w.wait_for(lambda: (w.state("room0") or {}).get("mode") == "hold", 10)
            await w.wait_for(lambda: (0, True) in coil_writes, 15)
            await w.wait_for(lambda: (w.state("room1") or {}).get("setpoint") == 20.0, 10)
            writes_before = len(coil_writes)

            # A bad file: refused, its problem named (file, line, key path), nothing changes.
            bad = _site(server.port, mosquitto.port, 3, 21.5)
            bad["zones"][1]["tick_s"] = -5
            config.write_text(yaml.safe_dump(bad))
            service.process.send_signal(signal.SIGHUP)  # type: ignore[union-attr]
            await w.wait_for(lambda: bool(_events(service, "reload.refused")), 10)
            problems = _events(service, "reload.problem")
            assert problems, "the refusal names no problem"
            assert problems[0]["file"] == str(config)
            assert isinstance(problems[0]["line"], int)
            assert "tick_s" in problems[0]["key"]
            assert not _events(service, "service.reloading")
            assert f"{PREFIX}/zone/room2/state" not in w.latest
            assert (w.state("room1") or {}).get("setpoint") == 20.0

            # A good file: room1's comfort set point changes, room2 is added.
            config.write_text(yaml.safe_dump(_site(server.port, mosquitto.port, 3, 21.5)))
            service.process.send_signal(signal.SIGHUP)  # type: ignore[union-attr]
            await w.wait_for(lambda: len(_events(service, "service.reloaded")) == 1, 15)
            await w.wait_for(lambda: (w.state("room1") or {}).get("setpoint") == 21.5, 10)
            await w.wait_for(lambda: (w.state("room2") or {}).get("demand") is True, 10)
            await w.wait_for(lambda: (2, True) in coil_writes, 10)
            kept = w.state("room0") or {}
            assert kept.get("mode") == "hold" and kept.get("setpoint") == 23.0, kept
            assert (w.state("room2") or {}).get("mode") == "auto"  # fresh

            # room2 removed again: its relay goes to its safe state (off), its topics cleared.
            config.write_text(yaml.safe_dump(_site(server.port, mosquitto.port, 2, 21.5)))
            service.process.send_signal(signal.SIGHUP)  # type: ignore[union-attr]
            await w.wait_for(lambda: len(_events(service, "service.reloaded")) == 2, 15)
            await w.wait_for(lambda: w.latest.get(f"{PREFIX}/zone/room2/state") == b"", 10)
            assert (await server.get_coils(2, 1)) == [False]
            await w.wait_for(lambda: (w.state("room0") or {}).get("demand") is True, 10)
            kept = w.state("room0") or {}
            assert kept.get("mode") == "hold" and kept.get("setpoint") == 23.0, kept
            # the kept zone's relay was never written off: no pulse at either reload
            assert (0, False) not in coil_writes[writes_before:], coil_writes
            assert (await server.get_coils(0, 1)) == [True]
            code = await service.signal(signal.SIGTERM)
            assert code == 0
        finally:
            await service.stop()


def test_a_reload_that_renames_the_site_is_refused(tmp_path: Path) -> None:
    # the name keys the site lock and the state file: only a restart may change it
    config = tmp_path / "site.yaml"
    site = site_yaml(modbus_port=1502, broker_port=1883, zones=1)
    config.write_text(yaml.safe_dump(site))
    running = load_site(config)
    assert check_reload(config, running) is not None
    site["site"]["name"] = "test-annex-2"
    config.write_text(yaml.safe_dump(site))
    assert check_reload(config, running) is None
    config.unlink()
    assert check_reload(config, running) is None  # a missing file: refused, not raised


async def test_a_reload_keeps_a_running_zones_anticipator_and_relay(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    # In-process on the virtual clock: the reload's seam (reload.serve) without the signal.
    clock = VirtualClock()
    server = await modbus_tcp_server()
    coil_writes: list[tuple[int, bool]] = []
    server.write_filter = lambda fc, address, values: coil_writes.extend(
        (address + i, bool(v)) for i, v in enumerate(values) if fc in (5, 15)
    )

    def write(room1_comfort: float) -> None:
        site = _site(server.port, 1883, 2, room1_comfort)
        del site["broker"]
        config.write_text(yaml.safe_dump(site))

    config = tmp_path / "site.yaml"
    write(20.0)
    ticks: list[TickReport] = []
    stop, reload = asyncio.Event(), asyncio.Event()
    async with RoomPlant(server, [15.0, 17.0], clock) as plant:
        plant.frozen = True  # room0 stays cold: its relay has no reason to switch off
        task = asyncio.create_task(
            serve(config, load_site(config), stop=stop, reload=reload,
                  state_dir=tmp_path / "state", clock=clock, on_tick=ticks.append)
        )
        try:
            def room0() -> list[TickReport]:
                return [t for t in ticks if t.zone == "room0"]

            await until(clock, lambda: len(room0()) >= 30 and room0()[-1].state.relay_on)
            before = room0()[-1]
            assert before.outputs.anticipator_k > 0.2  # heat built up while on
            write(21.5)
            reload.set()
            reloaded_at, writes_at_reload = clock.now(), len(coil_writes)
            await until(clock, lambda: any(
                t.zone == "room1" and t.at > reloaded_at and t.outputs.setpoint == 21.5
                for t in ticks
            ))
            after = next(t for t in room0() if t.at > reloaded_at)
            around_reload = coil_writes[writes_at_reload:]
        finally:
            stop.set()
            await wait_for(clock, task, 30.0)
    # a fresh state would start the anticipator at 0; the kept one goes on where it was
    # (one tick of heat-up/decay between the two steps at most)
    assert after.state.relay_on and after.outputs.demand
    assert after.outputs.anticipator_k == pytest.approx(before.outputs.anticipator_k, rel=0.1)
    assert after.state.switched_at == before.state.switched_at
    assert (0, False) not in around_reload, around_reload  # no off/on pulse at the reload


async def test_a_reload_that_moves_a_kept_zones_output_switches_the_old_one_off(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    # room0 is kept but its relay moves from coil 0 to coil 9: the new service never knew
    # coil 0, so the reload itself must leave it off (else a heater could run for good).
    clock = VirtualClock()
    server = await modbus_tcp_server()
    config = tmp_path / "site.yaml"

    def write(moved: bool) -> None:
        site = _site(server.port, 1883, 2, 20.0)
        del site["broker"]
        if moved:
            site["points"].append(
                {"name": "relay9", "type": "modbus-output", "link": "rooms", "address": 9}
            )
            site["zones"][0]["output"] = "relay9"
        config.write_text(yaml.safe_dump(site))

    write(False)
    ticks: list[TickReport] = []
    stop, reload = asyncio.Event(), asyncio.Event()
    async with RoomPlant(server, [15.0, 17.0], clock) as plant:
        plant.frozen = True  # room0 stays cold: its relay stays on
        task = asyncio.create_task(
            serve(config, load_site(config), stop=stop, reload=reload,
                  state_dir=tmp_path / "state", clock=clock, on_tick=ticks.append)
        )
        try:
            await until(clock, lambda: any(t.zone == "room0" and t.state.relay_on for t in ticks))
            old_on = False
            for _ in range(60):  # bounded: a minute of the virtual clock
                old_on = (await server.get_coils(0, 1))[0]
                if old_on:
                    break
                await clock.sleep(1.0)
            assert old_on, "room0's relay (coil 0) never came on before the reload"
            write(True)
            reload.set()
            coils = [True, False]
            for _ in range(120):  # bounded: two minutes of the virtual clock
                old, new = (await server.get_coils(0, 1))[0], (await server.get_coils(9, 1))[0]
                coils = [old, new]
                if not old and new:
                    break
                await clock.sleep(1.0)
        finally:
            stop.set()
            await wait_for(clock, task, 30.0)
    assert coils == [False, True], f"after the reload coil 0 / coil 9: {coils}"
