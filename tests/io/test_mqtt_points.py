"""MQTT points: payload parsing, hostile payloads, and a real mosquitto broker."""

from __future__ import annotations

import asyncio
import contextlib
import json
import math
import time
from collections.abc import AsyncIterator, Awaitable, Callable
from typing import Any

import aiomqtt
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from roomloop.config.models import Broker, MqttInput, MqttOutput
from roomloop.core.types import RELIABILITY_VALUES
from roomloop.io.broker import BrokerConnection
from roomloop.io.mqtt import MqttPoints, PayloadError, judge_payload, parse_payload


def inp(name: str = "t", topic: str = "lab/t", **fields: Any) -> MqttInput:
    return MqttInput(type="mqtt-input", name=name, topic=topic, **fields)


def outp(name: str = "r", **fields: Any) -> MqttOutput:
    values: dict[str, Any] = {"command_topic": "lab/r/set"}
    values.update(fields)
    return MqttOutput(type="mqtt-output", name=name, **values)


# --------------------------------------------------------------------------- parsing


@pytest.mark.parametrize(
    ("payload", "field", "expected"),
    [
        (b"21.5", None, 21.5),
        (b" 21.5\n", None, 21.5),
        (b'"21.5"', None, 21.5),
        (b"-5", None, -5.0),
        (b'{"temp": 21.5}', "temp", 21.5),
        (b'{"temp": "21.5"}', "temp", 21.5),
        (b'{"sensors": [{"t": 1}, {"t": 19.25}]}', "sensors.1.t", 19.25),
        (b'{"a": {"b": {"c": 7}}}', "a.b.c", 7.0),
    ],
)
def test_good_payloads(payload: bytes, field: str | None, expected: float) -> None:
    assert parse_payload(payload, field) == expected


@pytest.mark.parametrize(
    ("payload", "field", "why"),
    [
        (b"", None, "not a number"),
        (b"warm", None, "not a number"),
        (b"nan", None, "finite"),
        (b"inf", None, "finite"),
        (b"-Infinity", None, "finite"),
        (b"\xff\xfe21", None, "UTF-8"),
        (b'{"temp": 21.5', "temp", "JSON"),
        (b'{"temp": NaN}', "temp", "finite"),
        (b'{"temp": 1e999}', "temp", "finite"),
        (b'{"temp": true}', "temp", "not a number"),
        (b'{"temp": null}', "temp", "not a number"),
        (b'{"temp": [21.5]}', "temp", "list"),
        (b'{"temp": {"v": 1}}', "temp", "dict"),
        (b'{"other": 21.5}', "temp", "no field"),
        (b"[1, 2]", "5", "no element"),
        (b"21.5", "temp", "holds no field"),
        (b"[" * 100000, "a", "too large"),
        (b"[" * 5000 + b"]" * 5000, "a", "JSON"),
    ],
)
def test_bad_payloads_say_why(payload: bytes, field: str | None, why: str) -> None:
    with pytest.raises(PayloadError, match=why):
        parse_payload(payload, field)


def test_unit_conversion_scale_and_range() -> None:
    # 70.7 F = 21.5 C from F = C x 9/5 + 32 [published: NIST SP 811]
    assert judge_payload(inp(unit="F"), b"70.7").value == pytest.approx(21.5)
    assert judge_payload(inp(scale=0.1), b"215").value == pytest.approx(21.5)
    # outside the valid range: delivered as it came, the core judges the range
    hot = judge_payload(inp(valid_range=(0, 40)), b"45")
    assert hot.transport == "ok" and hot.value == 45.0 and hot.raw == 45.0
    assert judge_payload(inp(valid_range=(0, 40)), b"-1").value == -1.0
    assert judge_payload(inp(scale=1e308), b"1e10").value is None


@settings(max_examples=400, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(payload=st.binary(max_size=300), field=st.sampled_from([None, "temp", "a.0.b"]))
def test_hostile_bytes_never_crash(payload: bytes, field: str | None) -> None:
    points = MqttPoints([inp(field=field)])
    assert points.handle("lab/t", payload, 100.0) is True
    sample = points.samples(100.0)["t"]
    assert sample.transport in RELIABILITY_VALUES
    assert sample.value is None or math.isfinite(sample.value)
    assert sample.received_at == 100.0


json_values = st.recursive(
    st.none() | st.booleans() | st.floats() | st.integers() | st.text(max_size=10),
    lambda children: (
        st.lists(children, max_size=3) | st.dictionaries(st.text(max_size=4), children, max_size=3)
    ),
    max_leaves=10,
)


@settings(max_examples=120, deadline=None)
@given(document=st.dictionaries(st.sampled_from(["temp", "a", "x"]), json_values, max_size=3))
def test_json_of_any_shape_gives_a_verdict(document: dict[str, Any]) -> None:
    payload = json.dumps(document, allow_nan=True).encode()
    result = judge_payload(inp(field="temp"), payload)
    value = document.get("temp")
    usable = (
        isinstance(value, int | float)
        and not isinstance(value, bool)
        and math.isfinite(value)
    )  # any range: the core judges it
    if usable:
        assert result.transport == "ok" and result.value == pytest.approx(float(value))  # type: ignore[arg-type]
    else:
        assert result.transport != "ok" or isinstance(value, str)


def test_samples_carry_their_arrival_time() -> None:
    # staleness is the core's judgement, from received_at (roomloop.core.reliability)
    points = MqttPoints([inp(reliability={"stale_after_s": 60})])
    nothing = points.samples(0.0)["t"]
    assert (nothing.value, nothing.received_at, nothing.transport) == (None, None, "ok")
    points.handle("lab/t", b"20", 1000.0)
    later = points.samples(5000.0)["t"]
    assert (later.value, later.received_at, later.transport) == (20.0, 1000.0, "ok")
    assert points.handle("lab/other", b"20", 1000.0) is False


def test_several_points_on_one_topic() -> None:
    points = MqttPoints([inp("a", field="x"), inp("b", field="y")])
    assert points.topics() == ("lab/t",)
    points.handle("lab/t", b'{"x": 20, "y": "bad"}', 5.0)
    samples = points.samples(5.0)
    assert samples["a"].value == 20.0 and samples["b"].transport == "comm-failure"


def test_bad_payload_logs_are_rate_limited() -> None:
    from structlog.testing import capture_logs

    points = MqttPoints([inp()], log_interval_s=300)
    with capture_logs() as events:
        for i in range(50):
            points.handle("lab/t", b"garbage", float(i))
        points.handle("lab/t", b"20.5", 60.0)
    bad = [e for e in events if e["event"] == "mqtt.point_unreliable"]
    assert len(bad) == 1
    assert bad[0]["point"] == "t" and bad[0]["topic"] == "lab/t" and "garbage" in bad[0]["raw"]
    assert [e["event"] for e in events].count("mqtt.point_recovered") == 1


# --------------------------------------------------------------------------- real broker


async def wait_for(condition: Callable[[], bool], timeout_s: float = 5.0, what: str = "") -> None:
    deadline = time.monotonic() + timeout_s
    while not condition():
        if time.monotonic() > deadline:
            raise AssertionError(f"timed out waiting for {what or condition}")
        await asyncio.sleep(0.02)


@contextlib.asynccontextmanager
async def running(coro: Awaitable[Any]) -> AsyncIterator[asyncio.Task[Any]]:
    task: asyncio.Task[Any] = asyncio.ensure_future(coro)
    try:
        yield task
    finally:
        task.cancel()
        with contextlib.suppress(asyncio.CancelledError):
            await asyncio.wait_for(task, 5)


def connection(mosquitto: Any, points: MqttPoints) -> tuple[BrokerConnection, Awaitable[None]]:
    host, port = mosquitto
    conn = BrokerConnection(Broker(host=host, port=port), backoff_min_s=0.1, backoff_max_s=0.2)

    async def on_connect(client: aiomqtt.Client) -> None:
        for topic in points.topics():
            await client.subscribe(topic, qos=1)
        points.attach(client)
        await points.publish_commands(client)

    def on_message(message: aiomqtt.Message) -> None:
        points.handle(message.topic.value, message.payload, time.time())

    return conn, conn.run(on_message, on_connect=on_connect, on_disconnect=points.detach)


@pytest.mark.needs_mosquitto
async def test_input_over_a_real_broker_survives_a_restart(mosquitto: Any) -> None:
    host, port = mosquitto
    points = MqttPoints([inp(field="temp")])
    conn, loop = connection(mosquitto, points)
    async with running(loop):
        await asyncio.wait_for(conn.connected.wait(), 5)
        async with aiomqtt.Client(host, port) as sensor:
            await sensor.publish("lab/t", '{"temp": "21.5"}', qos=1)
            await wait_for(
                lambda: points.samples(time.time())["t"].value == 21.5, what="first reading"
            )
        mosquitto.stop()
        await wait_for(lambda: not conn.connected.is_set(), what="disconnect seen")
        mosquitto.start()
        await wait_for(lambda: conn.connections >= 2 and conn.connected.is_set(), what="reconnect")
        async with aiomqtt.Client(host, port) as sensor:
            await sensor.publish("lab/t", '{"temp": 19}', qos=1)
            await wait_for(
                lambda: points.samples(time.time())["t"].value == 19.0, what="reading after restart"
            )


async def device(mosquitto: Any, answer: bool, subscribed: asyncio.Event | None = None) -> None:
    """A relay module on the broker: obeys lab/r/set and reports on lab/r (if ``answer``);
    sets ``subscribed`` once the broker acknowledged its subscription."""
    host, port = mosquitto
    async with aiomqtt.Client(host, port) as client:
        await client.subscribe("lab/r/set", qos=1)
        if subscribed is not None:
            subscribed.set()
        async for message in client.messages:
            if answer:
                await client.publish("lab/r", message.payload, qos=1, retain=True)


@pytest.mark.needs_mosquitto
async def test_output_verified_by_its_state_topic(mosquitto: Any) -> None:
    points = MqttPoints([], [outp(state_topic="lab/r", state_timeout_s=5)])
    conn, loop = connection(mosquitto, points)
    subscribed = asyncio.Event()
    async with running(device(mosquitto, answer=True, subscribed=subscribed)), running(loop):
        await asyncio.wait_for(conn.connected.wait(), 5)
        await asyncio.wait_for(subscribed.wait(), 5)
        state = await points.set_output("r", True)
        assert state.verdict == "pending" and state.written_at is not None
        await wait_for(lambda: points.output_state("r").verdict == "ok", what="read-back on")
        assert points.output_state("r").confirmed is True
        await points.set_output("r", False)
        await wait_for(lambda: points.output_state("r").confirmed is False, what="read-back off")


@pytest.mark.needs_mosquitto
async def test_state_topic_that_never_answers(mosquitto: Any) -> None:
    points = MqttPoints([], [outp(state_topic="lab/r", state_timeout_s=0.3)])
    conn, loop = connection(mosquitto, points)
    async with running(device(mosquitto, answer=False)), running(loop):
        await asyncio.wait_for(conn.connected.wait(), 5)
        state = await points.set_output("r", True)
        assert state.verdict == "pending"
        written_at = state.written_at
        assert written_at is not None
        assert points.check_read_back(written_at + 0.25) == []  # not yet timed out
        changed = points.check_read_back(written_at + 0.35)
        assert [s.name for s in changed] == ["r"]
        assert points.output_state("r").verdict == "mismatch"
        assert "no state within" in (points.output_state("r").detail or "")


@pytest.mark.needs_mosquitto
async def test_command_waits_for_the_broker_and_is_reasserted(mosquitto: Any) -> None:
    host, port = mosquitto
    seen: list[bytes] = []

    subscribed = asyncio.Event()

    async def watcher() -> None:
        async with aiomqtt.Client(host, port) as client:
            await client.subscribe("lab/r/set", qos=1)
            subscribed.set()
            async for message in client.messages:
                seen.append(bytes(message.payload))

    points = MqttPoints([], [outp(reassert_s=1.0)])
    # commanded before any connection: kept, sent once connected
    state = await points.set_output("r", True)
    assert state.wanted is True and state.written_at is None
    async with running(watcher()):
        await asyncio.wait_for(subscribed.wait(), 5)
        _conn, loop = connection(mosquitto, points)
        async with running(loop):
            await wait_for(lambda: seen == [b"on"], what="command after connect")
            assert points.output_state("r").verdict == "unverified"
            assert await points.publish_commands(None, time.time()) == []  # not due yet
            assert await points.publish_commands(None, time.time() + 1.5) == ["r"]
            await wait_for(lambda: len(seen) == 2, what="re-assertion")
            assert seen == [b"on", b"on"]
