"""The refusal of a command on an unknown field names exactly the fields a zone takes.

Real parts: mosquitto, a pymodbus TCP server playing the room, the service in-process on a
virtual clock. The candidates are the command topics docs/topics.md describes and a few
that are none; each is sent with a payload it could take, and it is taken (the field
known, whatever the value's fate) unless the answer refuses the field itself: an unknown
field, or a cooling field in a zone without a cooling call.
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, Watcher, running, site_yaml

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.service.app import Service

pytestmark = pytest.mark.needs_mosquitto

PREFIX = "roomloop/test-annex"
TOPICS_DOC = Path(__file__).resolve().parents[2] / "docs" / "topics.md"
PAYLOADS = {
    "setpoint": "21", "mode": "auto", "level": "comfort", "hold_until": "none",
    "changeover": "heat", "cooling_setpoint": "25", "ack": "all",
}
NOT_FIELDS = ["bogus", "Setpoint", "acknowledge", "hold", "until"]
NOT_TAKEN = ("unknown field", "this zone has no cooling call")
"""The refusals of a field itself (any other answer is about its value)."""


def documented_fields() -> list[str]:
    text = TOPICS_DOC.read_text(encoding="utf-8")
    fields = re.findall(r"^### `zone/<zone>/cmd/([a-z_]+)`", text, flags=re.MULTILINE)
    assert "setpoint" in fields and "ack" in fields, fields
    return [f for f in fields if f != "result"]


def site(tmp_path: Path, broker_port: int, modbus_port: int, *, cooling: bool) -> Any:
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port)
    if cooling:
        data["points"].append(
            {"name": "cool0", "type": "modbus-output", "link": "rooms", "address": 5}
        )
        data["zones"][0].update(
            heating="forced-air",
            cooling={"output": "cool0", "type": "direct-expansion",
                     "setpoints": {"comfort": 24, "standby": 25, "economy": 26}},
            changeover={"mode": "auto"},
        )
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


@pytest.mark.parametrize("cooling", [False, True])
async def test_the_unknown_field_answer_lists_every_field_taken_and_no_other(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any, cooling: bool
) -> None:
    clock = VirtualClock()
    server = await modbus_tcp_server()
    service = Service(
        site(tmp_path, mosquitto.port, server.port, cooling=cooling),
        clock=clock, state_dir=tmp_path / "state",
    )
    async with (
        RoomPlant(server, [21.0], clock),
        Watcher(mosquitto.host, mosquitto.port, PREFIX, clock=clock) as w,
        running(service),
    ):
        await w.wait_for(lambda: w.state() is not None, 15)
        answers: dict[str, dict[str, Any]] = {}
        for field in [*documented_fields(), *NOT_FIELDS]:
            n = len(w.results)
            await w.command("room0", field, PAYLOADS.get(field, "1"))
            answers[field] = await w.answer(n)
            await clock.sleep(3.0)  # within the zone's command rate
    unknown = {f for f, a in answers.items() if a.get("reason", "").startswith(NOT_TAKEN)}
    taken = [f for f in answers if f not in unknown]
    assert unknown >= set(NOT_FIELDS), answers
    listed = answers["bogus"]["reason"].split("use one of ", 1)[1].split(", ")
    assert sorted(listed) == sorted(taken), (listed, answers)
    assert ("changeover" in listed) is cooling
    assert "ack" in listed
    # the zone's retained description offers the same commands
    description = json.loads(w.latest[f"{PREFIX}/zone/room0/description"])
    assert description["commands"] == listed
