"""``roomloop demo --broker HOST:PORT`` publishes like ``roomloop run``: a real mosquitto."""

from __future__ import annotations

import asyncio
import json
import os
import subprocess
import sys
from typing import Any

import aiomqtt
import pytest

pytestmark = [pytest.mark.needs_mosquitto]

PREFIX = "roomloop/quillby-green-hall"
ZONES = ("small-hall", "meeting-room", "kitchen")


SOURCE = f"{PREFIX}/source/boiler/state"
WANTED = {f"{PREFIX}/status", SOURCE, *(f"{PREFIX}/zone/{zone}/state" for zone in ZONES)}


async def _retained(host: str, port: int) -> dict[str, bytes]:
    """The retained messages under the demo's prefix, until the status and every zone's
    state are in (bounded: whatever came within 10 s otherwise)."""
    got: dict[str, bytes] = {}
    async with aiomqtt.Client(host, port) as client:
        await client.subscribe(f"{PREFIX}/#", qos=1)
        try:
            async with asyncio.timeout(10.0):
                async for message in client.messages:
                    payload = message.payload
                    got[str(message.topic)] = (
                        payload if isinstance(payload, bytes) else str(payload).encode()
                    )
                    if set(got) >= WANTED:
                        break
        except TimeoutError:
            pass
    return got


async def test_demo_publishes_to_the_broker(mosquitto: Any) -> None:
    host, port = mosquitto
    env = dict(os.environ, PYTHONUNBUFFERED="1", ROOMLOOP_CLOCK="virtual")
    process = await asyncio.create_subprocess_exec(
        sys.executable,
        "-m",
        "roomloop",
        "demo",
        "--hours",
        "1",
        "--speed",
        "600",
        "--broker",
        f"{host}:{port}",
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        env=env,
    )
    out, err = await asyncio.wait_for(process.communicate(), 60.0)
    assert process.returncode == 0, out.decode() + err.decode()
    assert f"publishing to the broker at {host}:{port}" in out.decode()
    retained = await _retained(host, port)
    seen = {topic: payload[:80] for topic, payload in retained.items()}
    assert retained.get(f"{PREFIX}/status") == b"offline", (seen, out.decode()[-3000:])
    for zone in ZONES:
        state = json.loads(retained[f"{PREFIX}/zone/{zone}/state"])
        assert state["setpoint"] == pytest.approx(20.0)  # comfort after the program's switch
        assert state["level"] == "comfort"
    # the shared boiler publishes its own state; it serves the floor and the radiators only
    boiler = json.loads(retained[SOURCE])
    assert boiler["source"] == "boiler" and boiler["kind"] == "boiler"
    assert set(boiler["calling"]) <= {"small-hall", "meeting-room"}
