"""The service in-process against faults found in review: absurd commands, slow devices, stops.

Real parts: mosquitto, pymodbus TCP servers playing rooms (``service_rooms.RoomPlant``).
The clock is simulated.
"""

from __future__ import annotations

import asyncio
import contextlib
import time
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, Watcher, site_yaml

from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.service.app import Service
from roomloop.service.clock import SimulatedClock

SPEED = 60.0
PREFIX = "roomloop/test-annex"


def write_site(tmp_path: Path, data: dict[str, Any]) -> Site:
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


@contextlib.asynccontextmanager
async def running(service: Service, timeout_s: float = 30.0) -> AsyncIterator[asyncio.Event]:
    stop = asyncio.Event()
    task = asyncio.create_task(service.run(stop))
    try:
        yield stop
    finally:
        stop.set()
        await asyncio.wait_for(task, timeout_s)


async def until(condition: Any, timeout_s: float = 10.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not condition():
        assert time.monotonic() < deadline, "condition not met in time"
        await asyncio.sleep(0.02)


@pytest.mark.needs_mosquitto
async def test_absurd_numbers_are_refused_and_state_is_still_published(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server()
    site = write_site(
        tmp_path, site_yaml(modbus_port=server.port, broker_port=mosquitto.port)
    )
    service = Service(site, clock=SimulatedClock(SPEED), state_dir=tmp_path / "state")
    async with (
        RoomPlant(server, [17.0], SPEED),
        Watcher(mosquitto.host, mosquitto.port, PREFIX) as w,
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
