"""Commands from the broker: ``<prefix>/zone/<zone>/cmd/<field>``, checked, applied, answered.

A command is a plain payload (``21.5``, ``hold``) or JSON (``21.5``,
``"hold"``, ``{"value": 21.5}``). It is parsed here, from the site's units and
local time into Celsius and POSIX seconds; the control core alone checks it
(limits, words, how far ahead: :mod:`roomloop.core.commands`) as it applies it,
and its refusal is the answer's reason. Whatever the outcome, one answer goes
to ``<prefix>/zone/<zone>/cmd/result``:
``{"field": ..., "ok": true, "value": ...}`` or ``{"field": ..., "ok": false,
"reason": ...}``. A refused command changes nothing.

Retained commands are ignored: a stale retained message must not reprogram a
zone when the service starts. Commands are rate-limited per zone.
"""

from __future__ import annotations

import collections
import datetime as dt
import json
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any
from zoneinfo import ZoneInfo

import structlog

from roomloop.config.models import Zone
from roomloop.service.publisher import iso
from roomloop.units import from_celsius, to_celsius

log = structlog.get_logger("roomloop.service")

FIELDS = ("setpoint", "mode", "level", "hold_until", "changeover", "cooling_setpoint")
"""The command fields (``changeover`` and ``cooling_setpoint`` for a zone with a cooling call:
the core refuses them for any other)."""
MAX_PAYLOAD_BYTES = 1024
RESULT = "result"


class Refused(Exception):
    """A command that is not carried out; the message is the reason sent back."""


@dataclass(frozen=True, slots=True)
class Command:
    """A parsed command: ``value`` in the controller's terms (Celsius, POSIX seconds)."""

    zone: str
    field: str
    value: Any


@dataclass(frozen=True, slots=True)
class CommandTopic:
    zone: str
    field: str


UNKNOWN_ZONE_KEY = "\x00unknown-zone"
"""The rate limit's key for commands to zones the site does not have (no zone has this name)."""


def command_filter(prefix: str) -> str:
    """The subscription that catches every zone's commands."""
    return f"{prefix}/zone/+/cmd/+"


def result_topic(prefix: str, zone: str) -> str:
    return f"{prefix}/zone/{zone}/cmd/{RESULT}"


def parse_topic(prefix: str, topic: str) -> CommandTopic | None:
    """The zone and field of a command topic; None for any other topic (our own answers too)."""
    head = f"{prefix}/zone/"
    if not topic.startswith(head):
        return None
    parts = topic[len(head) :].split("/")
    if len(parts) != 3 or parts[1] != "cmd" or not parts[0] or parts[2] == RESULT:
        return None
    return CommandTopic(parts[0], parts[2])


def _payload_value(payload: bytes) -> Any:
    if len(payload) > MAX_PAYLOAD_BYTES:
        raise Refused(f"payload of {len(payload)} bytes is too large")
    try:
        text = payload.decode("utf-8").strip()
    except UnicodeDecodeError:
        raise Refused("payload is not UTF-8 text") from None
    if not text:
        raise Refused("empty payload")
    try:
        value = json.loads(text)
    except (ValueError, RecursionError):
        return text  # a plain payload
    if isinstance(value, dict):
        if set(value) != {"value"}:
            raise Refused('a JSON object payload is {"value": ...} and nothing else')
        value = value["value"]
    return value


def _number(value: Any, what: str) -> float:
    if isinstance(value, bool) or value is None:
        raise Refused(f"{what} must be a number, not {json.dumps(value)}")
    if isinstance(value, str):
        try:
            value = float(value)
        except ValueError:
            raise Refused(f"{what} must be a number, not {value[:40]!r}") from None
    if not isinstance(value, int | float):
        raise Refused(f"{what} must be a number, not a {type(value).__name__}")
    try:
        number = float(value)
    except OverflowError:  # a JSON integer of hundreds of digits
        raise Refused(f"{what} is far too large") from None
    if not math.isfinite(number):
        raise Refused(f"{what} must be a finite number")
    return number


def parse_time(value: Any, tz: ZoneInfo) -> float | None:
    """``hold_until``: ISO 8601 (local to the site without an offset), POSIX seconds, or none."""
    if value is None or (isinstance(value, str) and value.strip().lower() in ("none", "null")):
        return None
    if isinstance(value, str):
        try:
            when = dt.datetime.fromisoformat(value.strip())
        except ValueError:
            try:
                return _number(value, "hold_until")
            except Refused:
                raise Refused(
                    f"hold_until {value[:40]!r} is not a time (ISO 8601 such as "
                    "2026-12-24T18:00, POSIX seconds, or none)"
                ) from None
        if when.tzinfo is None:
            when = when.replace(tzinfo=tz)
        try:
            return when.timestamp()
        except (OverflowError, ValueError, OSError):
            raise Refused(f"hold_until {value[:40]!r} is out of range") from None
    return _number(value, "hold_until")


def parse_command(
    zone: Zone, field: str, payload: bytes, *, units: str, tz: ZoneInfo, now: float
) -> Command:
    """Parse one command's payload into the core's terms; :class:`Refused` if it cannot be read.

    Only the payload's form is checked here (size, UTF-8, a number where a number goes,
    a time for ``hold_until``); whether the value is allowed (limits, words, how far
    ahead) is for the core's :func:`~roomloop.core.commands.apply_command` alone.
    """
    if field not in FIELDS:
        return Command(zone.name, field, None)  # the core refuses it, naming the fields
    value = _payload_value(payload)
    if field in ("setpoint", "cooling_setpoint"):
        return Command(zone.name, field, to_celsius(_number(value, field), units))
    if field in ("mode", "level", "changeover"):
        return Command(zone.name, field, value)
    return Command(zone.name, field, parse_time(value, tz))


def shown_value(command: Command, *, units: str, tz: ZoneInfo) -> Any:
    """The accepted value as the user sees it: the site's units, local ISO 8601 time."""
    if command.field in ("setpoint", "cooling_setpoint"):
        return round(from_celsius(float(command.value), units), 2)
    if command.field == "hold_until":
        if command.value is None:
            return None
        try:
            return iso(float(command.value), tz)
        except (OverflowError, ValueError, OSError):  # far beyond any date: the core refuses it
            return float(command.value)
    if isinstance(command.value, str):
        return command.value.strip().lower()  # as the core reads a word
    return command.value


class RateLimit:
    """At most ``per_minute`` commands per zone in any 60 s window (refused ones count too)."""

    def __init__(self, per_minute: int) -> None:
        self.per_minute = per_minute
        self._seen: dict[str, collections.deque[float]] = {}

    def allow(self, zone: str, now: float) -> bool:
        seen = self._seen.setdefault(zone, collections.deque())
        while seen and now - seen[0] >= 60.0:
            seen.popleft()
        if len(seen) >= self.per_minute:
            return False
        seen.append(now)
        return True


@dataclass(frozen=True, slots=True)
class Answer:
    topic: str
    payload: str


Apply = Callable[[Command], Any]
"""Hands a checked command to its zone; raises :class:`Refused` (or the core's refusal)."""


class CommandHandler:
    """Turns one inbound message into at most one answer; never raises, whatever arrives."""

    def __init__(
        self,
        prefix: str,
        zones: dict[str, Zone],
        apply: Apply,
        *,
        units: str,
        tz: ZoneInfo,
        rate_per_min: int,
        refusals: tuple[type[Exception], ...] = (),
        durability: Callable[[], str] | None = None,
    ) -> None:
        self.prefix = prefix
        self.zones = zones
        self.apply = apply
        self.durability = durability
        """``ok``, or why an applied command cannot be saved now (the state store's status):
        the answer then says the command holds only until a restart."""
        self.units = units
        self.tz = tz
        self.limit = RateLimit(rate_per_min)
        self.refusals: tuple[type[Exception], ...] = (Refused, *refusals)

    def topics(self) -> tuple[str, ...]:
        return (command_filter(self.prefix),)

    def handle(
        self, topic: str, payload: bytes, *, retained: bool, now: float, monotonic: float
    ) -> Answer | None:
        """Check, apply and answer one message; ``monotonic`` is real time for the rate limit."""
        where = parse_topic(self.prefix, topic)
        if where is None or retained:
            return None
        zone = self.zones.get(where.zone)
        if zone is None:
            return self._unknown_zone(where, monotonic)
        answer: dict[str, Any] = {"field": where.field}
        if not self.limit.allow(zone.name, monotonic):
            answer.update(
                ok=False, reason=f"too many commands (at most {self.limit.per_minute} a minute)"
            )
        else:
            try:
                command = parse_command(
                    zone, where.field, payload, units=self.units, tz=self.tz, now=now
                )
                # Shown before it is applied: a value that cannot be shown is not applied.
                shown = shown_value(command, units=self.units, tz=self.tz)
                self.apply(command)
            except self.refusals as exc:
                answer.update(ok=False, reason=_reason(exc))
            except Exception as exc:  # a bug of ours: answered, logged, never fatal to the session
                log.exception(
                    "command.internal_error",
                    zone=zone.name,
                    field=where.field,
                    error=str(exc) or type(exc).__name__,
                )
                answer.update(ok=False, reason="internal error")
            else:
                answer.update(ok=True, value=shown)
                status = "ok" if self.durability is None else self.durability()
                if status != "ok":
                    answer.update(
                        durable=False,
                        warning=(
                            "applied, but the zone state cannot be saved now (persistence "
                            f"{status}): it holds until a restart; saving is retried"
                        ),
                    )
        return Answer(result_topic(self.prefix, zone.name), json.dumps(answer))


    def _unknown_zone(self, where: CommandTopic, monotonic: float) -> Answer | None:
        """A command for a zone this site does not have: refused on that zone's result topic
        (a dashboard with a typo in the zone name learns it), logged; one rate limit for all
        unknown names, so a flood of made-up names gets no answer and keeps no memory."""
        if not self.limit.allow(UNKNOWN_ZONE_KEY, monotonic):
            return None
        known = ", ".join(sorted(self.zones))
        reason = f"no zone named {where.zone[:64]!r} on this site (zones: {known})"
        log.warning("command.unknown_zone", zone=where.zone[:64], field=where.field)
        payload = json.dumps({"field": where.field, "ok": False, "reason": reason})
        return Answer(result_topic(self.prefix, where.zone), payload)


def _reason(exc: Exception) -> str:
    """The words of a refusal (the core's ``CommandRejected`` keeps them in ``reason``)."""
    reason = getattr(exc, "reason", None)
    return str(reason) if reason else (str(exc) or type(exc).__name__)
