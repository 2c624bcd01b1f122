"""``probe`` beside a running service: own client id, payloads as text, broker loss in our words.

Real parts: mosquitto, the real ``roomloop probe`` in a subprocess, the service in-process.
"""

from __future__ import annotations

import asyncio
import contextlib
import sys
from collections.abc import AsyncIterator
from pathlib import Path
from typing import Any

import aiomqtt
import pytest
from structlog.testing import capture_logs

from roomloop.config.loader import load_site
from roomloop.io.broker import BrokerConnection
from roomloop.io.client_ids import helper_broker, helper_client_id
from roomloop.service.app import Service

SITE = """\
site:
  name: probe-annex
links:
  - {{name: bench, type: modbus-tcp, host: 127.0.0.1, port: 1, timeout_s: 0.3, retries: 0}}
broker:
  host: 127.0.0.1
  port: {broker_port}
  client_id: annex-ctrl
  keepalive_s: 5
points:
  - {{name: room, type: modbus-input, link: bench, address: 10, scale: 0.1}}
  - {{name: relay, type: modbus-output, link: bench, address: 3}}
  - {{name: hall, type: mqtt-input, topic: bench/hall, field: air.temp}}
  - {{name: fan, type: mqtt-output, command_topic: bench/fan/set, state_topic: bench/fan,
      state_timeout_s: 1.5}}
zones:
  - {{name: lab, inputs: [room], output: relay, heating: electric}}
"""
PREFIX = "roomloop/probe-annex"


def site_file(tmp_path: Path, broker_port: int) -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(SITE.format(broker_port=broker_port), encoding="utf-8")
    return path


async def probe(*args: str) -> tuple[int, str, str]:
    process = await asyncio.create_subprocess_exec(
        sys.executable, "-m", "roomloop", "probe", *args,
        stdin=asyncio.subprocess.DEVNULL,
        stdout=asyncio.subprocess.PIPE,
        stderr=asyncio.subprocess.PIPE,
    )
    out, err = await asyncio.wait_for(process.communicate(), 30)
    assert process.returncode is not None
    return process.returncode, out.decode(), err.decode()


async def until(condition: Any, timeout_s: float = 10.0) -> None:
    deadline = asyncio.get_running_loop().time() + timeout_s
    while not condition():
        assert asyncio.get_running_loop().time() < deadline, "condition not met in time"
        await asyncio.sleep(0.02)


@contextlib.asynccontextmanager
async def status_log(host: str, port: int) -> AsyncIterator[list[str]]:
    """Every payload on ``<prefix>/status`` while the ``with`` runs."""
    seen: list[str] = []

    async def listen() -> None:
        async with aiomqtt.Client(host, port) as client:
            await client.subscribe(f"{PREFIX}/status", qos=1)
            async for message in client.messages:
                seen.append(bytes(message.payload).decode())

    task = asyncio.create_task(listen())
    try:
        yield seen
    finally:
        task.cancel()
        await asyncio.gather(task, return_exceptions=True)


def test_helper_client_ids_are_the_sites_plus_role_and_pid() -> None:
    assert helper_client_id("annex-ctrl", "probe", pid=4711) == "annex-ctrl-probe-4711"
    assert helper_client_id(None, "history", pid=12) == "roomloop-history-12"
    assert helper_client_id("", "report", pid=1) == "roomloop-report-1"
    assert helper_client_id("a", "probe") != helper_client_id("a", "history")
    long = helper_client_id("x" * 70000, "probe", pid=3)
    assert long.endswith("-probe-3") and len(long.encode()) <= 65535


def test_the_helper_broker_changes_the_client_id_only(tmp_path: Path) -> None:
    site = load_site(site_file(tmp_path, 1883))
    assert site.broker is not None
    helper = helper_broker(site.broker, "probe")
    assert helper.client_id is not None and helper.client_id.startswith("annex-ctrl-probe-")
    assert helper.model_copy(update={"client_id": "annex-ctrl"}) == site.broker


@pytest.mark.needs_mosquitto
async def test_a_probe_does_not_throw_the_running_service_off_the_broker(
    mosquitto: Any, tmp_path: Path
) -> None:
    host, port = mosquitto
    config = site_file(tmp_path, port)
    async with aiomqtt.Client(host, port) as sensor:
        await sensor.publish("bench/hall", '{"air": {"temp": "19.5"}}', qos=1, retain=True)
    service = Service(load_site(config), state_dir=tmp_path / "state", ready_wait_s=0.5)
    stop = asyncio.Event()
    async with status_log(host, port) as statuses:
        task = asyncio.create_task(service.run(stop))
        try:
            await until(lambda: "online" in statuses, 15)
            assert service.session is not None and service.session.connection.connections == 1
            for _ in range(2):
                code, out, err = await probe("-c", str(config), "hall")
                assert code == 0, out + err
            await asyncio.sleep(1.0)  # a takeover would show within the broker's round trip
            assert service.session.connection.connections == 1, "the probe threw the service off"
            assert statuses == ["online"], statuses
            # The payload is shown as the text it is, not as Python bytes.
            assert 'payload      {"air": {"temp": "19.5"}}' in out
            assert "b'" not in out and 'b"' not in out
        finally:
            stop.set()
            await asyncio.wait_for(task, 30)


@pytest.mark.needs_mosquitto
async def test_probe_shows_an_output_state_payload_as_text(mosquitto: Any, tmp_path: Path) -> None:
    host, port = mosquitto
    async with aiomqtt.Client(host, port) as module:
        await module.publish("bench/fan", b"on", qos=1, retain=True)
    code, out, err = await probe("-c", str(site_file(tmp_path, port)), "fan")
    assert code == 0, out + err
    assert "payload      on\n" in out and "state        on" in out
    assert "(on = on, off = off)" in out


async def test_probe_names_an_unreachable_broker_in_our_words(tmp_path: Path) -> None:
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        free = sock.getsockname()[1]
    code, _, err = await probe("-c", str(site_file(tmp_path, free)), "hall")
    assert code == 1 and f"mqtt://127.0.0.1:{free}" in err
    assert "nothing accepts connections" in err and "[Errno" not in err, err


@pytest.mark.needs_mosquitto
async def test_a_lost_broker_is_logged_in_our_words(mosquitto: Any, tmp_path: Path) -> None:
    site = load_site(site_file(tmp_path, mosquitto.port))
    assert site.broker is not None
    connection = BrokerConnection(site.broker, backoff_min_s=0.2, backoff_max_s=0.5)
    with capture_logs() as events:
        task = asyncio.create_task(connection.run(lambda message: None))
        try:
            await asyncio.wait_for(connection.connected.wait(), 10)
            mosquitto.stop()
            await until(lambda: any(e["event"] == "broker.disconnected" for e in events), 15)
        finally:
            task.cancel()
            await asyncio.gather(task, return_exceptions=True)
    lost = [e for e in events if e["event"] == "broker.disconnected"]
    assert lost[0]["reason"] == "the connection to the broker was lost", lost[0]
    assert all("Disconnected during message iteration" not in e["reason"] for e in lost)


@pytest.mark.needs_mosquitto
async def test_two_clients_with_one_client_id_are_named_as_the_likely_cause(
    mosquitto: Any, tmp_path: Path
) -> None:
    """Mosquitto closes the older of two sessions with one client id without a reason code:
    the journal points at the client id, the tug of war is a few folded lines (each short
    session is no recovery: the pause keeps growing), and once the other client is gone the
    session that lasts closes the story with one recovery."""
    site = load_site(site_file(tmp_path, mosquitto.port))
    assert site.broker is not None and site.broker.client_id is not None
    ours, theirs = (
        BrokerConnection(site.broker, backoff_min_s=0.05, backoff_max_s=0.4, short_session_s=1.0)
        for _ in range(2)
    )

    def hinted(events: list[Any]) -> bool:
        return any("another client using client id" in e.get("reason", "") for e in events)

    with capture_logs() as events:
        mine = asyncio.create_task(ours.run(lambda message: None))
        other = None
        try:
            await asyncio.wait_for(ours.connected.wait(), 10)
            other = asyncio.create_task(theirs.run(lambda message: None))
            await until(lambda: hinted(events), 20)
            await until(lambda: ours.connections + theirs.connections >= 20, 20)
            flapping = [e["event"] for e in events]
            other.cancel()
            await asyncio.gather(other, return_exceptions=True)
            await until(lambda: any(e["event"] == "broker.reconnected" for e in events), 20)
            await asyncio.wait_for(ours.connected.wait(), 10)
        finally:
            for task in (mine, other):
                if task is not None:
                    task.cancel()
            await asyncio.gather(mine, *([other] if other else []), return_exceptions=True)
    lost = [e for e in events if e["event"] == "broker.disconnected"]
    assert repr(site.broker.client_id) in next(e["reason"] for e in lost if hinted([e]))
    # 20 sessions or more, but only the first connections and a few folded losses logged
    assert len([n for n in flapping if n.startswith("broker.")]) <= 8, flapping
    assert [e["event"] for e in events].count("broker.reconnected") == 1
