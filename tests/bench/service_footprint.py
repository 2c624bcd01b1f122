"""Benchmark: the service's footprint and command-to-coil latency, with 1 and with 50 zones.

Run: ``python tests/bench/service_footprint.py`` (needs mosquitto). Prints figures, asserts nothing.

Set-up (all real, all on loopback): ``roomloop run`` as a subprocess; a pymodbus
TCP server in this process whose rooms step a first-order model
(``tests/service/service_rooms.py``); a mosquitto broker.

1. Footprint: the service runs on a simulated clock (``ROOMLOOP_CLOCK_SPEED``) for a
   fixed simulated time; we read its peak RSS (``VmHWM``) and CPU time from ``/proc``.
   CPU seconds per zone-hour = CPU seconds / (zones x simulated hours), counted after
   a few seconds of start-up.
   Baselines measured here too: the RSS of a bare interpreter that only imports the
   service's modules, and the CPU the control steps alone cost per zone-hour.
   The same CPU figure in this process on a virtual clock (``VirtualClock``: no pacing,
   exact): the service and its Modbus test server together, per zone-hour, for
   ``VIRTUAL_SIM_HOURS`` simulated hours without a broker.
2. Latency: on the real clock, ``cmd/setpoint`` commands alternately below and above
   the room temperature (minimum on/off times 0), from the publish to the Modbus
   write of the coil arriving at the server. Baseline: an MQTT round trip through the
   broker plus one Modbus coil write, measured in this process.

Goals (issue 6): under 60 MB peak RSS with 50 zones; p99 latency under 200 ms.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import aiomqtt
import yaml

TESTS = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(TESTS))
sys.path.insert(0, str(TESTS / "service"))

from service_rooms import (  # noqa: E402
    RoomPlant,
    ServiceProcess,
    site_yaml,
)

from conftest import (  # noqa: E402
    ModbusTestServer,
    MosquittoBroker,
)

PREFIX = "roomloop/test-annex"
FOOTPRINT_SPEED = 120.0
FOOTPRINT_SIM_HOURS = 0.5
VIRTUAL_SIM_HOURS = 2.0
STARTUP_S = 3.0
LATENCY_COMMANDS = 60
LATENCY_GAP_S = 0.15
GOAL_RSS_MB = 60.0
GOAL_P99_MS = 200.0


async def until(condition: Any, timeout_s: float, step_s: float = 0.001) -> None:
    """Return once ``condition()`` holds; TimeoutError after ``timeout_s``."""
    for _ in range(int(timeout_s / step_s)):
        if condition():
            return
        await asyncio.sleep(step_s)
    raise TimeoutError(f"not within {timeout_s} s")


class TimedServer(ModbusTestServer):
    """The test server, also noting when each coil write (function code 5) arrives."""

    def __init__(self, **kwargs: Any) -> None:
        super().__init__(**kwargs)
        self.coil_writes: list[tuple[float, int]] = []

    def _trace(self, sending: bool, pdu: Any) -> Any:
        if not sending and int(pdu.function_code) == 5:
            self.coil_writes.append((time.monotonic(), int(getattr(pdu, "address", 0) or 0)))
        return super()._trace(sending, pdu)


def bench_site(port: int, broker_port: int, zones: int) -> dict[str, Any]:
    data = site_yaml(
        modbus_port=port,
        broker_port=broker_port,
        zones=zones,
        extra_zone={"tuning": {"min_on_s": 0, "min_off_s": 0, "max_cycles_per_hour": 60}},
    )
    for point in data["points"]:
        if point["type"] == "modbus-output":
            point["reassert_s"] = 3600
    data["broker"]["command_rate_per_min"] = 600
    return dict(data)


def proc_figures(pid: int) -> tuple[float, float]:
    """(peak RSS in MB, CPU seconds user + system) of a running process."""
    status = Path(f"/proc/{pid}/status").read_text()
    hwm_kb = next(int(line.split()[1]) for line in status.splitlines() if line.startswith("VmHWM"))
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    ticks = os.sysconf("SC_CLK_TCK")
    cpu = (int(fields[11]) + int(fields[12])) / ticks
    return hwm_kb / 1024.0, cpu


def import_only_rss_mb() -> float:
    code = (
        "import roomloop.service.app, roomloop.io.broker, roomloop.config.loader, roomloop.log;"
        "print(next(l for l in open('/proc/self/status') if l.startswith('VmHWM')).split()[1])"
    )
    out = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True
    )
    return int(out.stdout.strip()) / 1024.0


def step_cpu_per_zone_hour(tick_s: float = 10.0) -> float:
    """CPU seconds the control step alone costs for one zone-hour at the tick used."""
    from roomloop.core.controller import ZoneController
    from roomloop.core.settings import ZoneSettings
    from roomloop.core.types import PointSample, ZoneInputs

    controller = ZoneController(ZoneSettings.for_heating_type("electric", input_name="t0"))
    state = controller.initial_state(0.0)
    steps = int(3600 / tick_s) * 20
    started = time.process_time()
    for k in range(steps):
        now = k * tick_s
        inputs = ZoneInputs((PointSample("t0", 19.5 + 0.5 * ((k // 30) % 2), now),))
        state, _ = controller.step(state, inputs, now)
    return (time.process_time() - started) / 20


async def footprint(zones: int, workdir: Path, broker: MosquittoBroker) -> tuple[float, float]:
    server = TimedServer(units=(1,))
    await server.start()
    config = workdir / f"footprint-{zones}.yaml"
    config.write_text(yaml.safe_dump(bench_site(server.port, broker.port, zones)))
    service = ServiceProcess(
        config,
        workdir / f"state-{zones}",
        FOOTPRINT_SPEED,
        workdir / f"footprint-{zones}.log",
        origin=time.time(),
    )
    try:
        async with RoomPlant(server, [17.0 + 0.05 * i for i in range(zones)], FOOTPRINT_SPEED):
            await service.start()
            assert service.process is not None
            await asyncio.sleep(STARTUP_S)  # start-up (imports, first polls) is not counted
            _, cpu_start = proc_figures(service.process.pid)
            started = time.monotonic()
            await asyncio.sleep(FOOTPRINT_SIM_HOURS * 3600 / FOOTPRINT_SPEED)
            rss_mb, cpu_end = proc_figures(service.process.pid)
            sim_hours = (time.monotonic() - started) * FOOTPRINT_SPEED / 3600
            await service.signal(15)
    finally:
        await service.stop()
        await server.stop()
    return rss_mb, (cpu_end - cpu_start) / (zones * sim_hours)


async def virtual_cpu_per_zone_hour(zones: int, workdir: Path) -> tuple[float, int]:
    """(CPU seconds per zone-hour, clock jumps): the service in this process on a
    virtual clock for ``VIRTUAL_SIM_HOURS``, with its Modbus test server."""
    import logging

    import structlog

    from roomloop.clock import VirtualClock
    from roomloop.config.loader import load_site
    from roomloop.service.app import Service

    structlog.configure(wrapper_class=structlog.make_filtering_bound_logger(logging.WARNING))

    clock = VirtualClock()
    server = TimedServer(units=(1,))
    await server.start()
    data = bench_site(server.port, 1, zones)
    del data["broker"]
    config = workdir / f"virtual-{zones}.yaml"
    config.write_text(yaml.safe_dump(data))
    service = Service(load_site(config), clock=clock, state_dir=workdir / f"vstate-{zones}")
    stop = asyncio.Event()
    try:
        async with RoomPlant(server, [17.0 + 0.05 * i for i in range(zones)], clock):
            task = asyncio.create_task(service.run(stop))
            await clock.sleep(60.0)  # start-up is not counted
            started, jumps = time.process_time(), clock.jumps
            await clock.sleep(VIRTUAL_SIM_HOURS * 3600)
            cpu, jumps = time.process_time() - started, clock.jumps - jumps
            stop.set()
            await asyncio.wait_for(task, 30)
    finally:
        await server.stop()
    return cpu / (zones * VIRTUAL_SIM_HOURS), jumps


async def latency(zones: int, workdir: Path, broker: MosquittoBroker) -> list[float]:
    server = TimedServer(units=(1,))
    await server.start()
    config = workdir / f"latency-{zones}.yaml"
    config.write_text(yaml.safe_dump(bench_site(server.port, broker.port, zones)))
    service = ServiceProcess(
        config, workdir / f"lstate-{zones}", 1.0, workdir / f"latency-{zones}.log", time.time()
    )
    samples: list[float] = []
    try:
        async with (
            RoomPlant(server, [17.0] * zones, 1.0) as plant,
            aiomqtt.Client(broker.host, broker.port) as client,
        ):
            await service.start()
            # Wait until every zone heats its cold room (the service is up and controlling).
            await until(lambda: all(room.coil for room in plant.rooms), 30.0)
            await asyncio.sleep(0.5)
            for k in range(LATENCY_COMMANDS):
                zone = k % zones
                # Rooms start at 17 C with heat on: the first command per zone turns it off.
                value = "5" if (k // zones) % 2 == 0 else "26"
                before = len(server.coil_writes)
                sent = time.monotonic()
                await client.publish(f"{PREFIX}/zone/room{zone}/cmd/setpoint", value, qos=1)

                def written(zone: int = zone, before: int = before) -> list[float]:
                    return [t for t, a in server.coil_writes[before:] if a == zone]

                await until(written, 5.0)
                arrived = written()[0]
                samples.append((arrived - sent) * 1000.0)
                await asyncio.sleep(LATENCY_GAP_S)
            await service.signal(15)
    finally:
        await service.stop()
        await server.stop()
    return samples


async def baseline_round_trip_ms(broker: MosquittoBroker) -> float:
    """One MQTT publish -> delivery through the broker, plus one Modbus coil write."""
    from pymodbus.client import AsyncModbusTcpClient

    server = TimedServer(units=(1,))
    await server.start()
    times: list[float] = []
    modbus = AsyncModbusTcpClient("127.0.0.1", port=server.port, timeout=2)
    await modbus.connect()
    try:
        async with aiomqtt.Client(broker.host, broker.port) as client:
            await client.subscribe("bench/echo", qos=1)
            for k in range(50):
                started = time.monotonic()
                await client.publish("bench/echo", str(k), qos=1)
                async with asyncio.timeout(5):
                    async for _message in client.messages:
                        break
                await modbus.write_coil(0, bool(k % 2), device_id=1)
                times.append((time.monotonic() - started) * 1000.0)
    finally:
        modbus.close()
        await server.stop()
    return statistics.median(times)


def pct(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, round(q * (len(ordered) - 1)))]


async def main() -> None:
    broker = MosquittoBroker()
    broker.start()
    try:
        with tempfile.TemporaryDirectory(prefix="roomloop-bench-") as tmp:
            workdir = Path(tmp)
            base_rss = import_only_rss_mb()
            base_cpu = step_cpu_per_zone_hour()
            base_rtt = await baseline_round_trip_ms(broker)
            print(f"baseline: interpreter importing the service: peak RSS {base_rss:.1f} MB")
            print(f"baseline: control step alone: {base_cpu * 1000:.2f} ms CPU per zone-hour")
            print(f"baseline: MQTT round trip + Modbus coil write: median {base_rtt:.2f} ms")
            print()
            header = (
                f"{'zones':>5}  {'peak RSS MB':>11}  {'x import':>8}  {'CPU s/zone-h':>12}"
                f"  {'x step':>7}  {'virtual':>8}  {'x step':>7}  {'p50 ms':>7}  {'p99 ms':>7}"
                f"  {'x rtt':>6}"
            )
            print(header)
            for zones in (1, 50):
                rss, cpu = await footprint(zones, workdir, broker)
                vcpu, jumps = await virtual_cpu_per_zone_hour(zones, workdir)
                lat = await latency(zones, workdir, broker)
                p50, p99 = pct(lat, 0.5), pct(lat, 0.99)
                print(
                    f"{zones:>5}  {rss:>11.1f}  {rss / base_rss:>8.2f}  {cpu:>12.4f}"
                    f"  {cpu / base_cpu:>7.1f}  {vcpu:>8.4f}  {vcpu / base_cpu:>7.1f}"
                    f"  {p50:>7.1f}  {p99:>7.1f}  {p50 / base_rtt:>6.1f}"
                    f"   ({jumps} clock jumps)"
                )
                if zones == 50:
                    print()
                    print(
                        f"goals: peak RSS {rss:.1f} MB < {GOAL_RSS_MB:.0f} MB: "
                        f"{'met' if rss < GOAL_RSS_MB else 'MISSED'}; "
                        f"p99 {p99:.1f} ms < {GOAL_P99_MS:.0f} ms: "
                        f"{'met' if p99 < GOAL_P99_MS else 'MISSED'}"
                    )
            print(
                f"(footprint: {FOOTPRINT_SIM_HOURS} simulated h at speed {FOOTPRINT_SPEED:g};"
                f" virtual: {VIRTUAL_SIM_HOURS} simulated h in this process;"
                f" latency: {LATENCY_COMMANDS} commands on the real clock)"
            )
    finally:
        broker.stop()


if __name__ == "__main__":
    from roomloop.clock import AutojumpLoop

    with contextlib.suppress(KeyboardInterrupt), asyncio.Runner(loop_factory=AutojumpLoop) as run:
        run.run(main())
