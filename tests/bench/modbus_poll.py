"""Benchmark: Modbus requests and bus time per poll cycle for a 32-zone site.

Run: ``python tests/bench/modbus_poll.py``. Prints figures; asserts nothing.

1. Requests per poll cycle with read coalescing versus one request per point,
   for an invented 32-zone site whose input points are scattered over five
   devices (fixed seed, so the figures repeat).
2. The same two strategies timed on a real pymodbus TCP server on loopback,
   measured in this process (the per-point loop is the baseline).
3. Modelled RS-485 bus time per cycle at 9600 and 19200 baud from the frame
   sizes (a pty pair ignores the baud rate, so bus time cannot be measured
   here; LIBRARY-NOTES.md). Goal: under 2 s per cycle at 9600 baud.

Frame model (Modbus over Serial Line V1.02, REFERENCES.md [published]): 11 bits
a character (start, 8 data, parity or a second stop bit, stop); a read request
is 8 characters (address, function, start, quantity, CRC); its answer is
5 + 2N characters for N registers; every frame is followed by a silent
interval t3.5 = 3.5 characters, fixed at 1.75 ms above 19200 baud. The device's
turnaround (time to start answering) is an assumption of 5 ms [common practice,
no source]; roomloop adds its own request_gap_s between requests.
"""

from __future__ import annotations

import asyncio
import random
import sys
import time
from pathlib import Path

from roomloop.config.models import ModbusInput, ModbusTcpLink
from roomloop.io.modbus import ModbusLink
from roomloop.io.planner import Read, plan_reads

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
from conftest import ModbusTestServer

ZONES = 32
SEED = 7
MAX_GAP = 8  # the link default
DEVICE_TURNAROUND_S = 0.005  # assumption [common practice, no source]
REQUEST_GAP_S = 0.02  # roomloop's default request_gap_s


def invented_site() -> list[ModbusInput]:
    """32 zones: four 8-channel input modules (channel values every 3rd register, odd
    channels also with a float32 floor probe far away) and a few stand-alone sensors."""
    rng = random.Random(SEED)
    points: list[ModbusInput] = []
    for zone in range(ZONES):
        unit = 1 + zone // 8
        channel = zone % 8
        points.append(
            ModbusInput(
                type="modbus-input",
                name=f"z{zone}-air",
                link="bus",
                unit_id=unit,
                address=3 * channel + rng.choice([0, 1]),
                scale=0.1,
            )
        )
        if channel % 2:
            points.append(
                ModbusInput(
                    type="modbus-input",
                    name=f"z{zone}-floor",
                    link="bus",
                    unit_id=unit,
                    table="holding",
                    address=200 + 12 * channel,
                    data_type="float32",
                )
            )
    for i in range(6):  # stand-alone wall sensors on unit 5, scattered
        points.append(
            ModbusInput(
                type="modbus-input",
                name=f"wall-{i}",
                link="bus",
                unit_id=5,
                address=rng.randrange(0, 400),
                scale=0.1,
            )
        )
    return points


def char_time(baud: int) -> float:
    return 11.0 / baud


def t35(baud: int) -> float:
    # REFERENCES.md: t3.5 = 4.01 ms at 9600 baud; fixed 1.75 ms above 19200 [published]
    return 1.75e-3 if baud > 19200 else 3.5 * char_time(baud)


def transaction_time(registers: int, baud: int) -> tuple[float, float]:
    """(wire time of both frames with their t3.5 gaps, the same plus turnaround and request gap)."""
    wire = (8 + 5 + 2 * registers) * char_time(baud) + 2 * t35(baud)
    return wire, wire + DEVICE_TURNAROUND_S + REQUEST_GAP_S


def cycle_time(reads: list[Read] | tuple[Read, ...], baud: int) -> tuple[float, float]:
    totals = [transaction_time(r.count, baud) for r in reads]
    return sum(t[0] for t in totals), sum(t[1] for t in totals)


async def measured(points: list[ModbusInput], rounds: int) -> tuple[float, float, int, int]:
    server = ModbusTestServer(units=(1, 2, 3, 4, 5), registers=512)
    await server.start()
    try:
        link = ModbusTcpLink(
            type="modbus-tcp",
            name="bus",
            host=server.host,
            port=server.port,
            request_gap_s=0.0,
            timeout_s=1.0,
            retries=0,
            max_gap_registers=MAX_GAP,
        )
        async with ModbusLink(link, points) as modbus:
            await modbus.poll()  # warm up the connection
            server.requests.clear()
            start = time.perf_counter()
            for _ in range(rounds):
                samples = await modbus.poll()
            coalesced = (time.perf_counter() - start) / rounds
            coalesced_requests = len(server.requests) // rounds
            assert all(s.transport == "ok" for s in samples), "benchmark server did not answer"
            server.requests.clear()
            start = time.perf_counter()
            for _ in range(rounds):
                for point in points:
                    await modbus.read_point(point.name)
            single = (time.perf_counter() - start) / rounds
            single_requests = len(server.requests) // rounds
    finally:
        await server.stop()
    return coalesced, single, coalesced_requests, single_requests


def main() -> None:
    points = invented_site()
    plan = plan_reads(points, MAX_GAP)
    baseline = [r for p in points for r in plan_reads([p], 0)]
    print(f"site: {ZONES} zones, {len(points)} input points on 5 devices (seed {SEED})")
    print(
        f"requests per cycle: coalesced {len(plan)}, one per point {len(baseline)}, "
        f"ratio {len(baseline) / len(plan):.1f}x fewer"
    )
    print(
        f"registers read per cycle: coalesced {sum(r.count for r in plan)}, "
        f"one per point {sum(r.count for r in baseline)}"
    )
    print()
    print("modelled RTU bus time per poll cycle (11 bits a character, t3.5 gaps):")
    print("  baud   strategy         wire only   + 5 ms turnaround + 20 ms request gap")
    for baud in (9600, 19200):
        for label, reads in (("coalesced", plan), ("one per point", baseline)):
            wire, total = cycle_time(reads, baud)
            print(f"  {baud:<6} {label:<16} {wire * 1000:8.1f} ms {total * 1000:10.1f} ms")
    _, worst = cycle_time(plan, 9600)
    verdict = "meets" if worst < 2.0 else "MISSES"
    print(
        f"goal: a 32-zone site polls in under 2 s at 9600 baud: {worst:.3f} s, {verdict} the goal"
    )
    print()
    rounds = 20
    coalesced, single, n_coalesced, n_single = asyncio.run(measured(points, rounds))
    print(f"measured on a pymodbus TCP server on loopback ({rounds} cycles each, same process):")
    print(f"  coalesced poll:     {coalesced * 1000:7.2f} ms per cycle, {n_coalesced} requests")
    print(
        f"  one read per point: {single * 1000:7.2f} ms per cycle, {n_single} requests (baseline)"
    )
    print(f"  ratio: {single / coalesced:.1f}x faster with coalescing")


if __name__ == "__main__":
    main()
