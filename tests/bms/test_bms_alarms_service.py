"""Alarms through the real service: a real mosquitto broker, a pymodbus room server, the face.

A room reads 15 C against a 20 C comfort set point; with a 2 s delay the service raises
``too-cold``, publishes it retained on ``<prefix>/alarm/<zone>/too-cold``, sets the BMS
alarm bit, takes an acknowledgement on ``cmd/ack`` (answered on ``cmd/result``), and clears
the alarm once the room is warm again: logged once on raise and once on clear.
"""

from __future__ import annotations

import asyncio
import json
import time
from pathlib import Path
from typing import Any

import aiomqtt
import pytest
from pymodbus.client import AsyncModbusTcpClient

from conftest import free_port
from roomloop.bms.registers import RegisterMap
from roomloop.config.loader import site_from_data
from roomloop.core.alarms import ALARM_KINDS
from roomloop.service.app import Service

PREFIX = "roomloop/alarm-annex"


def site(modbus_port: int, broker_port: int, bms_port: int) -> dict[str, Any]:
    return {
        "site": {"name": "alarm-annex"},
        "links": [{"name": "rooms", "type": "modbus-tcp", "host": "127.0.0.1",
                   "port": modbus_port, "timeout_s": 0.5, "retries": 0, "poll_interval_s": 1}],
        "broker": {"host": "127.0.0.1", "port": broker_port, "keepalive_s": 5},
        "points": [
            # a jump of 5 K is a test's, not a room's: allow it as plausible
            {"name": "t0", "type": "modbus-input", "link": "rooms", "address": 0, "scale": 0.1,
             "reliability": {"max_rate_k_per_min": 100, "recovery_s": 0}},
            {"name": "relay0", "type": "modbus-output", "link": "rooms", "address": 0},
        ],
        "zones": [{"name": "room0", "inputs": ["t0"], "output": "relay0",
                   "heating": "electric", "tick_s": 1}],
        "bms": {"port": bms_port},
        "alarms": {"delay_s": 2, "sensor_fault_s": 3600},
    }


@pytest.mark.needs_mosquitto
async def test_too_cold_raised_published_acknowledged_cleared(
    mosquitto: Any, modbus_tcp_server: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    host, port = mosquitto
    rooms = await modbus_tcp_server(units=(1,))
    await rooms.set_registers("input", 0, [150])  # 15.0 C
    bms_port = free_port()
    config = site_from_data(site(rooms.port, port, bms_port), "test")
    service = Service(config, state_dir=tmp_path / "state", ready_wait_s=2.0)
    seen: dict[str, dict[str, Any]] = {}
    results: list[dict[str, Any]] = []
    stop = asyncio.Event()
    task = asyncio.create_task(service.run(stop))

    async def wait_for(check: Any, timeout_s: float = 20.0) -> None:
        deadline = time.monotonic() + timeout_s
        while not check():
            assert time.monotonic() < deadline, (seen, results)
            assert not task.done(), task
            await asyncio.sleep(0.05)

    try:
        async with aiomqtt.Client(host, port) as client:
            await client.subscribe(f"{PREFIX}/alarm/#", qos=1)
            await client.subscribe(f"{PREFIX}/zone/room0/cmd/result", qos=1)

            async def listen() -> None:
                async for message in client.messages:
                    payload = json.loads(message.payload)
                    if str(message.topic).endswith("/cmd/result"):
                        results.append(payload)
                    else:
                        seen[str(message.topic)] = payload

            listener = asyncio.create_task(listen())
            try:
                topic = f"{PREFIX}/alarm/room0/too-cold"
                # every kind is published once, inactive, at start
                await wait_for(lambda: len(seen) == len(ALARM_KINDS))
                await wait_for(lambda: seen.get(topic, {}).get("active") is True)
                alarm = seen[topic]
                assert alarm["value"] == 15.0 and alarm["since"] and not alarm["acknowledged"]
                assert "below" in alarm["text"]
                # the BMS alarm bit
                regmap = RegisterMap(config)
                bits = regmap.register("room0", "alarms").address
                bms = AsyncModbusTcpClient("127.0.0.1", port=bms_port, timeout=1, retries=0)
                assert await bms.connect()
                try:
                    reply = await bms.read_holding_registers(bits, count=1, device_id=1)
                    assert reply.registers[0] & 1 == 1
                finally:
                    bms.close()
                # acknowledge: answered like a command, the alarm shows it
                await client.publish(f"{PREFIX}/zone/room0/cmd/ack", "too-cold", qos=1)
                await wait_for(lambda: bool(results))
                assert results[0] == {"field": "ack", "ok": True, "value": "too-cold"}
                await wait_for(lambda: seen[topic]["acknowledged"] is True)
                await client.publish(f"{PREFIX}/zone/room0/cmd/ack", "too-warm", qos=1)
                await wait_for(lambda: len(results) == 2)
                assert results[1]["ok"] is False and "not active" in results[1]["reason"]
                # warm again: cleared
                await rooms.set_registers("input", 0, [200])
                await wait_for(lambda: seen[topic]["active"] is False)
                assert seen[topic]["text"].startswith("cleared")
            finally:
                listener.cancel()
        # retained: a late subscriber sees the last word
        async with aiomqtt.Client(host, port) as late:
            await late.subscribe(f"{PREFIX}/alarm/room0/too-cold", qos=1)
            async with asyncio.timeout(5):
                async for message in late.messages:
                    assert message.retain and json.loads(message.payload)["active"] is False
                    break
    finally:
        stop.set()
        await asyncio.wait_for(task, 30)
    out = capsys.readouterr().out
    assert out.count("alarm.raised") == 1 and out.count("alarm.cleared") == 1
