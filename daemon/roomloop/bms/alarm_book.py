"""The service side of alarms: evaluated after each zone step, published, acknowledged.

:class:`AlarmBook` keeps each zone's :class:`~roomloop.core.alarms.AlarmState`, runs
the pure :func:`~roomloop.core.alarms.evaluate` after every step, logs each raise and
each clear once, and hands the publisher retained messages on
``<prefix>/alarm/<zone>/<kind>``::

    {"zone": "office", "kind": "too-cold", "active": true,
     "since": "2026-12-02T07:10:00+00:00", "value": 17.4,
     "text": "more than 2 K below the set point 20.0 C for 600 s", "acknowledged": false}

Every kind of every zone is published once at start (``active: false`` clears an alarm
a previous run left retained) and again whenever it changes. ``<prefix>/zone/<zone>/cmd/ack``
with a kind (or ``all``) acknowledges; the answer goes to ``cmd/result`` like any
command's. It also keeps what the BMS face shows besides the decision: the alarm bits,
the output read-back, the minutes in fail-safe since local midnight.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, Protocol
from zoneinfo import ZoneInfo

import structlog

from roomloop.bms.registers import ZoneSnapshot
from roomloop.config.models import Site
from roomloop.core.alarms import (
    ALARM_KINDS,
    AckRejected,
    Alarm,
    AlarmEvent,
    AlarmInputs,
    AlarmSettings,
    AlarmState,
    acknowledge,
    evaluate,
)
from roomloop.core.commands import ACK_FIELD
from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs
from roomloop.service.commands import Answer, RateLimit, result_topic
from roomloop.service.publisher import Message, iso
from roomloop.units import from_celsius

log = structlog.get_logger("roomloop.alarm")

TEMPERATURE_KINDS = ("too-cold", "too-warm", "frost-protection")
MAX_ACK_BYTES = 256


def alarm_topic(prefix: str, zone: str, kind: str) -> str:
    return f"{prefix}/alarm/{zone}/{kind}"


@dataclass
class _FailSafeDay:
    day: dt.date | None = None
    minutes: float = 0.0
    last_at: float | None = None
    engaged: bool = False


class AlarmBook:
    """Every zone's alarms, their retained messages and their acknowledgements."""

    def __init__(self, site: Site, prefix: str, tz: ZoneInfo) -> None:
        self.prefix = prefix
        self.tz = tz
        self.units = site.site.units
        self.settings = AlarmSettings.from_config(site.alarms, self.units)
        self.states = {zone.name: AlarmState.initial() for zone in site.zones}
        self.confirmed: dict[str, bool | None] = {zone.name: None for zone in site.zones}
        self._days = {zone.name: _FailSafeDay() for zone in site.zones}
        self._sent: dict[str, str] = {}
        rate = site.broker.command_rate_per_min if site.broker is not None else 30
        self._limit = RateLimit(rate)

    # ------------------------------------------------------------------ evaluation

    def observe(
        self, zone: str, outputs: ZoneOutputs, *, output_confirmed: bool | None, now: float
    ) -> tuple[AlarmEvent, ...]:
        """After a zone step: evaluate its alarms; log raises and clears once each."""
        inputs = AlarmInputs.of(
            temperature=outputs.temperature,
            setpoint=outputs.setpoint,
            mode=outputs.mode,
            reliability=outputs.reliability,
            reason=outputs.reason,
            fail_safe=outputs.fail_safe,
            fail_safe_reason=outputs.fail_safe_reason,
            output_confirmed=output_confirmed,
            warm_setpoint=_warm_setpoint(outputs),
        )
        self.confirmed[zone] = output_confirmed
        self._count_fail_safe(zone, outputs.fail_safe, now)
        self.states[zone], events = evaluate(self.settings, self.states[zone], inputs, now)
        for event in events:
            alarm = event.alarm
            (log.warning if event.raised else log.info)(
                "alarm.raised" if event.raised else "alarm.cleared",
                zone=zone,
                kind=alarm.kind,
                value=self._shown(alarm),
                text=alarm.text,
            )
        return events

    def _count_fail_safe(self, zone: str, engaged: bool, now: float) -> None:
        record = self._days[zone]
        today = dt.datetime.fromtimestamp(now, self.tz).date()
        if record.day != today:
            midnight = dt.datetime.combine(today, dt.time(0), self.tz).timestamp()
            carried = 0.0
            if record.engaged and record.last_at is not None:
                carried = max(0.0, now - max(record.last_at, midnight)) / 60.0
            record.day, record.minutes = today, carried
        elif record.engaged and record.last_at is not None:
            record.minutes += max(0.0, now - record.last_at) / 60.0
        record.last_at, record.engaged = now, engaged

    def bits(self, zone: str) -> int:
        return self.states[zone].bits

    def fail_safe_minutes(self, zone: str) -> float:
        return self._days[zone].minutes

    # ------------------------------------------------------------------ publishing

    def _shown(self, alarm: Alarm) -> Any:
        value = alarm.value
        if alarm.kind in TEMPERATURE_KINDS and isinstance(value, float) and self.units == "F":
            return round(from_celsius(value, "F"), 2)
        return value

    def payload(self, zone: str, alarm: Alarm) -> dict[str, Any]:
        return {
            "zone": zone,
            "kind": alarm.kind,
            "active": alarm.active,
            "since": None if alarm.since is None else iso(alarm.since, self.tz),
            "value": self._shown(alarm),
            "text": alarm.text,
            "acknowledged": alarm.acknowledged,
        }

    def due(self) -> list[Message]:
        """Retained messages whose payload changed since it was last sent."""
        messages = []
        for zone, state in self.states.items():
            for alarm in state.alarms:
                topic = alarm_topic(self.prefix, zone, alarm.kind)
                text = json.dumps(self.payload(zone, alarm))
                if self._sent.get(topic) != text:
                    messages.append(Message(topic, text))
        return messages

    def sent(self, message: Message) -> None:
        if message.topic.startswith(f"{self.prefix}/alarm/"):
            self._sent[message.topic] = message.payload

    def forget_sent(self) -> None:
        self._sent.clear()

    # ------------------------------------------------------------------ acknowledging

    def acknowledge(self, zone: str, kind: str) -> None:
        """Acknowledge ``kind`` (or ``all``) of ``zone``; :class:`AckRejected` says why not."""
        self.states[zone] = acknowledge(self.states[zone], kind)
        log.info("alarm.acknowledged", zone=zone, kind=kind)

    def handle_ack(
        self, topic: str, payload: bytes, *, retained: bool, monotonic: float
    ) -> Answer | None:
        """Answer ``<prefix>/zone/<zone>/cmd/ack``; None for any other topic."""
        head = f"{self.prefix}/zone/"
        if not topic.startswith(head) or not topic.endswith(f"/cmd/{ACK_FIELD}"):
            return None
        zone = topic[len(head) : -len(f"/cmd/{ACK_FIELD}")]
        if zone not in self.states or retained:
            return None
        answer: dict[str, Any] = {"field": ACK_FIELD}
        try:
            if not self._limit.allow(zone, monotonic):
                raise AckRejected(
                    f"too many commands (at most {self._limit.per_minute} a minute)"
                )
            kind = _ack_kind(payload)
            self.acknowledge(zone, kind)
        except AckRejected as exc:
            answer.update(ok=False, reason=exc.reason)
        else:
            answer.update(ok=True, value=kind)
        return Answer(result_topic(self.prefix, zone), json.dumps(answer))


def _ack_kind(payload: bytes) -> str:
    if len(payload) > MAX_ACK_BYTES:
        raise AckRejected("payload too large")
    try:
        text = payload.decode("utf-8").strip()
    except UnicodeDecodeError:
        raise AckRejected("payload is not UTF-8 text") from None
    try:
        value: Any = json.loads(text)
    except (ValueError, RecursionError):
        value = text
    if isinstance(value, dict) and set(value) == {"value"}:
        value = value["value"]
    if not isinstance(value, str) or not value.strip():
        raise AckRejected(f"name an alarm kind ({', '.join(ALARM_KINDS)}) or all")
    return value.strip().lower()


class _Runtime(Protocol):
    @property
    def outputs(self) -> ZoneOutputs | None: ...

    @property
    def state(self) -> ZoneState: ...


class ServiceZones:
    """The face's :class:`~roomloop.bms.face.ZoneDirectory` over the service's zone runtimes."""

    def __init__(self, runtimes: Mapping[str, _Runtime], book: AlarmBook, clock: Any) -> None:
        self.runtimes = runtimes
        self.book = book
        self.clock = clock

    def snapshot(self, zone: str) -> ZoneSnapshot | None:
        runtime = self.runtimes.get(zone)
        if runtime is None or runtime.outputs is None:
            return None
        return ZoneSnapshot(
            runtime.outputs,
            runtime.state,
            float(self.clock()),
            self.book.confirmed.get(zone),
            self.book.bits(zone),
            self.book.fail_safe_minutes(zone),
        )


def _warm_setpoint(outputs: ZoneOutputs) -> float | None:
    """A cooling zone's ``too-warm`` is judged against its cooling set point (None: the heating
    set point, as for every heating-only zone)."""
    cooling = outputs.cooling
    if cooling is None or cooling.changeover == "heat" or cooling.setpoint is None:
        return None
    return cooling.setpoint
