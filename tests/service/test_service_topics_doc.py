"""docs/topics.md against what the service really publishes, in both directions.

The service runs in-process on the virtual clock against a real mosquitto and a pymodbus
server playing the rooms; a test client subscribed to the whole prefix (MQTT 5, retain as
published, so it sees each message's retain flag as sent) records every message while a
scenario walks through the commands. Then:

- every topic published matches a topic documented under "Published", with the documented
  retain flag and payload form, and every documented topic was published;
- the JSON fields published on each topic (nested ones with dots, maps of names with
  ``<name>``) are exactly the fields its table lists;
- a plain payload is never a word standing for "no value" (the convention: empty);
- the commands documented are exactly the ones the service takes.

Two payloads the scenario does not reach are built by the service's own code instead: a
command answer while the state cannot be saved (``durable``, ``warning``), and a heat
source's state (``source/<source>/state``, built by ``core.source_topics``) until the
service runs heat sources itself.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import json
import re
from collections.abc import AsyncIterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import aiomqtt
import pytest
import yaml
from paho.mqtt.subscribeoptions import SubscribeOptions
from service_rooms import RoomPlant, Watcher, running, site_yaml, until

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.core.source import SourceOutputs
from roomloop.core.source_topics import source_state_payload, source_state_topic
from roomloop.service.app import Service
from roomloop.service.commands import FIELDS, CommandHandler, result_topic

DOC = Path(__file__).resolve().parents[2] / "docs" / "topics.md"
PREFIX = "roomloop/test-annex"
START = dt.datetime(2027, 1, 15, 6, 40, tzinfo=dt.UTC)
NO_VALUE_WORDS = {"unknown", "none", "null", "nan", "n/a", "-", "?"}


@dataclass
class DocTopic:
    pattern: str
    section: str
    retained: bool | None = None
    payload: str | None = None
    fields: set[str] = field(default_factory=set)

    def matches(self, topic: str) -> bool:
        regex = re.sub(r"<[^>/]+>", "[^/]+", re.escape(self.pattern).replace(r"\<", "<").replace(
            r"\>", ">"
        ))
        return re.fullmatch(regex, topic) is not None


def read_doc(text: str) -> dict[str, DocTopic]:
    """The topics of docs/topics.md: ``### `topic` `` headings, their ``- retained:`` and
    ``- payload:`` lines and the first column of their field tables."""
    topics: dict[str, DocTopic] = {}
    section = ""
    current: DocTopic | None = None
    for line in text.splitlines():
        if line.startswith("## "):
            section, current = line[3:].strip().lower(), None
            continue
        heading = re.fullmatch(r"### `([^`]+)`\s*", line)
        if heading:
            assert heading.group(1) not in topics, f"{heading.group(1)} documented twice"
            current = topics[heading.group(1)] = DocTopic(heading.group(1), section)
            continue
        if current is None:
            continue
        if line.startswith("- retained: "):
            current.retained = {"yes": True, "no": False}[line.split(": ", 1)[1].strip()]
        elif line.startswith("- payload: ") and current.payload is None:
            current.payload = line.split(": ", 1)[1].strip()
        else:
            row = re.match(r"\| `([^`]+)` \|", line)
            if row:
                current.fields.add(row.group(1))
    return topics


def json_paths(value: dict[str, Any], documented: set[str], prefix: str = "") -> set[str]:
    """Every key path of a JSON object; a map's keys become the documented ``<name>``."""
    out: set[str] = set()
    for key, item in value.items():
        path = f"{prefix}{key}"
        out.add(path)
        if not isinstance(item, dict):
            continue
        names = [f for f in documented if re.fullmatch(re.escape(path) + r"\.<[^>]+>", f)]
        if names:
            out.update(names[0] for _ in item)
        else:
            out |= json_paths(item, documented, path + ".")
    return out


@dataclass
class Seen:
    topic: str
    payload: bytes
    retained: bool


@contextlib.asynccontextmanager
async def recorder(host: str, port: int) -> AsyncIterator[list[Seen]]:
    """Every message under the prefix, with its retain flag as published."""
    seen: list[Seen] = []
    client = aiomqtt.Client(host, port, protocol=aiomqtt.ProtocolVersion.V5)
    async with client:
        await client.subscribe(
            f"{PREFIX}/#", options=SubscribeOptions(qos=1, retainAsPublished=True)
        )

        async def collect() -> None:
            async for message in client.messages:
                seen.append(Seen(str(message.topic), bytes(message.payload), bool(message.retain)))

        task = asyncio.create_task(collect())
        try:
            yield seen
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task


def scenario_site(modbus_port: int, broker_port: int) -> dict[str, Any]:
    """room0 on a program with optimum start; room1, a heat-pump zone (heating, cooling and
    changeover outputs), has an MQTT sensor nobody feeds."""
    data = site_yaml(modbus_port=modbus_port, broker_port=broker_port, zones=2)
    room0 = data["zones"][0]
    room0["program"] = [
        {"days": "all", "at": "07:00", "level": "comfort"},
        {"days": "all", "at": "22:00", "level": "economy"},
    ]
    room0["optimum_start"] = {"enabled": True}
    for point in data["points"]:
        if point["name"] == "t1":
            point.clear()
            point.update(name="t1", type="mqtt-input", topic="test-devices/room1/temperature")
    data["points"] += [
        {"name": "cool1", "type": "modbus-output", "link": "rooms", "address": 10},
        {"name": "valve1", "type": "modbus-output", "link": "rooms", "address": 11},
    ]
    data["zones"][1].update(
        heating="forced-air",
        cooling={"output": "cool1", "setpoints": {"comfort": 24, "standby": 25, "economy": 26}},
        changeover={"mode": "auto", "output": "valve1"},
    )
    return data


async def run_scenario(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> tuple[list[Seen], list[dict[str, Any]]]:
    clock = VirtualClock(start=START.timestamp())
    server = await modbus_tcp_server()
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(scenario_site(server.port, mosquitto.port)))
    service = Service(load_site(path), clock=clock, state_dir=tmp_path / "state")
    async with (
        recorder(mosquitto.host, mosquitto.port) as seen,
        RoomPlant(server, [17.0, 17.0], clock),
        Watcher(mosquitto.host, mosquitto.port, PREFIX, clock=clock) as w,
        running(service),
    ):
        await w.wait_for(lambda: w.state("room0") is not None, 15)
        for field_name, payload in [
            ("level", "economy"),
            ("setpoint", '{"value": 22, "until": "next-change"}'),
            ("hold_until", "2027-01-15T12:00"),
            ("setpoint", "99"),
            ("mode", "auto"),
        ]:
            n = len(w.results)
            await w.command("room0", field_name, payload)
            await w.answer(n)
            await clock.sleep(20)
        for field_name, payload in [("changeover", "cool"), ("cooling_setpoint", "25")]:
            n = len(w.results)
            await w.command("room1", field_name, payload)
            await w.answer(n)
            await clock.sleep(20)
        # room1's sensor never speaks: its fail-safe and sensor alarm come in time.
        await until(clock, lambda: clock.now() > START.timestamp() + 20 * 60, 30 * 60)
        await w.wait_for(lambda: (w.state("room1") or {}).get("fail_safe") is True, 10)
        n = len(w.results)
        await w.command("room1", "ack", "all")
        await w.answer(n)
        await clock.sleep(20)
        results = list(w.results)
    return seen, results


def builder_samples() -> list[Seen]:
    """Payloads the scenario does not reach, built by the service's own code."""
    from roomloop.config.models import Zone

    zone = Zone(name="room0", inputs=["t0"], output="relay0", heating="electric")
    handler = CommandHandler(
        PREFIX, {"room0": zone}, lambda command: None, units="C", tz=ZoneInfo("UTC"),
        rate_per_min=30, durability=lambda: "failed: the state directory is not writable",
    )
    answer = handler.handle(
        f"{PREFIX}/zone/room0/cmd/mode", b"off", retained=False, now=START.timestamp(),
        monotonic=0.0,
    )
    assert answer is not None
    t = START.timestamp()
    source = SourceOutputs(
        enable=True, pump=True, reason="calling", pump_reason="running", calling=("room0",),
        waiting_for="room0", waiting_until=t + 60, lockout="min-off", lockout_until=t + 120,
        running_since=t,
    )
    payload = source_state_payload("boiler", "boiler", source, t)
    return [
        Seen(answer.topic, answer.payload.encode(), False),
        Seen(source_state_topic(PREFIX, "boiler"), json.dumps(payload).encode(), True),
    ]


@pytest.mark.needs_mosquitto
async def test_docs_topics_match_what_the_service_publishes(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    doc = read_doc(DOC.read_text(encoding="utf-8"))
    published = {p: t for p, t in doc.items() if t.section == "published"}
    commands = {p: t for p, t in doc.items() if t.section == "commands"}
    assert published and commands, "docs/topics.md lost its Published or Commands section"

    seen, results = await run_scenario(tmp_path, mosquitto, modbus_tcp_server)
    assert [(r["field"], r["ok"]) for r in results] == [
        ("level", True), ("setpoint", True), ("hold_until", True), ("setpoint", False),
        ("mode", True), ("changeover", True), ("cooling_setpoint", True), ("ack", True),
    ], results
    seen += builder_samples()

    problems: list[str] = []
    fields_seen: dict[str, set[str]] = {p: set() for p in published}
    topics_seen: set[str] = set()
    for message in seen:
        topic = message.topic[len(PREFIX) + 1 :]
        if any(t.matches(topic) for t in commands.values()) and not topic.endswith("/result"):
            continue  # the scenario's own commands
        matching = [t for t in published.values() if t.matches(topic)]
        if len(matching) != 1:
            problems.append(
                f"published {topic!r} matches {len(matching)} documented topics: give it a "
                "### `topic` heading under 'Published' in docs/topics.md"
            )
            continue
        entry = matching[0]
        topics_seen.add(entry.pattern)
        if message.retained is not entry.retained:
            problems.append(f"{topic}: retained={message.retained}, documented {entry.retained}")
        if entry.payload == "JSON":
            body = json.loads(message.payload)
            assert isinstance(body, dict), (topic, message.payload)
            fields_seen[entry.pattern] |= json_paths(body, entry.fields)
        else:
            text = message.payload.decode()
            assert not text.startswith("{"), (topic, text)
            if text.strip().lower() in NO_VALUE_WORDS:
                problems.append(f"{topic}: {text!r} stands for no value; the convention is empty")
    for pattern in sorted(set(published) - topics_seen):
        problems.append(f"documented {pattern!r} was never published")
    for pattern, entry in sorted(published.items()):
        if entry.payload != "JSON":
            continue
        for path in sorted(fields_seen[pattern] - entry.fields):
            problems.append(f"{pattern}: field {path!r} is published but not in its table")
        if pattern in topics_seen:
            for path in sorted(entry.fields - fields_seen[pattern]):
                problems.append(f"{pattern}: field {path!r} is documented but never published")
    problems = list(dict.fromkeys(problems))  # each once, in the order found
    assert not problems, "docs/topics.md and the service disagree:\n" + "\n".join(problems)

    # The commands documented are the ones the service takes (and each was answered ok above).
    names = {p.rsplit("/", 1)[1] for p in commands}
    assert names == {*FIELDS, "ack"}, names
    answered = {r["field"] for r in results if r["ok"]}
    assert answered == names, answered
    assert result_topic(PREFIX, "room0").endswith("/cmd/result")


def test_the_doc_parser_reads_headings_flags_and_fields() -> None:
    # The comparison above is only as good as this reading of the page.
    doc = read_doc(
        "## Published\n### `zone/<zone>/state`\n- retained: yes\n- payload: JSON\n"
        "| field | type |\n|---|---|\n| `output` | object |\n| `output.point` | string |\n"
        "| `reliability.<point>` | word |\n## Commands\n### `zone/<zone>/cmd/mode`\n"
    )
    state = doc["zone/<zone>/state"]
    assert (state.section, state.retained, state.payload) == ("published", True, "JSON")
    assert state.fields == {"output", "output.point", "reliability.<point>"}
    assert state.matches("zone/room0/state") and not state.matches("zone/a/b/state")
    assert doc["zone/<zone>/cmd/mode"].section == "commands"
    paths = json_paths(
        {"output": {"point": "r"}, "reliability": {"t0": "ok", "t1": "stale"}}, state.fields
    )
    assert paths == {"output", "output.point", "reliability", "reliability.<point>"}
