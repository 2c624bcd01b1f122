"""Two ``roomloop run`` processes and one mosquitto: the zones on daemon A, the boiler on B.

Daemon A (site ``east``) controls two rooms played by a pymodbus TCP server in this process
(``service_rooms.RoomPlant``); daemon B (site ``plant-room``) has no zones, only a boiler whose
enable and pump relays are coils 0 and 1 of a second pymodbus server, serving ``east/room0``
and ``east/room1`` over the broker. Both processes run on the paced clock (``SPEED`` times
real time, one shared origin); the test watches B's coils on the same timeline and reads the
published topics. Every wait is bounded and polls (the broker, the coils); nothing sleeps to
synchronise.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import json
import sys
import time
from collections.abc import AsyncIterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import aiomqtt
import pytest
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "service"))
import service_rooms
from service_rooms import RoomPlant, ServiceProcess, Watcher, site_yaml
from source_helpers import Coils

from roomloop.clock import PacedClock

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]

SPEED = 60.0
EAST = "roomloop/east"
SOURCE_TOPIC = "roomloop/plant-room/source/boiler/state"
ENABLE, PUMP = 0, 1
VALVE_S = 120.0
OVERRUN_S = 90.0
MIN_ON_S = 60.0
MIN_OFF_S = 240.0
LAG_S = 6.0
"""Clock seconds the test's view of a relay may lag it (the coil poll, a Modbus read)."""
SLACK_S = 40.0
"""Clock seconds a decision may come late: a call's way from A's step over the broker to B's
step, on a busy machine (2/3 s real)."""


def east_site(modbus_port: int, broker_port: int) -> dict[str, Any]:
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=2)
    data["site"]["name"] = "east"
    return dict(data)


def plant_room_site(
    modbus_port: int, broker_port: int, *, policy: str, max_starts: int
) -> dict[str, Any]:
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=0)
    del data["zones"]
    data["site"]["name"] = "plant-room"
    data["points"] = [
        {"name": "boiler-enable", "type": "modbus-output", "link": "rooms", "address": ENABLE},
        {"name": "boiler-pump", "type": "modbus-output", "link": "rooms", "address": PUMP},
    ]
    data["heat_sources"] = [
        {
            "name": "boiler",
            "kind": "boiler",
            "output": "boiler-enable",
            "pump_output": "boiler-pump",
            "zones": ["east/room0", "east/room1"],
            "timing": {"valve_opening_s": VALVE_S, "pump_overrun_s": OVERRUN_S,
                       "min_on_s": MIN_ON_S, "min_off_s": MIN_OFF_S,
                       "max_starts_per_hour": max_starts},
            # east's state comes every 60 s; a broker restart lasts well under 1800 s (30 real
            # seconds at SPEED: on a loaded 2-core machine 600 s, 10 real seconds, was once
            # not enough for both daemons to reconnect, and a zone went stale for a moment)
            "remote_stale": {"policy": policy, "timeout_s": 1800},
        }
    ]
    return dict(data)


@dataclass
class Rig:
    a: ServiceProcess
    b: ServiceProcess
    plant: RoomPlant
    coils: Coils
    """B's boiler relays (enable, pump)."""
    valves: Coils
    """A's zone relays (room0, room1): the zone valves."""
    watcher: Watcher
    broker: Any
    clock: PacedClock
    b_started: float = 0.0
    """The clock time of B's first published source state (its start, give or take a tick)."""

    def source(self) -> dict[str, Any]:
        raw = self.watcher.latest.get(SOURCE_TOPIC)
        return {} if raw is None else dict(json.loads(raw))

    def source_at(self) -> float:
        """The clock time of B's last published state (0 before the first)."""
        stamp = self.source().get("timestamp")
        return 0.0 if stamp is None else dt.datetime.fromisoformat(stamp).timestamp()

    async def setpoint(self, zone: str, value: float) -> None:
        w = self.watcher
        assert w.client is not None
        n = len(w.results)
        await w.client.publish(f"{EAST}/zone/{zone}/cmd/setpoint", str(value), qos=1)
        assert (await w.answer(n))["ok"] is True

    async def until_source(self, condition: Any, timeout_s: float) -> dict[str, Any]:
        await self.watcher.wait_for(lambda: condition(self.source()), timeout_s)
        return self.source()

    async def restart_a(self) -> None:
        old = self.a
        self.a = ServiceProcess(old.config, old.state_dir, old.speed, old.log_path, old.origin)
        self.watcher.guard = self._died
        await self.a.start()

    def _died(self) -> str | None:
        died: str | None = self.a.died() or self.b.died()
        return died


@contextlib.asynccontextmanager
async def two_daemons(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any, *, policy: str, max_starts: int
) -> AsyncIterator[Rig]:
    rooms = await modbus_tcp_server()
    plc = await modbus_tcp_server()
    origin = time.time()
    processes = []
    for name, data in [
        ("east", east_site(rooms.port, mosquitto.port)),
        ("plant-room", plant_room_site(plc.port, mosquitto.port, policy=policy,
                                       max_starts=max_starts)),
    ]:
        config = tmp_path / f"{name}.yaml"
        config.write_text(yaml.safe_dump(data))
        processes.append(
            ServiceProcess(config, tmp_path / f"state-{name}", SPEED, tmp_path / f"{name}.log",
                           origin)
        )
    clock = PacedClock(SPEED, origin=origin)
    async with (
        RoomPlant(rooms, [22.0, 22.0], SPEED) as plant,
        Coils(plc, clock, count=2, every_s=0.5).watching() as coils,
        Coils(rooms, clock, count=2, every_s=0.5).watching() as valves,
        Watcher(mosquitto.host, mosquitto.port, "roomloop") as watcher,
    ):
        rig = Rig(processes[0], processes[1], plant, coils, valves, watcher, mosquitto, clock)
        watcher.guard = rig._died
        try:
            for process in processes:
                await process.start()
            w = watcher
            await w.wait_for(lambda: rig.source_at() > 0, 30)
            rig.b_started = rig.source_at()
            await w.wait_for(lambda: w.latest.get(f"{EAST}/status") == b"online", 20)
            # held low, the rooms never call until a test says (they cool towards 15 C only)
            for zone in ("room0", "room1"):
                await rig.setpoint(zone, 10.0)
            await rig.until_source(lambda s: s.get("stale") == [] and s["calling"] == [], 20)
            yield rig
        finally:
            await rig.a.stop()
            await rig.b.stop()


class SourceStates:
    """Every payload of B's source state, in order (the watcher keeps only the latest)."""

    def __init__(self, port: int) -> None:
        self.port = port
        self.seen: list[dict[str, Any]] = []

    @contextlib.asynccontextmanager
    async def listening(self) -> AsyncIterator[SourceStates]:
        async def run() -> None:
            while True:
                try:
                    async with aiomqtt.Client("127.0.0.1", self.port) as client:
                        await client.subscribe(SOURCE_TOPIC, qos=1)
                        async for message in client.messages:
                            if message.payload:
                                self.seen.append(json.loads(bytes(message.payload)))
                except aiomqtt.MqttError:
                    await asyncio.sleep(0.1)  # the broker is restarting: try again

        task = asyncio.create_task(run())
        try:
            yield self
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task


@pytest.fixture(autouse=True)
def _rooms_cool_to_15(monkeypatch: pytest.MonkeyPatch) -> None:
    """A room without heat settles at 15 C here, so a 10 C set point never calls."""
    monkeypatch.setattr(service_rooms, "T_OFF_C", 15.0)


async def test_the_boiler_waits_for_the_valve_overruns_its_pump_and_holds_off(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    async with two_daemons(
        tmp_path, mosquitto, modbus_tcp_server, policy="ignore", max_starts=2
    ) as rig:
        coils, valves = rig.coils, rig.valves
        # start-up counts as a stop on B (its pump overruns once): wait out its minimum off
        # time first
        await rig.watcher.wait_for(
            lambda: rig.source_at() > rig.b_started + MIN_OFF_S + LAG_S, MIN_OFF_S / SPEED + 10
        )
        assert coils.now == [False, False], coils.changes

        # 1. room0 calls: its valve (A's relay) opens, B fires only after the opening time
        await rig.setpoint("room0", 26.0)
        await rig.watcher.wait_for(lambda: valves.now[0], 10)
        valve_open = valves.first(0, True)
        state = await rig.until_source(lambda s: s.get("calling") == ["east/room0"], 10)
        assert state["reason"] == "valve-opening", state
        assert state["waiting_for_valve"]["zone"] == "east/room0" and not state["running"]
        await rig.watcher.wait_for(lambda: coils.now[ENABLE], VALVE_S / SPEED + 10)
        first_start = coils.first(ENABLE, True)
        assert VALVE_S - LAG_S <= first_start - valve_open <= VALVE_S + SLACK_S, (
            first_start - valve_open
        )
        assert coils.first(PUMP, True) <= first_start + LAG_S  # the pump with the burner

        # 2. the call ends: the boiler stops (after its minimum on time), the pump overruns
        await rig.setpoint("room0", 10.0)
        await rig.watcher.wait_for(lambda: not coils.now[ENABLE], MIN_ON_S / SPEED + 10)
        first_stop = coils.first(ENABLE, False, after=first_start)
        assert first_stop - first_start >= MIN_ON_S - LAG_S
        await rig.watcher.wait_for(lambda: not coils.now[PUMP], OVERRUN_S / SPEED + 10)
        overrun = coils.first(PUMP, False, after=first_stop) - first_stop
        assert OVERRUN_S - LAG_S <= overrun <= OVERRUN_S + SLACK_S, overrun

        # 3. a new call at once: the valve opens, the boiler waits out its minimum off time
        await rig.setpoint("room1", 26.0)
        state = await rig.until_source(lambda s: (s.get("lockout") or {}).get("reason")
                                       == "min-off", 10)
        assert state["calling"] == ["east/room1"] and not state["running"]
        await rig.watcher.wait_for(lambda: coils.now[ENABLE], MIN_OFF_S / SPEED + 10)
        second_start = coils.first(ENABLE, True, after=first_stop)
        assert second_start - first_stop >= MIN_OFF_S - LAG_S, second_start - first_stop
        # the coil is seen switching before B's next state says so
        await rig.until_source(lambda s: s.get("starts_1h") == 2 and s["running"], 10)

        # 4. stop, and call again after the minimum off time: two starts this hour hold it
        await rig.setpoint("room1", 10.0)
        await rig.watcher.wait_for(lambda: not coils.now[ENABLE], MIN_ON_S / SPEED + 10)
        second_stop = coils.first(ENABLE, False, after=second_start)
        await rig.setpoint("room1", 26.0)
        state = await rig.until_source(
            lambda s: (s.get("lockout") or {}).get("reason") == "max-starts",
            (MIN_OFF_S + VALVE_S) / SPEED + 10,
        )
        assert rig.source_at() >= second_stop + MIN_OFF_S - LAG_S
        until = dt.datetime.fromisoformat(state["lockout"]["until"]).timestamp()
        assert until == pytest.approx(first_start + 3600, abs=SLACK_S)  # an hour after the first
        assert not coils.now[ENABLE] and state["starts_1h"] == 2
    events = [e for e in rig.b.log_events() if str(e.get("event", "")).startswith("source.")]
    names = [e["event"] for e in events]
    assert names.count("source.started") == 2 and names.count("source.stopped") == 2, names
    assert {e["lockout"] for e in events if e["event"] == "source.lockout"} >= {
        "min-off", "max-starts"
    }


async def test_a_killed_zone_daemon_goes_stale_and_a_broker_restart_starts_nothing(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    async with two_daemons(
        tmp_path, mosquitto, modbus_tcp_server, policy="assume-calling", max_starts=6
    ) as rig:
        w, coils = rig.watcher, rig.coils

        # A killed (SIGKILL): its will marks east offline, B applies assume-calling
        await rig.a.stop()
        await w.wait_for(lambda: w.latest.get(f"{EAST}/status") == b"offline", 10)
        both = ["east/room0", "east/room1"]
        state = await rig.until_source(lambda s: s.get("stale") == both, 10)
        assert state["stale_policy"] == "assume-calling" and state["calling"] == both
        # and the stale zones fire it, after the valve opening time as any call
        await w.wait_for(lambda: coils.now[ENABLE], (VALVE_S + MIN_OFF_S) / SPEED + 10)

        # A restarted: its zones are heard again, not calling (their holds survived)
        await rig.restart_a()
        await w.wait_for(lambda: w.latest.get(f"{EAST}/status") == b"online", 20)
        state = await rig.until_source(lambda s: s.get("stale") == [] and s["calling"] == [], 20)
        await w.wait_for(lambda: not coils.now[ENABLE], MIN_ON_S / SPEED + 10)
        await w.wait_for(lambda: not coils.now[PUMP], OVERRUN_S / SPEED + 10)

        # the broker restarted (on the same port, retained messages lost): everything is
        # published again, and the reconnection itself starts nothing
        starts = rig.source()["starts_1h"]
        changes = len(coils.changes)
        async with SourceStates(rig.broker.port).listening() as states:
            rig.broker.stop()
            w.latest.clear()
            rig.broker.start()
            back = rig.clock.now()
            await w.wait_for(lambda: w.latest.get(f"{EAST}/status") == b"online", 20)
            state = await rig.until_source(
                lambda s: s.get("stale") == [] and s["calling"] == [], 20
            )
            # A republishes its demand after its status (B kept what it heard before)
            await w.wait_for(lambda: w.latest.get(f"{EAST}/zone/room0/demand") == b"false", 10)
            # a stale zone (assume-calling) would have fired the boiler within the valve
            # opening time: let B publish past it, with nothing on
            await w.wait_for(
                lambda: rig.source_at() > back + VALVE_S + LAG_S, (VALVE_S + 60) / SPEED + 10
            )
        state = rig.source()
        assert state["running"] is False and state["calling"] == [] and state["stale"] == []
        assert state["starts_1h"] == starts
        assert coils.changes[changes:] == [], coils.changes[changes:]
        # not even for a moment did the reconnection make a zone stale or calling
        assert states.seen, "no source state after the broker restart"
        assert all(s["calling"] == [] and s["stale"] == [] for s in states.seen), states.seen
        # demand is correct after the reconnection: a call fires it again
        await rig.setpoint("room0", 26.0)
        state = await rig.until_source(lambda s: s.get("calling") == ["east/room0"], 10)
        await w.wait_for(lambda: coils.now[ENABLE], (VALVE_S + MIN_OFF_S) / SPEED + 10)
