"""The face's smaller promises: clear start errors, float32 writes, read-backs, the day's fail-safe.

The directory here is a plain dictionary of zone snapshots and the applier the control
core's own ``apply_command`` on them: the face's contract with the service, with a real
pymodbus client on loopback.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import json
import socket
from dataclasses import replace
from typing import Any
from zoneinfo import ZoneInfo

import pytest
from pymodbus.client import AsyncModbusTcpClient

from conftest import free_port
from roomloop.bms.alarm_book import AlarmBook
from roomloop.bms.face import BmsFace, BmsFaceError
from roomloop.bms.registers import ZoneSnapshot, encode_float32
from roomloop.config.loader import site_from_data
from roomloop.config.models import Site
from roomloop.core.commands import apply_command
from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import ZoneOutputs

NOW = 1_800_000_000.0


def make_site(bms: dict[str, Any]) -> Site:
    return site_from_data(
        {
            "site": {"name": "parts"},
            "links": [{"name": "io", "type": "modbus-tcp", "host": "127.0.0.1"}],
            "points": [
                {"name": "t1", "type": "modbus-input", "link": "io", "address": 0},
                {"name": "r1", "type": "modbus-output", "link": "io", "address": 0},
            ],
            "zones": [{"name": "a", "inputs": ["t1"], "output": "r1", "heating": "hydronic"}],
            "bms": bms,
        },
        "test",
    )


class Zones:
    """A directory and an applier over one zone's state, through the core's command rules."""

    def __init__(self, site: Site) -> None:
        self.settings = ZoneSettings.from_site(site, "a")
        self.state = ZoneController(self.settings).initial_state(NOW)
        self.applied: list[tuple[str, Any]] = []

    def snapshot(self, zone: str) -> ZoneSnapshot | None:
        out = ZoneOutputs(
            demand=False, reason="off-to-cut-in", temperature=20.1, setpoint=20.0,
            level="comfort", mode=self.state.mode, anticipator_k=0.0, droop_k=0.0,
            reliability={"t1": "ok"},
        )
        return ZoneSnapshot(out, self.state, NOW) if zone == "a" else None

    def __call__(self, zone: str, field: str, value: Any) -> None:
        self.state = apply_command(self.settings, self.state, field, value, NOW)
        self.applied.append((field, value))


async def client_for(port: int) -> AsyncModbusTcpClient:
    client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=1.0, retries=0)
    assert await client.connect()
    return client


async def test_float32_writes_whole_values_only_and_hold_minutes_read_back() -> None:
    port = free_port()
    site = make_site({"port": port, "data_type": "float32", "word_order": "little"})
    zones = Zones(site)
    face = BmsFace(site, zones, zones, clock=lambda: NOW)
    async with face:
        client = await client_for(port)
        try:
            hold = face.map.register("a", "hold_setpoint").address
            minutes = face.map.register("a", "hold_minutes").address
            assert minutes == hold + 2
            words = encode_float32(22.25, "little")  # CDAB (IEEE 754 binary32 of 22.25)
            reply = await client.write_registers(hold, [*words, 45], device_id=1)
            assert not reply.isError(), reply
            assert zones.applied == [("setpoint", 22.25), ("hold_until", NOW + 45 * 60)]
            back = await client.read_holding_registers(hold, count=3, device_id=1)
            assert back.registers == [*words, 45]
            # half a float32: exception 2, nothing applied
            for address, values in ((hold, [words[0]]), (hold + 1, [words[1], 45])):
                reply = await client.write_registers(address, values, device_id=1)
                assert reply.isError() and reply.exception_code == 2
            assert len(zones.applied) == 2
            # NaN is no set point
            reply = await client.write_registers(hold, encode_float32(float("nan"), "little"),
                                                 device_id=1)
            assert reply.isError() and reply.exception_code == 3
            assert face.writes_applied == 1 and face.writes_refused == 3
            # the comfort set point in force: the hold at level comfort above (22.25), not
            # the file's 20; a comfort write reads back as written
            comfort = face.map.register("a", "comfort_setpoint").address
            before = await client.read_holding_registers(comfort, count=2, device_id=1)
            assert before.registers == encode_float32(22.25, "little")
            assert not (await client.write_register(face.map.register("a", "mode").address, 0,
                                                    device_id=1)).isError()
            before = await client.read_holding_registers(comfort, count=2, device_id=1)
            assert before.registers == encode_float32(20.0, "little")
            reply = await client.write_registers(comfort, encode_float32(21.0, "little"),
                                                 device_id=1)
            assert not reply.isError()
            after = await client.read_holding_registers(comfort, count=2, device_id=1)
            assert after.registers == encode_float32(21.0, "little")
            assert zones.state.hold_level == "comfort"
        finally:
            client.close()


async def test_a_taken_port_is_a_clear_error() -> None:
    with socket.socket() as taken:
        taken.bind(("127.0.0.1", 0))
        taken.listen()
        port = taken.getsockname()[1]
        site = make_site({"port": port})
        zones = Zones(site)
        with pytest.raises(BmsFaceError, match=rf"127\.0\.0\.1:{port}.*cannot listen"):
            async with BmsFace(site, zones, zones):
                pass  # pragma: no cover


async def test_a_missing_serial_port_is_a_clear_error(tmp_path: Any) -> None:
    device = str(tmp_path / "no-such-tty")
    site = make_site({"tcp": False, "rtu": {"device": device}})
    zones = Zones(site)
    with pytest.raises(BmsFaceError, match="no-such-tty"):
        async with BmsFace(site, zones, zones):
            pass  # pragma: no cover


async def test_before_the_first_decision_reads_answer_busy() -> None:
    port = free_port()
    site = make_site({"port": port})

    class Empty(Zones):
        def snapshot(self, zone: str) -> ZoneSnapshot | None:
            return None

    zones = Empty(site)
    async with BmsFace(site, zones, zones):
        client = await client_for(port)
        try:
            reply = await client.read_holding_registers(0, count=2, device_id=1)
            assert reply.isError() and reply.exception_code == 6
        finally:
            client.close()
        await asyncio.sleep(0)


def test_fail_safe_minutes_count_since_local_midnight() -> None:
    tz = ZoneInfo("Europe/Vienna")
    site = make_site({})
    book = AlarmBook(site, "roomloop/parts", tz)
    base = ZoneOutputs(
        demand=False, reason="fail-safe:fixed-duty", temperature=None, setpoint=20.0,
        level="comfort", mode="auto", anticipator_k=0.0, droop_k=0.0,
    )
    engaged = replace(base, fail_safe=True)
    evening = dt.datetime(2026, 12, 2, 23, 30, tzinfo=tz).timestamp()
    book.observe("a", engaged, output_confirmed=None, now=evening)
    book.observe("a", engaged, output_confirmed=None, now=evening + 20 * 60)
    assert book.fail_safe_minutes("a") == pytest.approx(20.0)
    # past local midnight: only the 10 minutes since 00:00 count for the new day
    book.observe("a", engaged, output_confirmed=None, now=evening + 40 * 60)
    assert book.fail_safe_minutes("a") == pytest.approx(10.0)
    book.observe("a", base, output_confirmed=None, now=evening + 50 * 60)
    assert book.fail_safe_minutes("a") == pytest.approx(20.0)  # engaged until this tick
    book.observe("a", base, output_confirmed=None, now=evening + 80 * 60)
    assert book.fail_safe_minutes("a") == pytest.approx(20.0)
    assert book.bits("a") & (1 << 4) == 0  # the fail-safe alarm cleared with it


async def test_run_retries_until_it_can_listen(capsys: pytest.CaptureFixture[str]) -> None:
    taken = socket.socket()
    taken.bind(("127.0.0.1", 0))
    taken.listen()
    port = taken.getsockname()[1]
    site = make_site({"port": port})
    zones = Zones(site)
    task = asyncio.create_task(BmsFace(site, zones, zones).run(retry_s=0.2))
    try:
        await asyncio.sleep(0.5)
        assert not task.done()
        assert "bms.cannot_listen" in capsys.readouterr().out
        taken.close()
        for _ in range(50):
            client = AsyncModbusTcpClient("127.0.0.1", port=port, timeout=0.5, retries=0)
            if await client.connect():
                reply = await client.read_holding_registers(0, count=1, device_id=1)
                client.close()
                assert not reply.isError()
                break
            await asyncio.sleep(0.1)
        else:
            raise AssertionError("the face never listened")
    finally:
        taken.close()
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await task


def test_ack_commands_are_answered_like_commands() -> None:
    book = AlarmBook(make_site({}), "roomloop/parts", ZoneInfo("UTC"))
    topic = "roomloop/parts/zone/a/cmd/ack"
    cold = ZoneOutputs(
        demand=True, reason="cut-in", temperature=14.0, setpoint=20.0, level="comfort",
        mode="auto", anticipator_k=0.0, droop_k=0.0, reliability={"t1": "ok"},
    )
    for t in range(0, 601, 10):
        book.observe("a", cold, output_confirmed=True, now=NOW + t)
    assert book.bits("a") == 1

    def answer(payload: bytes, **kw: Any) -> Any:
        got = book.handle_ack(topic, payload, retained=kw.get("retained", False), monotonic=0.0)
        return None if got is None else json.loads(got.payload)

    assert book.handle_ack("roomloop/parts/zone/a/cmd/mode", b"off", retained=False,
                           monotonic=0.0) is None  # not ours: the command handler's
    assert book.handle_ack("roomloop/parts/zone/zz/cmd/ack", b"all", retained=False,
                           monotonic=0.0) is None  # no such zone
    assert answer(b"all", retained=True) is None  # a stale retained ack is ignored
    assert answer(b"\xff")["reason"] == "payload is not UTF-8 text"
    assert answer(b"42")["ok"] is False
    assert answer(b"x" * 300)["reason"] == "payload too large"
    assert answer(b'{"value": "too-cold"}') == {"field": "ack", "ok": True, "value": "too-cold"}
    payloads = {m.topic: json.loads(m.payload) for m in book.due()}
    assert payloads["roomloop/parts/alarm/a/too-cold"]["acknowledged"] is True
    assert payloads["roomloop/parts/alarm/a/too-warm"]["active"] is False
    assert len(payloads) == 7
    for message in book.due():
        book.sent(message)
    assert book.due() == []  # nothing changed since
