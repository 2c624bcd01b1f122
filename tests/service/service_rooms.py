"""Rooms behind a real Modbus TCP server, and the service as a real subprocess, for the e2e tests.

Each room is a first-order model, ``tau dT/dt = T_eq(u) - T`` (Newton's law of
cooling, REFERENCES.md [published]), stepped in the test process on a clock:
the in-process tests' :class:`VirtualClock` (the service shares it), or for the
subprocess tests a paced clock ``speed`` times faster than real time, the same
speed the service subprocess runs at (``ROOMLOOP_CLOCK_SPEED``: two processes
cannot share one virtual clock). Room ``i`` is input register ``i`` (int16,
tenths of a degree) and coil ``i`` on unit 1.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import math
import os
import signal
import sys
import time
from collections.abc import AsyncIterator, Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import aiomqtt

from roomloop.clock import Clock, PacedClock, wait_for
from roomloop.service.app import Service

TAU_S = 1200.0
T_ON_C = 35.0
T_OFF_C = 5.0


@dataclass
class Room:
    temperature: float
    coil: bool = False
    coil_changes: list[tuple[float, bool]] = field(default_factory=list)
    """(clock time, new coil state) as the plant saw them."""


class RoomPlant:
    """Steps every room from its coil and writes its temperature, until stopped."""

    def __init__(
        self, server: Any, temperatures: list[float], clock: Clock | float, step_s: float = 5.0
    ) -> None:
        """``clock``: the test's clock, or a speed for a paced one (the subprocess tests);
        the rooms step every ``step_s`` clock seconds (every 20 ms real when paced)."""
        self.server = server
        self.rooms = [Room(t) for t in temperatures]
        if isinstance(clock, int | float):
            speed = float(clock)
            clock, step_s = PacedClock(speed), 0.02 * speed
        self.clock: Clock = clock
        self.step_s = step_s
        self.frozen = False
        """While True the plant does not touch the server (it is stopped)."""
        self._task: asyncio.Task[None] | None = None

    async def __aenter__(self) -> RoomPlant:
        await self._write()
        self._task = asyncio.create_task(self._run(), name="room-plant")
        return self

    async def __aexit__(self, *exc: object) -> None:
        if self._task is not None:
            self._task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._task

    async def _write(self) -> None:
        regs = [round(r.temperature * 10) & 0xFFFF for r in self.rooms]
        await self.server.set_registers("input", 0, regs)

    async def _run(self) -> None:
        last = self.clock.monotonic()
        while True:
            await self.clock.sleep(self.step_s)
            now = self.clock.monotonic()
            dt = now - last
            last = now
            if self.frozen:
                continue
            coils = await self.server.get_coils(0, len(self.rooms))
            for room, coil in zip(self.rooms, coils, strict=True):
                if coil != room.coil:
                    room.coil = coil
                    room.coil_changes.append((now, coil))
                target = T_ON_C if room.coil else T_OFF_C
                room.temperature = target + (room.temperature - target) * math.exp(-dt / TAU_S)
            await self._write()


def site_yaml(
    *,
    modbus_port: int,
    broker_port: int,
    zones: int = 1,
    program: list[dict[str, Any]] | None = None,
    extra_zone: dict[str, Any] | None = None,
    timezone: str = "UTC",
) -> dict[str, Any]:
    """An invented test site: ``zones`` electric rooms on one Modbus TCP link and a broker."""
    points: list[dict[str, Any]] = []
    zone_list: list[dict[str, Any]] = []
    for i in range(zones):
        points.append(
            {
                "name": f"t{i}",
                "type": "modbus-input",
                "link": "rooms",
                "address": i,
                "scale": 0.1,
                "reliability": {"stale_after_s": 60, "recovery_s": 20},
            }
        )
        points.append({"name": f"relay{i}", "type": "modbus-output", "link": "rooms", "address": i})
        zone: dict[str, Any] = {
            "name": f"room{i}",
            "inputs": [f"t{i}"],
            "output": f"relay{i}",
            "heating": "electric",
            "setpoints": {"comfort": 20, "standby": 18, "economy": 16, "protection": 7},
            "limits": {"min": 5, "max": 26},
            "fail_safe": {"policy": "fixed-duty", "duty": 0.3, "sensor_timeout_s": 300},
            "tick_s": 10,
        }
        if program is not None:
            zone["program"] = program
        if extra_zone:
            zone.update(extra_zone)
        zone_list.append(zone)
    return {
        "site": {"name": "test-annex", "timezone": timezone},
        "links": [
            {
                "name": "rooms",
                "type": "modbus-tcp",
                "host": "127.0.0.1",
                "port": modbus_port,
                "timeout_s": 0.5,
                "retries": 0,
                "poll_interval_s": 10,
            }
        ],
        "broker": {
            "host": "127.0.0.1",
            "port": broker_port,
            "publish_interval_s": 60,
            "command_rate_per_min": 30,
            "keepalive_s": 5,
        },
        "points": points,
        "zones": zone_list,
        "logging": {"level": "info", "format": "json"},
    }


class ServiceProcess:
    """``python -m roomloop run`` as a subprocess on a simulated clock."""

    def __init__(
        self, config: Path, state_dir: Path, speed: float, log_path: Path, origin: float
    ) -> None:
        self.origin = origin
        """Real POSIX time at which the simulated clock reads real time (shared by restarts)."""
        self.config = config
        self.state_dir = state_dir
        self.speed = speed
        self.log_path = log_path
        self.process: asyncio.subprocess.Process | None = None
        self.stopping = False
        """Set when the test itself ends the process (a signal), so its exit is expected."""
        self._log: Any = None

    async def start(self, extra_env: dict[str, str] | None = None) -> None:
        env = dict(
            os.environ,
            ROOMLOOP_CLOCK_SPEED=str(self.speed),
            ROOMLOOP_CLOCK_ORIGIN=repr(self.origin),
        )
        env.pop("NOTIFY_SOCKET", None)
        env.update(extra_env or {})
        self._log = self.log_path.open("ab")
        self.process = await asyncio.create_subprocess_exec(
            sys.executable,
            "-m",
            "roomloop",
            "run",
            "-c",
            str(self.config),
            "--state-dir",
            str(self.state_dir),
            stdout=self._log,
            stderr=self._log,
            env=env,
        )

    def died(self) -> str | None:
        """Why the service ended on its own (the tail of its log), or None while all is well."""
        if self.process is None or self.stopping or self.process.returncode is None:
            return None
        tail = self.log_path.read_text(errors="replace").splitlines()[-5:]
        return f"the service exited with {self.process.returncode}: " + " | ".join(tail)

    async def signal(self, signum: int, timeout_s: float = 10.0) -> int:
        assert self.process is not None
        self.stopping = True
        self.process.send_signal(signum)
        try:
            return await asyncio.wait_for(self.process.wait(), timeout_s)
        finally:
            self._close()

    async def stop(self) -> None:
        self.stopping = True
        if self.process is not None and self.process.returncode is None:
            self.process.send_signal(signal.SIGKILL)
            await asyncio.wait_for(self.process.wait(), 10)
        self._close()

    def _close(self) -> None:
        if self._log is not None:
            self._log.close()
            self._log = None

    def log_events(self) -> list[dict[str, Any]]:
        events = []
        for line in self.log_path.read_text(errors="replace").splitlines():
            with contextlib.suppress(ValueError):
                events.append(json.loads(line))
        return events


class Watcher:
    """An MQTT client that keeps the latest payload per topic and every command answer."""

    def __init__(self, host: str, port: int, prefix: str, clock: Clock | None = None) -> None:
        self.clock = clock
        """The clock ``wait_for`` looks on (the in-process tests' virtual clock), or None:
        real time, for a service in another process."""
        self.host = host
        self.port = port
        self.prefix = prefix
        self.latest: dict[str, bytes] = {}
        self.retained: dict[str, bool] = {}
        self.results: list[dict[str, Any]] = []
        self.client: aiomqtt.Client | None = None
        self._task: asyncio.Task[None] | None = None
        self.changed = asyncio.Event()
        self.guard: Callable[[], str | None] = lambda: None
        """Checked while waiting: a message when the service died, to fail at once and say why."""

    async def __aenter__(self) -> Watcher:
        self._task = asyncio.create_task(self._run(), name="watcher")
        await self.wait_for(lambda: self.client is not None, 10)
        return self

    async def __aexit__(self, *exc: object) -> None:
        if self._task is not None:
            self._task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await self._task

    async def _run(self) -> None:
        while True:
            try:
                async with aiomqtt.Client(self.host, self.port) as client:
                    await client.subscribe(f"{self.prefix}/#", qos=1)
                    self.client = client
                    async for message in client.messages:
                        topic = str(message.topic)
                        payload = bytes(message.payload)
                        self.latest[topic] = payload
                        self.retained[topic] = bool(message.retain)
                        if topic.endswith("/cmd/result"):
                            self.results.append(json.loads(payload))
                        self.changed.set()
            except aiomqtt.MqttError:
                self.client = None
                await self._pause(0.2)

    def state(self, zone: str = "room0") -> dict[str, Any] | None:
        raw = self.latest.get(f"{self.prefix}/zone/{zone}/state")
        return None if raw is None else dict(json.loads(raw))

    def text(self, topic: str) -> str | None:
        raw = self.latest.get(f"{self.prefix}/{topic}")
        return None if raw is None else raw.decode()

    async def command(self, zone: str, field: str, payload: str, retain: bool = False) -> None:
        assert self.client is not None
        await self.client.publish(
            f"{self.prefix}/zone/{zone}/cmd/{field}", payload, qos=1, retain=retain
        )

    async def answer(self, count_before: int, timeout_s: float = 10.0) -> dict[str, Any]:
        await self.wait_for(lambda: len(self.results) > count_before, timeout_s)
        return self.results[count_before]

    async def wait_for(self, condition: Callable[[], bool], timeout_s: float) -> None:
        """Wait until ``condition()`` holds, looking every 20 ms (every clock second on the
        watcher's clock); fail the test after ``timeout_s`` real seconds.

        The bound is real time even on a virtual clock: the answer comes through
        mosquitto, a real process, and a broker round trip lets virtual time move on.
        """
        deadline = time.monotonic() + timeout_s
        while not condition():
            died = self.guard()
            if died is not None:
                raise AssertionError(died)
            if time.monotonic() > deadline:
                raise AssertionError(f"condition not met within {timeout_s} s")
            await self._pause(0.02)

    async def _pause(self, real_s: float) -> None:
        await (asyncio.sleep(real_s) if self.clock is None else self.clock.sleep(1.0))


@contextlib.asynccontextmanager
async def running(service: Service, timeout_s: float = 30.0) -> AsyncIterator[asyncio.Event]:
    """Run an in-process service for the body of the ``with``; stop it after, within
    ``timeout_s`` of the service's clock."""
    stop = asyncio.Event()
    task = asyncio.create_task(service.run(stop))
    try:
        yield stop
    finally:
        stop.set()
        await wait_for(service.clock, task, timeout_s)


async def until(
    clock: Clock, condition: Callable[[], Any], timeout_s: float = 600.0, step_s: float = 1.0
) -> None:
    """Wait until ``condition()`` is true, looking every ``step_s`` of ``clock``; fail the
    test after ``timeout_s`` clock seconds (on a virtual clock: exact, and no wall time)."""
    deadline = clock.monotonic() + timeout_s
    while not condition():
        assert clock.monotonic() < deadline, f"condition not met within {timeout_s:g} clock s"
        await clock.sleep(step_s)
