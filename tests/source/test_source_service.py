"""Heat sources inside the service, in-process on a virtual clock, with real parts.

Real parts: pymodbus TCP servers (the rooms of ``service_rooms.RoomPlant``, and the boiler's
enable and pump relays as coils 2 and 3 of the same device) and, for remote zones, mosquitto.
The service, the rooms and the test share one virtual clock; every wait is bounded.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

import pytest
import yaml
from structlog.testing import capture_logs

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "service"))
from service_rooms import RoomPlant, Watcher, running, site_yaml, until
from source_helpers import Coils

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.service.app import Service

VALVE_S = 120.0
OVERRUN_S = 60.0
MIN_OFF_S = 300.0


def write_site(tmp_path: Path, data: dict[str, Any]) -> Site:
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


def boiler(zones: list[str], **timing: float) -> dict[str, Any]:
    return {
        "name": "boiler",
        "kind": "boiler",
        "output": "boiler-enable",
        "pump_output": "boiler-pump",
        "zones": zones,
        "timing": {"valve_opening_s": VALVE_S, "pump_overrun_s": OVERRUN_S, "min_on_s": 60,
                   "min_off_s": MIN_OFF_S, **timing},
        "remote_stale": {"policy": "ignore", "timeout_s": 120},
    }


def source_points() -> list[dict[str, Any]]:
    return [
        {"name": "boiler-enable", "type": "modbus-output", "link": "rooms", "address": 2},
        {"name": "boiler-pump", "type": "modbus-output", "link": "rooms", "address": 3},
    ]


async def test_a_local_source_waits_for_the_valve_and_overruns_its_pump(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1, zones=2)
    del data["broker"]
    data["points"] += source_points()
    data["heat_sources"] = [boiler(["room0", "room1"])]
    site = write_site(tmp_path, data)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    with capture_logs() as logs:
        async with (
            RoomPlant(server, [23.0, 23.0], clock),
            Coils(server, clock).watching() as coils,
            running(service),
        ):
            await until(clock, lambda: len(service.zones) == 2, 30)
            for room in ("room0", "room1"):  # held low: nothing calls until the test says
                service.apply_command(room, "setpoint", 10.0)
            # Start-up counts as a stop (the source may have
            # run just before): the pump overruns once, then everything is off.
            await until(clock, lambda: coils.now[3], 30)
            await until(clock, lambda: not coils.now[3], OVERRUN_S + 30)
            assert coils.now == [False] * 4
            await clock.sleep(MIN_OFF_S)  # and the start-up's minimum off time is over
            service.apply_command("room1", "setpoint", 26.0)
            await until(clock, lambda: coils.now[1], 60)
            valve_open = coils.first(1, True)
            out = service.sources.sources["boiler"].outputs
            assert out is not None and out.reason == "valve-opening" and not coils.now[2]
            assert out.waiting_for == "room1"
            await until(clock, lambda: coils.now[2], VALVE_S + 60)
            fired = coils.first(2, True)
            # the source fires once the valve had its opening time, not before (one poll late
            # at most: the watcher looks every clock second, the relays are written at once)
            assert VALVE_S - 1.5 <= fired - valve_open <= VALVE_S + 6, coils.changes
            assert coils.first(3, True) <= fired + 1.5  # the pump runs with it
            out = service.sources.sources["boiler"].outputs
            assert out is not None and out.calling == ("room1",) and out.reason == "firing"
            # the call ends: the source stops after its minimum on time, the pump runs on
            service.apply_command("room1", "setpoint", 10.0)
            await until(clock, lambda: not coils.now[2], 120)
            stopped = coils.first(2, False)
            await until(clock, lambda: not coils.now[3], OVERRUN_S + 30)
            overrun = coils.first(3, False, after=stopped) - stopped
            assert OVERRUN_S - 1.5 <= overrun <= OVERRUN_S + 6, coils.changes
            # a new call within the minimum off time: the valve opens, the source waits it out
            service.apply_command("room0", "setpoint", 26.0)
            await until(clock, lambda: coils.now[0], 60)
            await until(clock, lambda: coils.now[2], MIN_OFF_S + 60)
            assert coils.first(2, True, after=stopped) - stopped >= MIN_OFF_S - 1.5
    events = [e["event"] for e in logs if str(e.get("event", "")).startswith("source.")]
    assert events[:1] == ["source.resumed"]
    assert events.count("source.started") == 2 and "source.stopped" in events
    assert any(
        e["event"] == "source.lockout" and e["lockout"] == "min-off" for e in logs
    ), events
    # at stop every output went to its safe state, the source's too
    assert await server.get_coils(0, 4) == [False] * 4
    assert not service.restarts, service.restarts


def zoneless_site(tmp_path: Path, modbus_port: int, broker_port: int) -> Site:
    """A plant-room board: no zones, a boiler serving two zones of site ``east``."""
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=0)
    data["site"]["name"] = "plant-room"
    data["points"] = source_points()
    source = boiler(["east/office", "east/hall"])
    # the test publishes east's demand once, no heartbeat: only its will makes it stale here
    source["remote_stale"]["timeout_s"] = 86400
    data["heat_sources"] = [source]
    del data["zones"]
    return write_site(tmp_path, data)


@pytest.mark.needs_mosquitto
async def test_a_site_without_zones_runs_a_source_on_remote_demand(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = zoneless_site(tmp_path, server.port, mosquitto.port)
    assert site.zones == []
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    east = "roomloop/east"
    topic = "roomloop/plant-room/source/boiler/state"
    async with (
        Watcher(mosquitto.host, mosquitto.port, "roomloop", clock=clock) as w,
        Coils(server, clock).watching() as coils,
        running(service),
    ):

        def state() -> dict[str, Any]:
            raw = w.latest.get(topic)
            return {} if raw is None else dict(json.loads(raw))

        assert w.client is not None
        # nothing heard of east yet: both zones stale, ignored by the policy
        await w.wait_for(lambda: state().get("stale") == ["east/office", "east/hall"], 10)
        await w.client.publish(f"{east}/status", "online", qos=1, retain=True)
        await w.client.publish(f"{east}/zone/office/demand", "false", qos=1, retain=True)
        await w.client.publish(f"{east}/zone/hall/demand", "true", qos=1, retain=True)
        await w.wait_for(lambda: state().get("calling") == ["east/hall"], 10)
        assert state()["reason"] in ("valve-opening", "min-off")
        await w.wait_for(lambda: state().get("running") is True, 15)
        await w.wait_for(lambda: coils.now[2] and coils.now[3], 10)
        # the hall's site goes offline (its daemon's will): stale, ignored, the source stops
        await w.client.publish(f"{east}/status", "offline", qos=1, retain=True)
        await w.wait_for(lambda: state().get("stale") == ["east/office", "east/hall"], 10)
        await w.wait_for(lambda: state().get("running") is False, 15)
        assert state()["stale_policy"] == "ignore" and state()["calling"] == []
        await w.wait_for(lambda: not coils.now[2], 10)
        for name in ("status", "zone/office/demand", "zone/hall/demand"):  # leave no retained
            await w.client.publish(f"{east}/{name}", b"", qos=1, retain=True)


class BrokenController:
    """A zone controller whose every step raises: the zone's loop fails and is restarted
    again and again (the supervisor's backoff), and never steps."""

    def __init__(self, real: Any) -> None:
        self.real = real

    def __getattr__(self, name: str) -> Any:
        return getattr(self.real, name)

    def step(self, *args: Any, **kwargs: Any) -> Any:
        raise ZeroDivisionError("injected")


async def test_a_zone_whose_loop_fails_stops_calling_its_source(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """A calling zone's loop breaks: its valve is held at its safe state (off), and the
    source must not go on firing into it on the zone's last call."""
    clock = VirtualClock()
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1, zones=1)
    del data["broker"]
    data["points"] += source_points()
    data["heat_sources"] = [boiler(["room0"], min_off_s=0)]
    site = write_site(tmp_path, data)
    service = Service(site, clock=clock, state_dir=tmp_path / "state")
    with capture_logs() as logs:
        async with (
            RoomPlant(server, [18.0], clock),
            Coils(server, clock).watching() as coils,
            running(service),
        ):
            await until(clock, lambda: "room0" in service.zones, 30)
            service.apply_command("room0", "setpoint", 26.0)
            await until(clock, lambda: coils.now[0] and coils.now[2], VALVE_S + 120)
            runtime = service.zones["room0"]
            runtime.controller = BrokenController(runtime.controller)  # type: ignore[assignment]
            await until(clock, lambda: service.restarts.get("zone:room0", 0) >= 1, 60)
            # the valve goes safe at once; the boiler stops (its minimum on time is 60 s)
            await until(clock, lambda: not coils.now[0] and not coils.now[2], 120)
            out = service.sources.sources["boiler"].outputs
            assert out is not None and out.calling == () and not out.enable
            steps = runtime.steps
            await clock.sleep(300)  # the loop keeps failing; the boiler stays off
            assert runtime.steps == steps and service.restarts["zone:room0"] >= 2
            assert not coils.now[2], coils.changes
    assert any(e["event"] == "service.task_failed" for e in logs)


async def test_a_restart_keeps_the_sources_starts_of_the_last_hour(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """A boiler allowed 2 starts an hour starts twice, the service stops, and a new one starts
    on the same state directory: the boiler waits for the first start to leave the hour
    (the restart does not reset the count), then fires."""
    clock = VirtualClock()
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1, zones=1)
    del data["broker"]
    data["points"] += source_points()
    data["heat_sources"] = [
        boiler(["room0"], valve_opening_s=30, min_off_s=60, max_starts_per_hour=2)
    ]
    site = write_site(tmp_path, data)
    state_dir = tmp_path / "state"
    async with (
        RoomPlant(server, [15.0], clock) as plant,
        Coils(server, clock).watching() as coils,
    ):
        plant.frozen = True  # the room stays at 15 C: it calls whenever its set point is 26 C
        service = Service(site, clock=clock, state_dir=state_dir)
        async with running(service):
            await until(clock, lambda: "room0" in service.zones, 30)
            for _ in range(2):
                service.apply_command("room0", "setpoint", 26.0)
                await until(clock, lambda: coils.now[2], 600)
                service.apply_command("room0", "setpoint", 10.0)
                await until(clock, lambda: not coils.now[2], 600)
            out = service.sources.sources["boiler"].outputs
            assert out is not None and out.starts_1h == 2
        started = [at for at, coil, on in coils.changes if coil == 2 and on]
        assert len(started) == 2, coils.changes
        saved = json.loads(service.store.path.read_text())["sources"]["boiler"]
        assert len(saved["starts"]) == 2 and saved["kind"] == "boiler"

        again = Service(site, clock=clock, state_dir=state_dir)
        restarted = clock.now()
        with capture_logs() as logs:
            async with running(again):
                await until(clock, lambda: "room0" in again.zones, 30)
                again.apply_command("room0", "setpoint", 26.0)
                loop = again.sources.sources["boiler"]
                # valve 30 s, minimum off 60 s: a source that forgot would fire within 2 min
                await until(clock, lambda: loop.outputs is not None
                            and loop.outputs.reason == "max-starts", 300)
                await clock.sleep(300)
                out = loop.outputs
                assert out is not None and not coils.now[2] and coils.now[0], coils.changes
                assert (out.lockout, out.starts_1h) == ("max-starts", 2)
                assert out.lockout_until is not None
                assert abs(out.lockout_until - (started[0] + 3600)) <= 1.5
                # the first start leaves the hour: the boiler fires again
                await until(clock, lambda: coils.now[2], started[0] + 3600 - clock.now() + 60)
        fired = coils.first(2, True, after=restarted)
        assert fired >= started[0] + 3600 - 1.5, coils.changes
    restored = [e for e in logs if e["event"] == "persist.source_restored"]
    assert restored and restored[0]["source"] == "boiler" and restored[0]["starts"] == 2
