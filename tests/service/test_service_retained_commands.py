"""Every retained command is ignored, whenever it arrives, and the sender is told why.

With MQTT 3.1.1 a broker delivers a message to a client already subscribed with the
retain flag cleared (MQTT 3.1.1, section 3.3.1.3), so a retained command published while
the service runs looked like a fresh one and was applied. The service speaks MQTT 5 and
subscribes with the retain-as-published option (MQTT 5.0, section 3.8.3.1), which
mosquitto supports: the flag arrives as the sender set it.

Real parts: mosquitto, a pymodbus server playing the room, the service in-process on
the virtual clock.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import aiomqtt
import pytest
import yaml
from service_rooms import RoomPlant, Watcher, running, site_yaml
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.service.app import Service

PREFIX = "roomloop/test-annex"
TOPIC = f"{PREFIX}/zone/room0/cmd/setpoint"


@pytest.mark.needs_mosquitto
async def test_retained_commands_before_and_during_the_run_are_ignored_and_answered(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(site_yaml(modbus_port=server.port, broker_port=mosquitto.port)))
    service = Service(load_site(path), clock=clock, state_dir=tmp_path / "state")
    # Left retained on the broker before the service starts (a dashboard's mistake).
    async with aiomqtt.Client(mosquitto.host, mosquitto.port) as client:
        await client.publish(TOPIC, "24", qos=1, retain=True)
    with capture_logs() as events:
        async with (
            RoomPlant(server, [19.0], clock),
            Watcher(mosquitto.host, mosquitto.port, PREFIX, clock=clock) as w,
            running(service),
        ):
            await w.wait_for(lambda: len(w.results) >= 1, 15)
            first = w.results[0]
            assert first["ok"] is False and "retained" in first["reason"], first
            await w.wait_for(lambda: w.state() is not None, 15)
            assert service.zones["room0"].state.mode == "auto"

            # Published retained while the service is subscribed: ignored just the same.
            n = len(w.results)
            await w.command("room0", "setpoint", "23", retain=True)
            answer = await w.answer(n)
            assert answer["ok"] is False and "retained" in answer["reason"], answer
            assert service.zones["room0"].state.mode == "auto"

            # Deleting the retained message (an empty retained payload) is not a command.
            n = len(w.results)
            await w.command("room0", "setpoint", "", retain=True)
            # ... and a plain command still works, and is the next answer.
            await w.command("room0", "setpoint", "22")
            answer = await w.answer(n)
            assert answer == {"field": "setpoint", "ok": True, "value": 22.0}, answer
            state = service.zones["room0"].state
            assert (state.mode, state.hold_setpoint) == ("hold", 22.0)
    ignored = [e for e in events if e["event"] == "command.retained_ignored"]
    assert [e["topic"] for e in ignored] == [TOPIC, TOPIC], ignored
