"""Remote zones across two bridged mosquitto brokers on loopback, with real processes.

Broker 1 carries site ``north``: a stand-in for its daemon (a separate Python process that
publishes exactly what ``roomloop run`` publishes, with the publisher's own functions, and the
same last will). Broker 2, bridged to broker 1 by a test-only mosquitto bridge, carries the
source's side: a client that hears the remote zone through ``RemoteTopics`` / ``RemoteBook``
and steps ``SourceLogic``. The demand crosses the bridge; the stand-in killed with SIGKILL has
its will (``offline``) cross it too, and the source applies its stale-zone policy; restarted,
its demand is fresh again.
"""

from __future__ import annotations

import asyncio
import select
import shutil
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import aiomqtt
import pytest

from conftest import LOOPBACK, MosquittoBroker, free_port, wait_listening
from roomloop.core.source import SourceInputs, SourceLogic, SourceSettings
from roomloop.core.source_topics import RemoteBook, RemoteTopics

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]

ZONE = "north/office"

STAND_IN = r"""
import asyncio, json, sys
from zoneinfo import ZoneInfo
import aiomqtt
from roomloop.core.types import ZoneOutputs
from roomloop.service.publisher import (
    ONLINE, OFFLINE, ZoneView, field_topic, plain_fields, state_payload, state_topic, status_topic,
)

PREFIX = "roomloop/north"

async def main(port: int, demand: bool) -> None:
    will = aiomqtt.Will(status_topic(PREFIX), OFFLINE, qos=1, retain=True)
    async with aiomqtt.Client("127.0.0.1", port, will=will, keepalive=5) as client:
        await client.publish(status_topic(PREFIX), ONLINE, qos=1, retain=True)
        while True:
            outputs = ZoneOutputs(demand=demand, reason="cut-in", temperature=19.0, setpoint=20.0,
                                  level="comfort", mode="auto", anticipator_k=0.0, droop_k=0.0)
            view = ZoneView(zone="office", outputs=outputs, at=0.0, output_point="valve")
            await client.publish(state_topic(PREFIX, "office"),
                                 json.dumps(state_payload(view, units="C", tz=ZoneInfo("UTC"))),
                                 qos=1, retain=True)
            fields = plain_fields(view, units="C")
            await client.publish(field_topic(PREFIX, "office", "demand"), fields["demand"],
                                 qos=1, retain=True)
            print("published", flush=True)
            await asyncio.sleep(0.5)

asyncio.run(main(int(sys.argv[1]), sys.argv[2] == "true"))
"""


@pytest.fixture
def bridged(tmp_path: Path) -> Iterator[tuple[MosquittoBroker, int]]:
    """Broker 1 (the zones' side) and broker 2 bridged to it (the source's side)."""
    if shutil.which("mosquitto") is None:
        pytest.skip("mosquitto is not installed (apt install mosquitto)")
    first = MosquittoBroker()
    first.start()
    port = free_port()
    config = tmp_path / "bridge.conf"
    config.write_text(
        f"listener {port} {LOOPBACK}\n"
        "allow_anonymous true\n"
        "connection north\n"
        f"address {LOOPBACK}:{first.port}\n"
        "topic roomloop/north/# in 1\n"
        "cleansession true\n"
        "restart_timeout 1\n"
    )
    second = subprocess.Popen(
        ["mosquitto", "-c", str(config)], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
    )
    try:
        wait_listening(LOOPBACK, port)
        yield first, port
    finally:
        second.terminate()
        try:
            second.wait(timeout=5)
        except subprocess.TimeoutExpired:
            second.kill()
            second.wait(timeout=5)
        first.stop()


def _stand_in(port: int, demand: bool) -> subprocess.Popen[str]:
    process = subprocess.Popen(
        [sys.executable, "-c", STAND_IN, str(port), "true" if demand else "false"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    assert process.stdout is not None
    ready, _, _ = select.select([process.stdout], [], [], 20.0)  # bounded wait
    if not ready:
        process.kill()
        process.wait(timeout=5)
        raise AssertionError("the stand-in published nothing within 20 s")
    line = process.stdout.readline()
    assert line.strip() == "published", process.stderr.read() if process.stderr else ""
    return process


async def _until(client: aiomqtt.Client, book: list[RemoteBook], topics: RemoteTopics,
                 holds: Any, timeout_s: float = 20.0) -> None:
    deadline = time.monotonic() + timeout_s
    while not holds(book[0]):
        left = deadline - time.monotonic()
        assert left > 0, f"timed out; book {book[0]}"
        try:
            message = await asyncio.wait_for(anext(client.messages), timeout=left)
        except TimeoutError:
            continue
        payload = message.payload if isinstance(message.payload, bytes | str) else b""
        book[0] = book[0].heard(topics, str(message.topic), payload, time.time())


async def test_demand_and_last_will_cross_the_bridge(
    bridged: tuple[MosquittoBroker, int],
) -> None:
    first, second_port = bridged
    settings = SourceSettings(name="boiler", zones=(ZONE,), valve_opening_s=0, min_off_s=0,
                              stale_policy="assume-calling")
    logic = SourceLogic(settings)
    topics = RemoteTopics.for_zones(settings.zones)
    book = [RemoteBook()]
    stand_in = _stand_in(first.port, demand=False)
    try:
        async with aiomqtt.Client(LOOPBACK, second_port) as client:
            for topic in topics.subscriptions:
                await client.subscribe(topic, qos=1)
            await _until(client, book, topics,
                         lambda b: b.online.get("north") and ZONE in b.zones)
            state = logic.initial_state(time.time() - 3600)
            now = time.time()
            state, out = logic.step(state, SourceInputs(book[0].demands([ZONE])), now)
            assert out.stale == () and out.calling == () and not out.enable

            stand_in.kill()  # SIGKILL: no clean disconnect, so broker 1 sends the will
            stand_in.wait(timeout=5)
            await _until(client, book, topics, lambda b: b.online.get("north") is False)
            state, out = logic.step(state, SourceInputs(book[0].demands([ZONE])), time.time())
            assert out.stale == (ZONE,) and out.calling == (ZONE,)  # assume-calling
            assert out.enable

            stand_in = _stand_in(first.port, demand=True)  # back, and calling
            await _until(client, book, topics,
                         lambda b: b.online.get("north") and b.zones[ZONE].calling is True)
            state, out = logic.step(state, SourceInputs(book[0].demands([ZONE])), time.time())
            assert out.stale == () and out.calling == (ZONE,) and out.enable
    finally:
        stand_in.kill()
        stand_in.wait(timeout=5)
