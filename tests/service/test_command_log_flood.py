"""A command flood is answered in full but logged at a bounded rate, with a summary of the rest."""

from __future__ import annotations

import asyncio
import json
from pathlib import Path
from typing import Any

import aiomqtt
import pytest
from structlog.testing import capture_logs

from roomloop.config.loader import load_site
from roomloop.io.eventlog import RateLimitedLog
from roomloop.service.app import Service

SITE = """\
site: {{name: flood-annex}}
links:
  - {{name: bench, type: modbus-tcp, host: 127.0.0.1, port: 1, timeout_s: 0.3, retries: 0}}
broker: {{host: 127.0.0.1, port: {port}, keepalive_s: 5}}
points:
  - {{name: room, type: modbus-input, link: bench, address: 10, scale: 0.1}}
  - {{name: relay, type: modbus-output, link: bench, address: 3}}
zones:
  - {{name: lab, inputs: [room], output: relay, heating: electric}}
"""
PREFIX = "roomloop/flood-annex"


class Recorder:
    def __init__(self) -> None:
        self.calls: list[tuple[str, str, dict[str, Any]]] = []

    def info(self, event: str, **fields: Any) -> None:
        self.calls.append(("info", event, fields))

    def warning(self, event: str, **fields: Any) -> None:
        self.calls.append(("warning", event, fields))


def test_routine_events_are_logged_up_to_the_burst_then_summarised() -> None:
    recorder = Recorder()
    limiter = RateLimitedLog(recorder, interval_s=60.0, burst=3)
    logged = [limiter.event("command", "command.answered", 100.0 + i * 0.01, n=i)
              for i in range(1500)]
    assert logged[:3] == [True, True, True] and not any(logged[3:])
    assert [c[2]["n"] for c in recorder.calls] == [0, 1, 2]
    # the first one after the window says how many were left out
    assert limiter.event("command", "command.answered", 161.0, n=9999)
    level, event, fields = recorder.calls[-1]
    assert (level, event) == ("info", "command.answered")
    assert fields["suppressed"] == 1497 and fields["suppressed_in_s"] == 60.0
    # ... and a quiet window starts without a summary
    assert limiter.event("command", "command.answered", 500.0, n=1)
    assert "suppressed" not in recorder.calls[-1][2]
    # other keys and the warning path are untouched
    assert limiter.problem("t1", "modbus.read_failed", 500.0)
    assert recorder.calls[-1][0] == "warning"


@pytest.mark.needs_mosquitto
async def test_a_flood_of_commands_is_answered_in_full_and_logged_at_most_30_a_minute(
    mosquitto: Any, tmp_path: Path
) -> None:
    host, port = mosquitto
    config = tmp_path / "site.yaml"
    config.write_text(SITE.format(port=port))
    service = Service(load_site(config), state_dir=tmp_path / "state", ready_wait_s=0.5)
    stop = asyncio.Event()
    answers: list[dict[str, Any]] = []
    with capture_logs() as events:
        task = asyncio.create_task(service.run(stop))
        try:
            async with aiomqtt.Client(host, port) as client:
                await client.subscribe(f"{PREFIX}/#", qos=1)

                async def online() -> None:
                    async for message in client.messages:
                        topic, payload = str(message.topic), message.payload
                        if topic == f"{PREFIX}/status" and payload == b"online":
                            return

                await asyncio.wait_for(online(), 15)
                for i in range(300):
                    await client.publish(f"{PREFIX}/zone/lab/cmd/colour", f"blue-{i}", qos=0)

                async def collect() -> None:
                    async for message in client.messages:
                        if str(message.topic).endswith("/cmd/result"):
                            answers.append(json.loads(bytes(message.payload)))
                            if len(answers) == 300:
                                return

                await asyncio.wait_for(collect(), 30)
        finally:
            stop.set()
            await asyncio.wait_for(task, 30)
    assert len(answers) == 300 and all(a["ok"] is False for a in answers)
    logged = [e for e in events if e["event"] == "command.answered"]
    assert 1 <= len(logged) <= 30, len(logged)
