"""End to end: a heat-pump zone with a heating, a cooling and a changeover output.

Real parts: a pymodbus TCP server holds the room's temperature register and the three coils
(heating 0, cooling 1, changeover 2); the service runs in-process on a virtual clock
(roomloop/clock.py), as the other in-process service tests do. The test plays the room:
warm first, then cold, and records every coil change as the server saw it, so the order
of the switchings is what the device saw.
"""

from __future__ import annotations

import asyncio
import contextlib
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import yaml
from service_rooms import running, site_yaml, until

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.config.presets import COMPRESSOR_MIN_OFF_S
from roomloop.service.app import Service, TickReport
from roomloop.service.publisher import state_payload

HEAT, COOL, VALVE = 0, 1, 2
HOLD_S = 30.0
CHANGEOVER_S = COMPRESSOR_MIN_OFF_S  # the least check takes for a heat pump's compressor


def heat_pump_site(tmp_path: Path, port: int) -> Any:
    data = site_yaml(modbus_port=port, broker_port=1)
    del data["broker"]
    data["points"] += [
        {"name": "cool0", "type": "modbus-output", "link": "rooms", "address": COOL},
        {"name": "valve0", "type": "modbus-output", "link": "rooms", "address": VALVE},
    ]
    data["zones"][0].update(
        {
            "heating": "forced-air",
            "cooling": {
                "output": "cool0",
                "type": "direct-expansion",
                "setpoints": {"comfort": 24, "standby": 25, "economy": 26},
            },
            "changeover": {
                "mode": "auto",
                "output": "valve0",
                "energised_in": "cooling",
                "hold_s": HOLD_S,
                "min_changeover_s": CHANGEOVER_S,
            },
        }
    )
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


async def test_warm_room_cools_and_cold_room_heats_with_the_changeover_output_switched_first(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    site = heat_pump_site(tmp_path, server.port)
    ticks: list[TickReport] = []
    service = Service(site, clock=clock, state_dir=tmp_path / "state", on_tick=ticks.append)
    room = {"temperature": 27.0, "target": 27.0}
    changes: list[tuple[float, int, bool]] = []

    async def play_room() -> None:
        last = [False, False, False]
        while True:
            # the room drifts toward its target at 1 K/min (a plausible rate for the sensor
            # checks, core/reliability.py, which flag a jump of several kelvin as implausible)
            step = max(-1 / 60, min(1 / 60, room["target"] - room["temperature"]))
            room["temperature"] += step
            await server.set_registers("input", 0, [round(room["temperature"] * 10)])
            coils = await server.get_coils(0, 3)
            for i, (was, now_on) in enumerate(zip(last, coils, strict=True)):
                if was != now_on:
                    changes.append((clock.monotonic(), i, now_on))
            last = list(coils)
            await clock.sleep(1.0)

    def on(coil: int) -> bool:
        state = False
        for _, i, value in changes:
            if i == coil:
                state = value
        return state

    def first(coil: int, value: bool, after: float = -1e18) -> float:
        return next(t for t, i, v in changes if i == coil and v == value and t > after)

    player = asyncio.create_task(play_room())
    try:
        async with running(service):
            # A warm room (27 C, above the cooling comfort 24 C): the cooling call.
            await until(clock, lambda: on(COOL), timeout_s=900)
            assert not on(HEAT)
            valve_on, cool_on = first(VALVE, True), first(COOL, True)
            # The changeover output went to cooling (energised) first, and was held there
            # for hold_s before the call started.
            assert valve_on + HOLD_S <= cool_on + 1.0
            assert ticks[-1].outputs.cooling is not None
            assert ticks[-1].outputs.cooling.call == "cool"
            # The state shows the cooling and the changeover outputs as the device reads
            # them back, as it shows the heating one (coils read back off the server).
            view = next(iter(service.publisher.views()))
            cooling_state = state_payload(view, units="C", tz=ZoneInfo("UTC"))["cooling"]
            await until(
                clock,
                lambda: _read_back(service, "cooling") == ("cool0", True, True, "ok"),
                timeout_s=30,
            )
            assert _read_back(service, "changeover_output_device") == ("valve0", True, True, "ok")
            assert cooling_state["output"]["point"] == "cool0"
            # A cold room (15 C, below the heating comfort 20 C): cooling stops, the
            # changeover output goes back to heating while both calls are off, then heat.
            room["target"] = 15.0
            await until(clock, lambda: on(HEAT), timeout_s=1800)
            cool_off = first(COOL, False, after=cool_on)
            valve_off = first(VALVE, False, after=valve_on)
            heat_on = first(HEAT, True)
            assert cool_off <= valve_off <= heat_on
            assert heat_on - valve_off >= HOLD_S - 1.0
            # the changeover time runs from the end of the cooling call (one coil poll of slack)
            assert heat_on - cool_off >= CHANGEOVER_S - 1.0
            assert not on(COOL)
            last = ticks[-1].outputs.cooling
            assert last is not None and last.call == "heat"
    finally:
        player.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await player
    # Never both calls at once, as the device saw them.
    heat = cool = False
    for _, i, value in changes:
        heat = value if i == HEAT else heat
        cool = value if i == COOL else cool
        assert not (heat and cool)
    # At the stop every output went to its safe state: heating, cooling, changeover off.
    assert (await server.get_coils(0, 3)) == [False, False, False]


def _read_back(service: Service, block: str) -> tuple[Any, ...]:
    """The zone's published cooling or changeover output: point, commanded, read back and
    its verdict, from the state JSON as the publisher renders it now."""
    view = next(iter(service.publisher.views()))
    state = state_payload(view, units="C", tz=ZoneInfo("UTC"))["cooling"]
    shown = state["output"] if block == "cooling" else state[block]
    return (shown["point"], shown["commanded"], shown["read_back"], shown["verdict"])


async def test_the_program_carries_the_changeover_and_a_command_lasts_until_its_next_change(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """A heat-pump zone whose weekly program says heat from midnight and cool from 10:30: a
    warm room does not cool before 10:30 (changeover heat), cools after; a ``changeover``
    command at 10:40 holds until the program's next changeover entry."""
    import datetime as dt

    start = dt.datetime(2026, 6, 1, 10, 0, tzinfo=dt.UTC).timestamp()
    clock = VirtualClock(start=start)
    server = await modbus_tcp_server()
    await server.set_registers("input", 0, [270])  # 27.0 C: warm enough to cool
    site = heat_pump_site(tmp_path, server.port)
    (zone,) = site.zones
    data = yaml.safe_load((tmp_path / "site.yaml").read_text())
    data["zones"][0]["program"] = [
        {"days": "all", "at": "00:00", "level": "comfort", "changeover": "heat"},
        {"days": "all", "at": "10:30", "level": "comfort", "changeover": "cool"},
    ]
    (tmp_path / "site.yaml").write_text(yaml.safe_dump(data))
    site = load_site(tmp_path / "site.yaml")
    ticks: list[TickReport] = []
    service = Service(site, clock=clock, state_dir=tmp_path / "state", on_tick=ticks.append)

    def changeover() -> str | None:
        cooling = ticks[-1].outputs.cooling if ticks else None
        return None if cooling is None else cooling.changeover

    async with running(service):
        # the program's 00:00 entry is in force at start: heat only, the warm room waits
        await until(clock, lambda: changeover() == "heat", timeout_s=60)
        await until(clock, lambda: clock.now() >= start + 25 * 60, timeout_s=1800)
        assert changeover() == "heat"
        assert not any(t.outputs.cooling and t.outputs.cooling.demand for t in ticks)
        # 10:30: the program switches to cool, and the warm room calls cooling
        await until(clock, lambda: changeover() == "cool", timeout_s=600)
        assert ticks[-1].at >= start + 30 * 60
        await until(
            clock, lambda: bool(ticks[-1].outputs.cooling and ticks[-1].outputs.cooling.demand),
            timeout_s=900,
        )
        # 10:40 (or later): a command sets heat; no program change until midnight keeps it
        await until(clock, lambda: clock.now() >= start + 40 * 60, timeout_s=900)
        service.runner.apply_command(zone.name, "changeover", "heat")
        await until(clock, lambda: changeover() == "heat", timeout_s=60)
        await until(clock, lambda: clock.now() >= start + 70 * 60, timeout_s=3600)
        assert changeover() == "heat"


def test_a_program_changeover_in_a_zone_without_a_cooling_call_is_refused(
    tmp_path: Path,
) -> None:
    from roomloop.errors import ConfigError

    data = site_yaml(modbus_port=1502, broker_port=1)
    data["zones"][0]["program"] = [
        {"days": "all", "at": "07:00", "level": "comfort", "changeover": "cool"},
    ]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    try:
        load_site(path)
    except ConfigError as exc:
        text = str(exc)
    else:
        raise AssertionError("a heating-only zone took a program changeover")
    assert "zones[0].program[0].changeover" in text or "program[0].changeover" in text, text
    assert "needs a cooling call" in text, text
