"""Modbus TCP links against a real pymodbus server on loopback (tests/conftest.py)."""

from __future__ import annotations

import asyncio
import contextlib
import time
from typing import Any

import pytest
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock
from roomloop.config.models import ModbusInput, ModbusOutput, ModbusTcpLink
from roomloop.errors import DeviceError
from roomloop.io.codec import encode_raw
from roomloop.io.modbus import ModbusLink, endpoint_of
from roomloop.io.planner import plan_reads

FAST = {"timeout_s": 0.2, "retries": 0, "request_gap_s": 0.0, "poll_interval_s": 0.1}


def tcp_link(server: Any, name: str = "bench", **fields: Any) -> ModbusTcpLink:
    values: dict[str, Any] = {**FAST, **fields}
    return ModbusTcpLink(type="modbus-tcp", name=name, host=server.host, port=server.port, **values)


def inp(name: str, address: int, link: str = "bench", **fields: Any) -> ModbusInput:
    return ModbusInput(type="modbus-input", name=name, link=link, address=address, **fields)


def out(name: str, address: int, link: str = "bench", **fields: Any) -> ModbusOutput:
    return ModbusOutput(type="modbus-output", name=name, link=link, address=address, **fields)


async def test_every_data_type_and_order_over_tcp(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    # REFERENCES.md: IEEE 754 21.5 = 0x41AC0000 as ABCD, CDAB, BADC, DCBA [published; computed]
    await server.set_registers(
        "input", 0, [0x41AC, 0x0000, 0x0000, 0x41AC, 0xAC41, 0x0000, 0x0000, 0xAC41]
    )
    # REFERENCES.md: int16 x 10 transmitters, 21.5 -> 0x00D7, -5.5 -> 0xFFC9 [trade]
    await server.set_registers("input", 20, [0x00D7, 0xFFC9])
    await server.set_registers("holding", 30, [0x00D7])  # uint16 x 10
    await server.set_registers("holding", 40, encode_raw(-55, "int32", "little", "big"))  # x 0.1
    await server.set_registers("holding", 50, encode_raw(2150, "uint32", "big", "little"))  # x 0.01
    points = [
        inp("abcd", 0, data_type="float32"),
        inp("cdab", 2, data_type="float32", word_order="little"),
        inp("badc", 4, data_type="float32", byte_order="little"),
        inp("dcba", 6, data_type="float32", word_order="little", byte_order="little"),
        inp("i16-pos", 20, scale=0.1),
        inp("i16-neg", 21, scale=0.1),
        inp("u16", 30, table="holding", data_type="uint16", scale=0.1),
        inp("i32", 40, table="holding", data_type="int32", word_order="little", scale=0.1),
        inp("u32", 50, table="holding", data_type="uint32", byte_order="little", scale=0.01),
    ]
    async with ModbusLink(tcp_link(server), points) as link:
        samples = {s.name: s for s in await link.poll()}
    expected = {
        "abcd": 21.5,
        "cdab": 21.5,
        "badc": 21.5,
        "dcba": 21.5,
        "i16-pos": 21.5,
        "i16-neg": -5.5,
        "u16": 21.5,
        "i32": -5.5,
        "u32": 21.5,
    }
    assert {n: s.transport for n, s in samples.items()} == dict.fromkeys(expected, "ok")
    for name, value in expected.items():
        assert samples[name].value == pytest.approx(value), name


async def test_scattered_points_are_coalesced_on_the_wire(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server(units=(1, 2))
    # 24 points in three clusters on unit 1, 8 on unit 2: 4 reads instead of 32
    addresses = [0, 2, 4, 6, 8, 10, 12, 14, 200, 203, 206, 209, 212, 215, 218, 221]
    addresses += [500 + 5 * i for i in range(8)]
    points = [inp(f"u1-{a}", a, scale=0.1) for a in addresses]
    points += [inp(f"u2-{i}", 7 * i, unit_id=2, scale=0.1) for i in range(8)]
    for a in addresses:
        await server.set_registers("input", a, [a % 300])
    link_config = tcp_link(server, max_gap_registers=8)
    async with ModbusLink(link_config, points) as link:
        server.requests.clear()
        samples = await link.poll()
    assert len(samples) == 32 and all(s.transport == "ok" for s in samples)
    reads = server.reads()
    assert len(reads) == len(link.plan) == 4
    assert sorted((r.unit_id, r.address, r.count) for r in reads) == [
        (1, 0, 15),
        (1, 200, 22),
        (1, 500, 36),
        (2, 0, 50),
    ]
    by_name = {s.name: s.value for s in samples}
    assert by_name["u1-221"] == pytest.approx(22.1)


async def test_plan_respects_the_125_register_limit_on_the_wire(modbus_tcp_server: Any) -> None:
    # REFERENCES.md: at most 125 registers per read (Modbus Application Protocol V1.1b3) [published]
    server = await modbus_tcp_server()
    points = [inp(f"p{i}", i, data_type="uint16", valid_range=(0, 1000)) for i in range(300)]
    await server.set_registers("input", 0, list(range(300)))
    async with ModbusLink(tcp_link(server, max_gap_registers=0), points) as link:
        server.requests.clear()
        samples = await link.poll()
    assert [r.count for r in server.reads()] == [125, 125, 50]
    assert [s.value for s in samples] == [float(i) for i in range(300)]


async def test_server_stopped_and_restarted(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    await server.set_registers("input", 0, [0x00D7])
    points = [inp("room", 0, scale=0.1)]
    async with ModbusLink(
        tcp_link(server), points, reconnect_min_s=0.05, reconnect_max_s=0.2
    ) as link:
        assert (await link.poll())[0].transport == "ok"
        await server.stop()
        failed = await link.poll()
        assert failed[0].transport == "comm-failure" and failed[0].value is None
        assert link.samples(time.time())["room"].transport == "comm-failure"
        await server.start()
        deadline = time.monotonic() + 5.0
        while (await link.poll())[0].transport != "ok":
            assert time.monotonic() < deadline, "no recovery after the server came back"
            await asyncio.sleep(0.05)
        assert link.samples(time.time())["room"].value == pytest.approx(21.5)


async def test_exception_reply_marks_only_that_read(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server(units=(1, 2), registers=64)
    await server.set_registers("input", 0, [0x00D7])
    points = [
        inp("good", 0, scale=0.1),
        inp("past-the-table", 100, scale=0.1),  # the server answers: illegal data address
        inp(
            "no-such-unit", 0, unit_id=9, scale=0.1
        ),  # pymodbus answers code 4 (a real one is silent)
    ]
    with capture_logs() as events:
        async with ModbusLink(tcp_link(server, retries=2), points) as link:
            server.requests.clear()
            samples = {s.name: s for s in await link.poll()}
    assert samples["good"].transport == "ok"
    assert samples["past-the-table"].transport == "comm-failure"
    assert samples["no-such-unit"].transport == "comm-failure"
    assert len(server.reads()) == 3  # an exception reply is an answer: no retries
    failed = [e for e in events if e["event"] == "modbus.read_failed"]
    assert {tuple(e["points"]) for e in failed} == {("past-the-table",), ("no-such-unit",)}
    assert all(e["link"] == "bench" and "exception reply" in e["reason"] for e in failed)
    reasons = {e["points"][0]: e["reason"] for e in failed}
    # REFERENCES.md: Modbus Application Protocol V1.1b3, section 7: 2 = illegal data address
    # [published]
    assert reasons["past-the-table"] == "exception reply 2 (illegal data address)"


async def test_device_failure_exception_code(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    server.exception_code = 4  # server device failure
    async with ModbusLink(tcp_link(server), [inp("room", 0)]) as link:
        sample = (await link.poll())[0]
        assert sample.transport == "comm-failure"
        # REFERENCES.md: Modbus Application Protocol V1.1b3, section 7: 4 = server device failure,
        # 6 = server device busy, 11 = gateway target device failed to respond [published]
        with pytest.raises(DeviceError, match=r"exception reply 4 \(server device failure\)"):
            await link.read_point("room")
        server.exception_code = 6
        with pytest.raises(DeviceError, match=r"exception reply 6 \(server device busy\)"):
            await link.read_point("room")
        server.exception_code = 11
        with pytest.raises(
            DeviceError, match=r"exception reply 11 \(gateway target device failed to respond\)"
        ):
            await link.read_point("room")
        server.exception_code = None
        assert (await link.poll())[0].transport == "ok"


def test_exception_codes_outside_the_standard_list_say_so() -> None:
    from roomloop.io.modbus import exception_reply_text

    # REFERENCES.md: Modbus Application Protocol V1.1b3, section 7 lists 1-6, 8, 10, 11
    # [published]
    assert exception_reply_text(1) == "exception reply 1 (illegal function)"
    assert exception_reply_text(3) == "exception reply 3 (illegal data value)"
    assert exception_reply_text(8) == "exception reply 8 (memory parity error)"
    assert exception_reply_text(10) == "exception reply 10 (gateway path unavailable)"
    assert exception_reply_text(7) == "exception reply 7 (not standard)"


def test_endpoint_names_baud_and_frame_apart() -> None:
    from roomloop.config.models import ModbusRtuLink

    rtu = ModbusRtuLink(
        type="modbus-rtu", name="bus", device="/dev/ttyUSB0", baud=19200, parity="E"
    )
    assert endpoint_of(rtu) == "modbus-rtu:/dev/ttyUSB0@19200/8E1"
    tcp = ModbusTcpLink(type="modbus-tcp", name="gw", host="127.0.0.1", port=1502)
    assert endpoint_of(tcp) == "modbus-tcp://127.0.0.1:1502"


async def test_slow_link_does_not_hold_up_another(modbus_tcp_server: Any) -> None:
    slow_server = await modbus_tcp_server()
    fast_server = await modbus_tcp_server()
    slow_server.delay_s = 1.0  # far beyond the link's 0.15 s timeout
    await fast_server.set_registers("input", 0, [0x00D7])
    slow = ModbusLink(
        tcp_link(slow_server, "slow", timeout_s=0.15, retries=1), [inp("s", 0, "slow")]
    )
    fast = ModbusLink(
        tcp_link(fast_server, "fast", poll_interval_s=0.05), [inp("f", 0, "fast", scale=0.1)]
    )
    async with slow, fast:
        tasks = [asyncio.create_task(slow.run()), asyncio.create_task(fast.run())]
        try:
            await asyncio.sleep(1.5)
        finally:
            for task in tasks:
                task.cancel()
            for task in tasks:
                with contextlib.suppress(asyncio.CancelledError):
                    await task
        now = time.time()
        assert slow.samples(now)["s"].transport == "comm-failure"
        assert fast.samples(now)["f"].transport == "ok"
    # one slow cycle costs (1 + retries) x timeout plus backoff, about 0.35 s: at most 5 in 1.5 s;
    # the fast link at 0.05 s per cycle reaches far more (about 25 on an idle machine)
    assert slow.cycles <= 5
    assert fast.cycles >= 3 * max(slow.cycles, 1)


async def test_output_write_read_back_mismatch_and_reassert(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    clock = VirtualClock(start=1000.0)
    outputs = [
        out("relay", 3, reassert_s=60),
        out("valve", 7, table="holding", on_value=0x0100, off_value=0x0000),
        out("blind", 4, read_back=False),
    ]
    link = ModbusLink(tcp_link(server), [], outputs, clock=clock)
    async with link:
        state = await link.set_output("relay", True)
        assert (state.verdict, state.confirmed) == ("ok", True)
        assert (await server.get_coils(3, 1)) == [True]
        state = await link.set_output("valve", True)
        assert state.verdict == "ok" and await server.get_registers("holding", 7, 1) == [0x0100]
        assert (await link.read_output("valve")).on is True
        assert (await link.set_output("blind", True)).verdict == "unverified"

        # the relay module lost power: the coil dropped; re-assertion puts it back
        commanded = {"relay": True, "valve": True, "blind": True}  # what the owner wants
        await server.set_coils(3, [False])
        assert await link.reassert_due(clock.now() + 30, commanded) == []  # not due yet
        clock.advance(61)
        again = await link.reassert_due(clock.now(), commanded)
        assert "relay" in [s.name for s in again]
        assert (await server.get_coils(3, 1)) == [True]

        # a device that ignores writes: read-back disagrees, reported once
        def ignore(function_code: int, _address: int, values: list[Any]) -> None:
            if function_code == 6:
                values[:] = [0x0000] * len(values)

        server.write_filter = ignore
        with capture_logs() as events:
            state = await link.set_output("valve", True)
            await link.set_output("valve", True)
        assert state.verdict == "mismatch" and "read back 0" in (state.detail or "")
        assert link.output_state("valve").verdict == "mismatch"
        mismatches = [e for e in events if e["event"] == "modbus.output_mismatch"]
        assert len(mismatches) == 1
        assert mismatches[0]["point"] == "valve" and mismatches[0]["raw"] == 0


async def test_a_new_decision_is_never_overtaken_by_a_reassert(modbus_tcp_server: Any) -> None:
    """The poll loop's re-assert and the output writer's new decision race.

    The new decision is queued first and the re-assert (due for the old state) comes while
    it is in flight, with what the owner commands by then; the coil must end at the new
    decision and the link's state must say so.
    """
    server = await modbus_tcp_server()
    clock = VirtualClock(start=1000.0)
    relay = out("relay", 3, reassert_s=60)
    link = ModbusLink(tcp_link(server), [], [relay], clock=clock)
    async with link:
        assert (await link.set_output("relay", True)).verdict == "ok"
        clock.advance(61)  # a re-assert of "on" is now due
        switch_off = asyncio.create_task(link.set_output("relay", False))
        await asyncio.sleep(0)  # the off write is under way
        await link.reassert_due(clock.now(), {"relay": False})  # the owner now wants off
        state = await asyncio.wait_for(switch_off, 5)
        assert await server.get_coils(3, 1) == [False]
        assert (state.wanted, state.verdict) == (False, "ok")
        assert link.output_state("relay").wanted is False


async def test_write_to_an_unreachable_device(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    link = ModbusLink(tcp_link(server), [], [out("relay", 0)], reconnect_min_s=0.0)
    async with link:
        await server.stop()
        state = await link.set_output("relay", True)
        assert state.verdict == "comm-failure" and state.wanted is True
        await server.start()
        # the failed write is retried on the next re-assertion, whatever reassert_s says
        deadline = time.monotonic() + 5.0
        while link.output_state("relay").verdict != "ok":
            assert time.monotonic() < deadline
            await link.reassert_due(time.time(), {"relay": True})
            await asyncio.sleep(0.05)
        assert await server.get_coils(0, 1) == [True]


async def test_broken_sensor_logs_are_rate_limited(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    await server.set_registers("input", 0, [0x7FFF])
    clock = VirtualClock(start=0.0)
    point = inp("room", 0, scale=0.1, sentinels=(0x7FFF,))
    link = ModbusLink(tcp_link(server), [point], clock=clock, log_interval_s=300)
    with capture_logs() as events:
        async with link:
            for _ in range(20):
                clock.advance(5)
                sample = (await link.poll())[0]
                assert (sample.value, sample.transport) == (None, "over-range")
            clock.advance(300)
            await link.poll()
            await server.set_registers("input", 0, [0x00D7])
            await link.poll()
    bad = [e for e in events if e["event"] == "modbus.point_unreliable"]
    assert len(bad) == 2
    assert bad[0]["point"] == "room" and bad[0]["link"] == "bench" and bad[0]["raw"] == ["0x7FFF"]
    assert bad[1]["suppressed"] == 19
    assert [e["event"] for e in events].count("modbus.point_recovered") == 1


async def test_an_hour_of_the_same_read_failure_is_folded_into_a_few_lines(
    modbus_tcp_server: Any,
) -> None:
    # A sensor behind a gateway silent for an hour, polled every 10 s: the first failure in
    # full, reminders further and further apart, and the recovery says how long and how often.
    server = await modbus_tcp_server()
    await server.set_registers("input", 0, [0x00D7])
    clock = VirtualClock(start=0.0)
    link = ModbusLink(tcp_link(server), [inp("room", 0, scale=0.1)], clock=clock)
    with capture_logs() as events:
        async with link:
            server.exception_code = 11  # gateway target device failed to respond
            for _ in range(360):
                clock.advance(10)
                assert (await link.poll())[0].transport == "comm-failure"
            server.exception_code = 6  # another failure (server device busy): said at once
            clock.advance(10)
            await link.poll()
            server.exception_code = None
            clock.advance(10)
            assert (await link.poll())[0].transport == "ok"
    failed = [e for e in events if e["event"] == "modbus.read_failed"]
    eleven = [e for e in failed if "exception reply 11" in e["reason"]]
    # at 0, then 300, 900, 2100 s after the first (the pause doubles from 300 s)
    assert [e.get("failing_for_s", 0.0) for e in eleven] == [0.0, 300.0, 900.0, 2100.0]
    assert "suppressed" not in eleven[0] and eleven[1]["suppressed"] == 29
    assert len(failed) == len(eleven) + 1 and "exception reply 6" in failed[-1]["reason"]
    recovered = [e for e in events if e["event"] == "modbus.read_recovered"]
    assert len(recovered) == 1
    assert recovered[0]["failures"] == 361 and recovered[0]["failed_for_s"] == 3610.0


async def test_stale_when_polls_stop(modbus_tcp_server: Any) -> None:
    server = await modbus_tcp_server()
    point = inp("room", 0, reliability={"stale_after_s": 30})
    link = ModbusLink(tcp_link(server), [point], clock=VirtualClock(start=1000.0))
    async with link:
        await link.poll()
    # the sample keeps its arrival time; the core judges it stale (roomloop.core.reliability)
    sample = link.samples(1031.0)["room"]
    assert (sample.transport, sample.received_at) == ("ok", 1000.0)


def test_points_of_another_link_refused() -> None:
    config = ModbusTcpLink(type="modbus-tcp", name="a", host="127.0.0.1")
    with pytest.raises(ValueError, match="belongs to link b"):
        ModbusLink(config, [inp("x", 0, link="b")])


def test_plan_made_once_at_start() -> None:
    config = ModbusTcpLink(type="modbus-tcp", name="a", host="127.0.0.1", max_gap_registers=3)
    points = [inp("x", 0, link="a"), inp("y", 4, link="a"), inp("z", 9, link="a")]
    link = ModbusLink(config, points)
    assert link.plan == plan_reads(points, 3)
    assert [r.point_names for r in link.plan] == [("x", "y"), ("z",)]


def test_a_refused_serial_line_setting_is_named() -> None:
    """pyserial reports a line setting the adapter cannot do as termios.error(22, ...)."""
    import termios

    from roomloop.config.models import ModbusRtuLink
    from roomloop.io.modbus import describe_connect_error

    rtu = ModbusRtuLink(type="modbus-rtu", name="bus", device="/dev/ttyUSB0", baud=19200)
    text = describe_connect_error(rtu, termios.error(22, "Invalid argument"))
    assert "/dev/ttyUSB0 refused the line settings 19200 baud 8E1" in text
    assert describe_connect_error(rtu, OSError(22, "Invalid argument")) == text
    # anything else keeps its own words
    other = describe_connect_error(rtu, OSError(2, "No such file or directory"))
    assert other == "FileNotFoundError: [Errno 2] No such file or directory"

