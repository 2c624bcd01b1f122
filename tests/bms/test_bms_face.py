"""The BMS face against real peers: a pymodbus client over TCP and over a socat pty pair (RTU).

The service runs in-process, reading its rooms from a real pymodbus test server
(``modbus_tcp_server``); the face serves the zones on a free loopback port. What
a register reads is compared with the zone's state JSON (the publisher's payload).
"""

from __future__ import annotations

import asyncio
import contextlib
import itertools
import json
import random
import socket
import struct
import time
from collections.abc import AsyncIterator, Callable
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pytest
from pymodbus.client import AsyncModbusSerialClient, AsyncModbusTcpClient
from pymodbus.exceptions import ModbusException, ModbusIOException
from pymodbus.framer import FramerType

from conftest import free_port
from roomloop.bms.registers import RegisterMap, decode_float32, decode_int16x10
from roomloop.config.loader import site_from_data
from roomloop.config.models import Site
from roomloop.core.types import RELIABILITY_VALUES
from roomloop.service.app import Service, TickReport
from roomloop.service.publisher import state_payload

UTC = ZoneInfo("UTC")


def site_data(modbus_port: int, bms: dict[str, Any], *, units: str = "C") -> dict[str, Any]:
    comfort, standby, economy, protection, low, high = (20.0, 18.0, 16.0, 7.0, 5.0, 26.0)
    if units == "F":
        comfort, standby, economy, protection, low, high = (68, 64.4, 60.8, 44.6, 41, 78.8)
    zones = []
    points: list[dict[str, Any]] = []
    for i in range(2):
        points += [
            {"name": f"t{i}", "type": "modbus-input", "link": "rooms", "address": i,
             "scale": 0.1},
            {"name": f"relay{i}", "type": "modbus-output", "link": "rooms", "address": i},
        ]
        zones.append(
            {
                "name": f"room{i}", "inputs": [f"t{i}"], "output": f"relay{i}",
                "heating": "electric", "tick_s": 1,
                "setpoints": {"comfort": comfort, "standby": standby, "economy": economy,
                              "protection": protection},
                "limits": {"min": low, "max": high},
            }
        )
    return {
        "site": {"name": "bms-annex", "units": units},
        "links": [{"name": "rooms", "type": "modbus-tcp", "host": "127.0.0.1",
                   "port": modbus_port, "timeout_s": 0.5, "retries": 0, "poll_interval_s": 1}],
        "points": points,
        "zones": zones,
        "bms": bms,
    }


class Running:
    service: Service

    def __init__(self, site: Site) -> None:
        self.site = site
        self.map = RegisterMap(site)
        self.ticks: list[TickReport] = []
        self.real_ticks: dict[str, list[float]] = {}

    def on_tick(self, report: TickReport) -> None:
        self.ticks.append(report)
        self.real_ticks.setdefault(report.zone, []).append(time.monotonic())

    def payload(self, zone: str) -> dict[str, Any]:
        view = next(v for v in self.service.publisher.views() if v.zone == zone)
        return state_payload(view, units=self.site.site.units, tz=UTC)


async def _within(timeout_s: float, condition: Callable[[], bool], what: str) -> None:
    """Wait (bounded, looking every 50 ms) until ``condition()`` holds: the face and the
    service run on the real clock here, with the real Modbus client."""
    deadline = time.monotonic() + timeout_s
    while not condition():
        assert time.monotonic() < deadline, f"not within {timeout_s:g} s: {what}"
        await asyncio.sleep(0.05)


@contextlib.asynccontextmanager
async def running_face(
    modbus_tcp_server: Any, tmp_path: Path, bms: dict[str, Any], units: str = "C"
) -> AsyncIterator[Running]:
    server = await modbus_tcp_server(units=(1,))
    first = 215 if units == "C" else 707  # 21.5 C, 70.7 F (the device sends the site's unit)
    await server.set_registers("input", 0, [first, 0x00C8 if units == "C" else 680])
    data = site_data(server.port, bms, units=units)
    if units == "F":
        for point in data["points"]:
            if point["type"] == "modbus-input":
                point["unit"] = "F"
    site = site_from_data(data, "test")
    run = Running(site)
    service = Service(site, state_dir=tmp_path / "state", ready_wait_s=2.0, on_tick=run.on_tick)
    run.service = service
    stop = asyncio.Event()
    task = asyncio.create_task(service.run(stop))
    try:
        deadline = time.monotonic() + 15
        while not (
            all(z.outputs is not None and z.outputs.temperature is not None
                for z in service.zones.values()) and service.zones
        ):
            assert time.monotonic() < deadline, "zones did not decide in time"
            assert not task.done(), task
            await asyncio.sleep(0.05)
        yield run
    finally:
        stop.set()
        await asyncio.wait_for(task, 30)


async def tcp_client(port: int, source: str | None = None) -> AsyncModbusTcpClient:
    kwargs: dict[str, Any] = {}
    if source is not None:
        kwargs["source_address"] = (source, 0)
    client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1.0, retries=0, **kwargs)
    deadline = time.monotonic() + 10
    while not await client.connect():
        assert time.monotonic() < deadline, "the face does not listen"
        await asyncio.sleep(0.1)
    return client


def expected_words(run: Running, zone: str, payload: dict[str, Any]) -> dict[str, Any]:
    """What each register must show, from the state JSON and the site file alone."""
    config = run.site.zone(zone)
    units = run.site.site.units

    def shown(c: float) -> float:
        return c * 9 / 5 + 32 if units == "F" else c

    return {
        "temperature": payload["temperature"],
        "setpoint": payload["setpoint"],
        "standby_setpoint": shown(config.setpoints.standby),
        "economy_setpoint": shown(config.setpoints.economy),
        "protection_setpoint": shown(config.setpoints.protection),
        "comfort_setpoint": shown(config.setpoints.comfort),
        "hold_setpoint": payload["setpoint"],
        "anticipator": payload["anticipator"],
        "droop": payload["droop"],
        "hold_minutes": 0,
        "mode": ["auto", "hold", "off"].index(payload["mode"]),
        "level": ["comfort", "standby", "economy", "protection"].index(payload["level"]),
        "demand": int(payload["demand"]),
        "fail_safe": int(payload["fail_safe"]),
        "fail_safe_minutes_today": 0,
        "alarms": 0,
        "output_confirmed": {"ok": 1, "mismatch": 0}.get(payload["output"]["verdict"], 2),
        **{
            f"reliability.{name}": RELIABILITY_VALUES.index(verdict)
            for name, verdict in payload["reliability"].items()
        },
    }


async def read_and_compare(run: Running, client: Any, zone: str) -> int:
    registers = run.map.zone_registers(zone)
    start = registers[0].address
    count = registers[-1].address + registers[-1].words - start
    for _ in range(20):  # a zone step between the JSON and the read: read both again
        before = json.dumps(run.payload(zone))
        reply = await client.read_holding_registers(start, count=count, device_id=1)
        after = json.dumps(run.payload(zone))
        if before == after:
            break
    assert not reply.isError(), reply
    payload = json.loads(after)
    expected = expected_words(run, zone, payload)
    words = reply.registers
    float32 = run.map.analog_words == 2
    order = run.map.bms.word_order
    for register in registers:
        chunk = words[register.address - start : register.address - start + register.words]
        if register.kind in ("temperature", "delta"):
            value = decode_float32(chunk, order) if float32 else decode_int16x10(chunk[0])
            # tolerance: the JSON rounds to 0.01 (0.001 for the terms), int16 to 0.1
            tolerance = 1e-3 if float32 else 0.05 + 1e-9
            assert value == pytest.approx(expected[register.field], abs=tolerance), register
        else:
            assert chunk[0] == expected[register.field], register
    return len(registers)


# --------------------------------------------------------------------------- reads


@pytest.mark.parametrize(
    "bms",
    [
        {"data_type": "int16x10"},
        {"data_type": "float32", "word_order": "big", "base_address": 1000},
        {"data_type": "float32", "word_order": "little", "zone_block": 40},
    ],
)
async def test_every_register_reads_what_the_state_json_shows(
    modbus_tcp_server: Any, tmp_path: Path, bms: dict[str, Any]
) -> None:
    port = free_port()
    async with running_face(modbus_tcp_server, tmp_path, {"port": port, **bms}) as run:
        client = await tcp_client(port)
        try:
            checked = sum([await read_and_compare(run, client, z) for z in ("room0", "room1")])
            assert checked == len(run.map.registers)
            # function 4 reads the same map
            reg = run.map.register("room0", "temperature")
            again = await client.read_input_registers(reg.address, count=reg.words, device_id=1)
            assert not again.isError()
        finally:
            client.close()


# 20.0 = 1.25 x 2^4 in IEEE 754 binary32: 0x41A00000, bytes A B C D = 0x41 0xA0 0x00 0x00
COMFORT_20_WORDS = {"ABCD": [0x41A0, 0x0000], "CDAB": [0x0000, 0x41A0]}


@pytest.mark.parametrize(
    ("word_order", "layout"),
    [("big", "ABCD"), ("ABCD", "ABCD"), ("little", "CDAB"), ("CDAB", "CDAB"), ("cdab", "CDAB")],
)
async def test_a_float32_reads_the_same_registers_for_the_letters_and_big_little(
    modbus_tcp_server: Any, tmp_path: Path, word_order: str, layout: str
) -> None:
    """README: ``word_order: big  # ABCD; little = CDAB``: the letters as for a point."""
    port = free_port()
    bms = {"port": port, "data_type": "float32", "word_order": word_order}
    async with running_face(modbus_tcp_server, tmp_path, bms) as run:
        client = await tcp_client(port)
        try:
            reg = run.map.register("room0", "comfort_setpoint")
            reply = await client.read_holding_registers(reg.address, count=2, device_id=1)
            assert not reply.isError(), reply
            assert reply.registers == COMFORT_20_WORDS[layout]
        finally:
            client.close()


async def test_fahrenheit_site_reads_fahrenheit(modbus_tcp_server: Any, tmp_path: Path) -> None:
    port = free_port()
    async with running_face(modbus_tcp_server, tmp_path, {"port": port}, units="F") as run:
        client = await tcp_client(port)
        try:
            await read_and_compare(run, client, "room0")
            reg = run.map.register("room0", "temperature")
            reply = await client.read_holding_registers(reg.address, count=1, device_id=1)
            assert decode_int16x10(reply.registers[0]) == pytest.approx(70.7, abs=0.05)
        finally:
            client.close()


# --------------------------------------------------------------------------- writes


async def test_valid_writes_change_the_zone_refused_ones_change_nothing(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    port = free_port()
    async with running_face(modbus_tcp_server, tmp_path, {"port": port}) as run:
        client = await tcp_client(port)
        zone = run.service.zones["room0"]
        regs = {r.field: r.address for r in run.map.zone_registers("room0")}
        try:
            # a hold at 22.5 for 90 minutes, in one write-multiple
            reply = await client.write_registers(regs["hold_setpoint"], [225, 90], device_id=1)
            assert not reply.isError(), reply
            assert zone.state.mode == "hold" and zone.state.hold_setpoint == 22.5
            assert zone.state.hold_until is not None
            assert zone.state.hold_until - time.time() == pytest.approx(90 * 60, abs=5)
            # out of the zone's limits (5 to 26 C): exception 3, nothing changes
            before = zone.state
            for address, value in (
                (regs["hold_setpoint"], 300), (regs["comfort_setpoint"], 40),
                (regs["mode"], 7), (regs["level"], 4), (regs["hold_setpoint"], 0x8000),
            ):
                reply = await client.write_register(address, value, device_id=1)
                assert reply.isError() and reply.exception_code == 3, (address, value, reply)
                assert zone.state == before
            # mode off, then a level: through the same core rules as MQTT commands
            assert not (await client.write_register(regs["mode"], 2, device_id=1)).isError()
            assert zone.state.mode == "off"
            # hold minutes while off: the core refuses ("the zone is off") -> exception 3
            reply = await client.write_register(regs["hold_minutes"], 30, device_id=1)
            assert reply.isError() and reply.exception_code == 3
            assert zone.state.mode == "off"
            reply = await client.write_register(regs["comfort_setpoint"], 215, device_id=1)
            assert not reply.isError() and reply.registers == [215]  # a single write echoes
            assert zone.state.mode == "hold" and zone.state.hold_level == "comfort"
            assert zone.state.hold_setpoint == 21.5
            assert not (await client.write_register(regs["mode"], 0, device_id=1)).isError()
            assert zone.state.mode == "auto" and zone.state.hold_setpoint is None
            # the next step shows it, and the register reads it back
            await _within(10.0, lambda: run.payload("room0")["mode"] == "auto", "mode auto shown")
            reply = await client.read_holding_registers(regs["mode"], count=1, device_id=1)
            assert reply.registers == [0]
        finally:
            client.close()


async def test_client_lists(modbus_tcp_server: Any, tmp_path: Path) -> None:
    """127.0.0.2 is loopback too (127.0.0.0/8); the lists tell the two clients apart."""
    port = free_port()
    bms = {"port": port, "allow_clients": ["127.0.0.0/30"], "allow_writes_from": ["127.0.0.1"]}
    async with running_face(modbus_tcp_server, tmp_path, bms) as run:
        mode = run.map.register("room0", "mode").address
        reader = await tcp_client(port, source="127.0.0.2")
        writer = await tcp_client(port, source="127.0.0.1")
        try:
            assert not (await reader.read_holding_registers(mode, count=1, device_id=1)).isError()
            before = run.service.zones["room0"].state
            reply = await reader.write_register(mode, 2, device_id=1)
            assert reply.isError() and reply.exception_code == 1
            assert run.service.zones["room0"].state == before
            assert not (await writer.write_register(mode, 2, device_id=1)).isError()
            assert run.service.zones["room0"].state.mode == "off"
        finally:
            reader.close()
            writer.close()
        # a client outside allow_clients is disconnected before it is answered
        stranger = AsyncModbusTcpClient(
            "127.0.0.1", port=port, timeout=0.5, retries=0, source_address=("127.0.0.9", 0)
        )
        try:
            await stranger.connect()
            with pytest.raises(ModbusException):  # the connection is gone
                reply = await stranger.read_holding_registers(mode, count=1, device_id=1)
                assert reply.isError()  # pragma: no cover - must not be reached
                raise AssertionError("answered")  # pragma: no cover
        finally:
            stranger.close()


# --------------------------------------------------------------------------- hostile traffic


def _raw(port: int, frames: list[bytes], timeout_s: float = 1.0) -> list[bytes | None]:
    """Send Modbus TCP frames one at a time on one connection; each answer or None."""
    answers: list[bytes | None] = []
    with socket.create_connection(("127.0.0.1", port), timeout=timeout_s) as sock:
        for frame in frames:
            sock.sendall(frame)
            try:
                head = sock.recv(7)
                if len(head) < 7:
                    answers.append(None)
                    break
                length = struct.unpack(">H", head[4:6])[0]
                body = b""
                while len(body) < length - 1:
                    chunk = sock.recv(length - 1 - len(body))
                    if not chunk:
                        break
                    body += chunk
                answers.append(head + body)
            except TimeoutError:
                answers.append(None)
    return answers


def _frame(tid: int, pdu: bytes, unit: int = 1) -> bytes:
    """A Modbus TCP ADU: the MBAP header (Modbus Messaging on TCP/IP Implementation Guide)."""
    return struct.pack(">HHHB", tid, 0, len(pdu) + 1, unit) + pdu


async def test_hostile_traffic_gets_the_right_exceptions_and_the_loops_keep_their_tick(
    modbus_tcp_server: Any, tmp_path: Path
) -> None:
    port = free_port()
    bms = {"port": port, "write_rate_per_min": 10}
    async with running_face(modbus_tcp_server, tmp_path, bms) as run:
        end = run.map.registers[-1].address + 1
        rng = random.Random(15)
        frames: list[tuple[bytes, int, int]] = []  # frame, function code, expected exception
        # functions pymodbus knows (each well formed) and random ones nobody defined
        known = [1, 2, 5, 7, 8, 11, 12, 15, 17, 20, 21, 22, 23, 24, 43]
        undefined = sorted(set(range(1, 128)) - {*known, 3, 4, 6, 16})
        for tid, code in enumerate(known + rng.sample(undefined, 12)):
            pdu = bytes([code]) + struct.pack(">HH", 0, 1)
            if code == 15:  # write multiple coils: one coil, one byte
                pdu = bytes([code]) + struct.pack(">HHB", 0, 1, 1) + b"\x00"
            elif code == 22:  # mask write register: address, AND mask, OR mask
                pdu = bytes([code]) + struct.pack(">HHH", 10, 0xFFFF, 0)
            elif code == 23:  # read/write multiple registers
                pdu = bytes([code]) + struct.pack(">HHHHBH", 0, 1, 10, 1, 2, 1)
            frames.append((_frame(tid, pdu), code, 1))
        frames.append((_frame(100, b"\x03" + struct.pack(">HH", 0, 126)), 3, 3))  # oversize
        frames.append((_frame(101, b"\x03" + struct.pack(">HH", 0, 2000)), 3, 3))
        frames.append((_frame(102, b"\x04" + struct.pack(">HH", 0, 0)), 4, 3))
        for tid in range(103, 123):  # random addresses outside the map
            address = rng.randrange(end + 200, 0x10000)
            frames.append((_frame(tid, b"\x03" + struct.pack(">HH", address, 1)), 3, 2))
        mode = run.map.register("room0", "mode").address
        frames.append((_frame(130, b"\x06" + struct.pack(">HH", 0, 215)), 6, 2))  # read-only
        answers = await asyncio.to_thread(_raw, port, [f for f, _, _ in frames])
        for (frame, code, exception), answer in zip(frames, answers, strict=True):
            assert answer is not None, f"no answer to {frame.hex()}"
            assert answer[:2] == frame[:2], "the answer carries the request's transaction id"
            assert answer[7] == code | 0x80 and answer[8] == exception, (frame.hex(), answer.hex())

        # a flood of writes: the first write_rate_per_min are applied, then exception 6
        ticks_before = len(run.real_ticks["room1"])
        client = await tcp_client(port)
        codes = []
        try:
            for i in range(60):
                reply = await client.write_register(mode, i % 2 * 2, device_id=1)
                codes.append(reply.exception_code if reply.isError() else 0)
        finally:
            client.close()
        assert codes[:10] == [0] * 10
        assert set(codes[10:]) == {6}
        # the control loops kept their 1 s tick while it all went on
        await _within(20.0, lambda: len(run.real_ticks["room1"]) >= ticks_before + 3, "3 ticks")
        ticks = run.real_ticks["room1"][ticks_before:]
        gaps = [b - a for a, b in itertools.pairwise(ticks)]
        # a liveness bound, not a speed goal: 1 s tick, five times that on two shared cores
        assert max(gaps) < 5.0, gaps


# --------------------------------------------------------------------------- RTU


@pytest.mark.needs_socat
async def test_rtu_slave_over_a_pty_pair(
    modbus_tcp_server: Any, tmp_path: Path, pty_pair: Any
) -> None:
    bms = {"tcp": False, "rtu": {"device": pty_pair.ends[0], "unit_id": 7, "baud": 19200,
                                  "parity": "N"}}
    async with running_face(modbus_tcp_server, tmp_path, bms) as run:
        client = AsyncModbusSerialClient(
            pty_pair.ends[1], framer=FramerType.RTU, baudrate=19200, bytesize=8, parity="N",
            stopbits=1, timeout=1.0, retries=0,
        )
        assert await client.connect()
        try:
            zone = run.service.zones["room1"]
            checked = await read_and_compare_unit(run, client, "room1")
            assert checked == len(run.map.zone_registers("room1"))
            sp = run.map.register("room1", "hold_setpoint").address
            reply = await client.write_register(sp, 195, device_id=7)
            assert not reply.isError() and zone.state.hold_setpoint == 19.5
            reply = await client.write_register(sp, 999, device_id=7)
            assert reply.isError() and reply.exception_code == 3
            assert zone.state.hold_setpoint == 19.5
            # another unit id on the bus: silence, like a real device
            with pytest.raises(ModbusIOException):
                reply = await client.read_holding_registers(sp, count=1, device_id=8)
                if reply.isError():  # pragma: no cover - pymodbus raises on silence
                    raise AssertionError(f"answered for unit 8: {reply}")
            reply = await client.read_holding_registers(sp, count=1, device_id=7)
            assert not reply.isError(), "the slave answers its own unit after a stranger's"
        finally:
            client.close()


async def read_and_compare_unit(run: Running, client: Any, zone: str) -> int:
    class Unit7:
        async def read_holding_registers(self, start: int, count: int, device_id: int) -> Any:
            return await client.read_holding_registers(start, count=count, device_id=7)

    return await read_and_compare(run, Unit7(), zone)
