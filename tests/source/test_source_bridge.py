"""Two ``roomloop run`` processes on two mosquitto brokers bridged on loopback.

Daemon A (site ``north-wing``) controls two rooms played by a pymodbus TCP server in this
process (``service_rooms.RoomPlant``) and talks to broker 1 only. Daemon B (site
``plant-room``) has no zones, only a boiler whose enable and pump relays are coils 0 and 1 of
a second pymodbus server, serving ``north-wing/room0`` and ``north-wing/room1``; it talks to
broker 2 only. Broker 2 carries a test-only mosquitto bridge to broker 1, the one
``docs/heat-sources.md`` shows (``topic roomloop/north-wing/# in 1``, on the source's broker),
so A's demand, state and last will reach B across the bridge and nothing else joins the two.

The test drives A's zones with commands on broker 1 and watches B's coils and B's retained
``source/boiler/state`` on broker 2. Both daemons run on the paced clock (``SPEED`` times real
time, one shared origin); the test's coil watchers are on the same timeline. Every wait is
bounded and waits for an event (a coil, a topic); nothing sleeps to synchronise.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import json
import shutil
import subprocess
import sys
import time
from collections.abc import AsyncIterator, Iterator
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

from conftest import LOOPBACK, MosquittoBroker, free_port, wait_listening
from roomloop.clock import PacedClock

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]

SPEED = 60.0
SITE = "north-wing"
NORTH = f"roomloop/{SITE}"
ZONES = [f"{SITE}/room0", f"{SITE}/room1"]
SOURCE_TOPIC = "roomloop/plant-room/source/boiler/state"
ENABLE, PUMP = 0, 1
VALVE_S = 120.0
OVERRUN_S = 90.0
MIN_ON_S = 60.0
MIN_OFF_S = 60.0
LAG_S = 6.0
"""Clock seconds the test's view of a relay may lag it (the coil poll, a Modbus read)."""
SLACK_S = 60.0
"""Clock seconds a decision may come late: a call's way from A's step over broker 1, the
bridge and broker 2 to B's step, on a busy machine (1 s real)."""


def bridge_config(port: int, remote_port: int) -> str:
    """Broker 2's configuration: a loopback listener and the bridge of docs/heat-sources.md."""
    return (
        f"listener {port} {LOOPBACK}\n"
        "allow_anonymous true\n"
        f"connection {SITE}\n"
        f"address {LOOPBACK}:{remote_port}\n"
        f"topic {NORTH}/# in 1\n"
        "cleansession true\n"
        "restart_timeout 1\n"
    )


@pytest.fixture
def bridged(tmp_path: Path) -> Iterator[tuple[MosquittoBroker, int]]:
    """Broker 1 (the zones' side) and the port of broker 2, bridged to it (the source's side)."""
    if shutil.which("mosquitto") is None:
        pytest.skip("mosquitto is not installed (apt install mosquitto)")
    first = MosquittoBroker()
    first.start()
    port = free_port()
    config = tmp_path / "bridge.conf"
    config.write_text(bridge_config(port, first.port))
    second = subprocess.Popen(
        ["mosquitto", "-c", str(config)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    try:
        wait_listening(LOOPBACK, port)
        yield first, port
    finally:
        second.terminate()
        try:
            second.wait(timeout=5)
        except subprocess.TimeoutExpired:
            second.kill()
            second.wait(timeout=5)
        first.stop()


def north_site(modbus_port: int, broker_port: int) -> dict[str, Any]:
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=2)
    data["site"]["name"] = SITE
    return dict(data)


def plant_room_site(modbus_port: int, broker_port: int) -> dict[str, Any]:
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
            "zones": ZONES,
            "timing": {"valve_opening_s": VALVE_S, "pump_pre_run_s": 0,
                       "pump_overrun_s": OVERRUN_S,
                       "min_on_s": MIN_ON_S, "min_off_s": MIN_OFF_S,
                       "max_starts_per_hour": 6},
            # ignore: a zone not heard yet (or offline) never fires the boiler, so every
            # start below is a call of A's; 1800 s (30 real seconds) outlasts any lull
            "remote_stale": {"policy": "ignore", "timeout_s": 1800},
        }
    ]
    return dict(data)


@dataclass
class Rig:
    a: ServiceProcess
    b: ServiceProcess
    coils: Coils
    """B's boiler relays (enable, pump)."""
    valves: Coils
    """A's zone relays (room0, room1): the zone valves."""
    north: Watcher
    """On broker 1: A's topics and command answers (and whatever else reaches broker 1)."""
    plant: Watcher
    """On broker 2: B's topics and A's, as the bridge carries them."""
    b_started: float = 0.0
    """The clock time of B's first published source state (its start, give or take a tick)."""

    def source(self) -> dict[str, Any]:
        raw = self.plant.latest.get(SOURCE_TOPIC)
        return {} if raw is None else dict(json.loads(raw))

    def source_at(self) -> float:
        """The clock time of B's last published state (0 before the first)."""
        stamp = self.source().get("timestamp")
        return 0.0 if stamp is None else dt.datetime.fromisoformat(stamp).timestamp()

    async def setpoint(self, zone: str, value: float) -> None:
        w = self.north
        assert w.client is not None
        n = len(w.results)
        await w.client.publish(f"{NORTH}/zone/{zone}/cmd/setpoint", str(value), qos=1)
        assert (await w.answer(n))["ok"] is True

    async def until_source(self, condition: Any, timeout_s: float) -> dict[str, Any]:
        await self.plant.wait_for(lambda: condition(self.source()), timeout_s)
        return self.source()

    def bridged(self, topic: str) -> bytes | None:
        """A's ``topic`` as broker 2 has it (carried by the bridge)."""
        return self.plant.latest.get(f"{NORTH}/{topic}")

    async def restart_a(self) -> None:
        old = self.a
        self.a = ServiceProcess(old.config, old.state_dir, old.speed, old.log_path, old.origin)
        await self.a.start()

    def died(self) -> str | None:
        died: str | None = self.a.died() or self.b.died()
        return died


@contextlib.asynccontextmanager
async def bridged_daemons(
    tmp_path: Path, bridged: tuple[MosquittoBroker, int], modbus_tcp_server: Any
) -> AsyncIterator[Rig]:
    first, second_port = bridged
    rooms = await modbus_tcp_server()
    plc = await modbus_tcp_server()
    origin = time.time()
    processes = []
    for name, data in [
        ("north", north_site(rooms.port, first.port)),
        ("plant-room", plant_room_site(plc.port, second_port)),
    ]:
        config = tmp_path / f"{name}.yaml"
        config.write_text(yaml.safe_dump(data))
        processes.append(
            ServiceProcess(config, tmp_path / f"state-{name}", SPEED, tmp_path / f"{name}.log",
                           origin)
        )
    clock = PacedClock(SPEED, origin=origin)
    async with (
        RoomPlant(rooms, [22.0, 22.0], SPEED),
        Coils(plc, clock, count=2, every_s=0.5).watching() as coils,
        Coils(rooms, clock, count=2, every_s=0.5).watching() as valves,
        Watcher(first.host, first.port, "roomloop") as north,
        Watcher(LOOPBACK, second_port, "roomloop") as plant,
    ):
        rig = Rig(processes[0], processes[1], coils, valves, north, plant)
        north.guard = plant.guard = rig.died
        try:
            # A first, and its status across the bridge (the bridge is up) before B starts
            await rig.a.start()
            await plant.wait_for(lambda: rig.bridged("status") == b"online", 20)
            # held low, the rooms never call until the test says (they cool towards 15 C only)
            for zone in ("room0", "room1"):
                await rig.setpoint(zone, 10.0)
            await rig.b.start()
            await plant.wait_for(lambda: rig.source_at() > 0, 30)
            rig.b_started = rig.source_at()
            await rig.until_source(lambda s: s.get("stale") == [] and s["calling"] == [], 20)
            yield rig
        finally:
            await rig.a.stop()
            await rig.b.stop()


async def retained(host: str, port: int, topic: str, timeout_s: float = 5.0) -> bytes:
    """``topic``'s retained payload, as a client subscribing now gets it."""
    async with aiomqtt.Client(host, port) as client:
        await client.subscribe(topic, qos=1)
        message = await asyncio.wait_for(anext(client.messages), timeout_s)
    assert message.retain, f"{topic} is not retained"
    return bytes(message.payload)


@pytest.fixture(autouse=True)
def _rooms_cool_to_15(monkeypatch: pytest.MonkeyPatch) -> None:
    """A room without heat settles at 15 C here, so a 10 C set point never calls."""
    monkeypatch.setattr(service_rooms, "T_OFF_C", 15.0)


async def test_a_call_on_broker_1_fires_the_boiler_on_broker_2_after_the_valve_time(
    tmp_path: Path, bridged: tuple[MosquittoBroker, int], modbus_tcp_server: Any
) -> None:
    async with bridged_daemons(tmp_path, bridged, modbus_tcp_server) as rig:
        coils, valves, plant = rig.coils, rig.valves, rig.plant
        # start-up counts as a stop on B (its pump overruns once): wait out its minimum off
        # time and the overrun first
        await plant.wait_for(
            lambda: rig.source_at() > rig.b_started + MIN_OFF_S + LAG_S
            and coils.now == [False, False],
            (MIN_OFF_S + OVERRUN_S) / SPEED + 10,
        )
        state = rig.source()
        assert state["reason"] == "idle" and not state["running"], state
        assert not [c for c in coils.changes if c[1] == ENABLE], coils.changes  # never fired

        # 1. room0 calls on broker 1: A's relay opens its valve, the call crosses the bridge,
        # and B waits for the valve's opening time
        await rig.setpoint("room0", 26.0)
        await plant.wait_for(lambda: valves.now[0], 10)
        valve_open = valves.first(0, True)
        await plant.wait_for(lambda: rig.bridged("zone/room0/demand") == b"true", 10)
        state = await rig.until_source(lambda s: s.get("calling") == [ZONES[0]], 10)
        assert state["reason"] == "valve-opening", state
        assert state["waiting_for_valve"]["zone"] == ZONES[0] and not state["running"]
        await plant.wait_for(lambda: coils.now[ENABLE], VALVE_S / SPEED + 10)
        start = coils.first(ENABLE, True)
        assert VALVE_S - LAG_S <= start - valve_open <= VALVE_S + SLACK_S, start - valve_open
        await plant.wait_for(lambda: coils.now[PUMP], 10)  # its own write, a moment apart
        assert abs(coils.first(PUMP, True, after=valve_open) - start) <= LAG_S  # with it
        state = await rig.until_source(lambda s: s.get("running") is True, 10)
        assert state["calling"] == [ZONES[0]] and state["pump"] and state["starts_1h"] == 1

        # 2. the call ends on broker 1: B stops (after its minimum on time), its pump overruns
        await rig.setpoint("room0", 10.0)
        await plant.wait_for(lambda: rig.bridged("zone/room0/demand") == b"false", 10)
        await plant.wait_for(lambda: not coils.now[ENABLE], MIN_ON_S / SPEED + 10)
        stop = coils.first(ENABLE, False, after=start)
        assert stop - start >= MIN_ON_S - LAG_S, stop - start
        state = await rig.until_source(lambda s: s.get("running") is False, 10)
        assert state["calling"] == [] and state["pump"] and state["pump_reason"] == "overrun"
        await plant.wait_for(lambda: not coils.now[PUMP], OVERRUN_S / SPEED + 10)
        overrun = coils.first(PUMP, False, after=stop) - stop
        assert OVERRUN_S - LAG_S <= overrun <= OVERRUN_S + SLACK_S, overrun
        state = await rig.until_source(lambda s: s.get("pump") is False, 10)
        assert state["reason"] == "idle" and state["starts_1h"] == 1, state
        # what a client that comes later reads on broker 2: the retained state, all off
        kept = json.loads(await retained(LOOPBACK, plant.port, SOURCE_TOPIC))
        assert kept["running"] is False and kept["pump"] is False and kept["calling"] == []
        assert kept["starts_1h"] == 1, kept
        # and A's demand, carried by the bridge, is retained on broker 2 as well (a source
        # restarted behind the bridge hears its zones at once)
        assert await retained(LOOPBACK, plant.port, f"{NORTH}/zone/room0/demand") == b"false"

        # 3. A killed (SIGKILL): its will crosses the bridge, B's zones go stale (ignored)
        await rig.a.stop()
        await plant.wait_for(lambda: rig.bridged("status") == b"offline", 10)
        state = await rig.until_source(lambda s: s.get("stale") == ZONES, 10)
        assert state["stale_policy"] == "ignore" and state["calling"] == [], state
        assert not any(coils.now), coils.changes

        # 4. A restarted: online across the bridge, its zones fresh and not calling (its holds
        # survived in its state file), and the boiler still off
        await rig.restart_a()
        await plant.wait_for(lambda: rig.bridged("status") == b"online", 20)
        state = await rig.until_source(lambda s: s.get("stale") == [] and s["calling"] == [], 20)
        assert not state["running"] and not any(coils.now), coils.changes

        # the bridge is one way (in, on B's broker): B's topics never reached broker 1
        assert not [t for t in rig.north.latest if t.startswith("roomloop/plant-room/")]
    names = [e["event"] for e in rig.b.log_events() if str(e.get("event", "")).startswith(
        "source.")]
    assert names.count("source.started") == 1 and names.count("source.stopped") == 1, names
