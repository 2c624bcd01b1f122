"""Commands from the broker: ``<prefix>/zone/<zone>/cmd/<field>``, checked, applied, answered.

A command is a plain payload (``21.5``, ``hold``) or JSON (``21.5``,
``"hold"``, ``{"value": 21.5}``); ``setpoint`` and ``level`` may name the end of
their hold, ``{"value": 21.5, "until": "next-change"}`` (the program's next change),
a time, or ``none`` (no end), and ``hold_until`` takes ``next-change`` too
(docs/topics.md). It is parsed here, from the site's units and
local time into Celsius and POSIX seconds; the control core alone checks it
(limits, words, how far ahead: :mod:`roomloop.core.commands`) as it applies it,
and its refusal is the answer's reason. Whatever the outcome, one answer goes
to ``<prefix>/zone/<zone>/cmd/result``:
``{"field": ..., "ok": true, "value": ...}`` or ``{"field": ..., "ok": false,
"reason": ...}``. A refused command changes nothing.

Retained commands are ignored, whenever they arrive (the session subscribes with
MQTT 5's retain-as-published option, so one published while we are subscribed still
carries its flag): a stale retained message must not reprogram a zone when the service
starts. Each is logged and refused on ``cmd/result``; an empty retained payload (the
broker's deletion of a retained message) is no command and is not answered. Commands
are rate-limited per zone.
"""

from __future__ import annotations

import collections
import datetime as dt
import json
import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Literal
from zoneinfo import ZoneInfo

import structlog

from roomloop.config.models import Zone
from roomloop.core.commands import COMMAND_FIELDS, COOLING_FIELDS, UNSET, UNTIL_FIELDS, Unset
from roomloop.service.publisher import iso
from roomloop.units import from_celsius, to_celsius

log = structlog.get_logger("roomloop.service")

FIELDS = COMMAND_FIELDS + COOLING_FIELDS
"""The fields whose commands are parsed here and applied by the core (``changeover`` and
``cooling_setpoint`` for a zone with a cooling call: the core refuses them for any other);
``ack`` goes to the alarm book (``roomloop.core.commands.command_fields`` lists them all)."""
NEXT_CHANGE = "next-change"
"""The word for "until the program's next change" (``until`` and ``hold_until``)."""
Ends = Literal["next-change", "time", "never"]
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
    until: float | Unset | None = UNSET
    """The end of a ``setpoint`` or ``level`` hold (POSIX seconds, None: never), if given."""
    ends: Ends | None = None
    """How the command's hold ends, when it names an end (``until`` or ``hold_until``)."""


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


def _payload_value(payload: bytes) -> tuple[Any, Any]:
    """The payload's value and its ``until`` (:data:`UNSET` when it has none)."""
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
        return text, UNSET  # a plain payload
    if isinstance(value, dict):
        if "value" not in value or not set(value) <= {"value", "until"}:
            raise Refused(
                'a JSON object payload is {"value": ...}, for setpoint and level '
                'optionally with "until"'
            )
        return value["value"], value.get("until", UNSET)
    return value, UNSET


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


def parse_time(value: Any, tz: ZoneInfo, what: str = "hold_until") -> float | None:
    """A hold's end: ISO 8601 (local to the site without an offset), POSIX seconds, or none;
    ``what`` names it in a refusal."""
    if value is None or (isinstance(value, str) and value.strip().lower() in ("none", "null")):
        return None
    if isinstance(value, str):
        try:
            when = dt.datetime.fromisoformat(value.strip())
        except ValueError:
            try:
                return _number(value, what)
            except Refused:
                raise Refused(
                    f"{what} {value[:40]!r} is not a time (ISO 8601 such as "
                    f"2026-12-24T18:00, POSIX seconds, {NEXT_CHANGE} or none)"
                ) from None
        if when.tzinfo is None:
            when = when.replace(tzinfo=tz)
        try:
            return when.timestamp()
        except (OverflowError, ValueError, OSError):
            raise Refused(f"{what} {value[:40]!r} is out of range") from None
    return _number(value, what)


def parse_end(
    value: Any, tz: ZoneInfo, program_next: Callable[[], float | None], what: str
) -> tuple[float | None, Ends]:
    """An end for a hold: ``next-change`` (the program's next change), a time (as
    :func:`parse_time`) or none; with what kind of end it is."""
    if isinstance(value, str) and value.strip().lower() == NEXT_CHANGE:
        at = program_next()
        if at is None:
            raise Refused(
                f"{what} next-change: the zone's program never changes level; "
                "give a time, or none for a hold without end"
            )
        return at, "next-change"
    at = parse_time(value, tz, what)
    return at, "never" if at is None else "time"


def parse_command(
    zone: Zone,
    field: str,
    payload: bytes,
    *,
    units: str,
    tz: ZoneInfo,
    now: float,
    program_next: Callable[[], float | None] = lambda: None,
) -> Command:
    """Parse one command's payload into the core's terms; :class:`Refused` if it cannot be read.

    Only the payload's form is checked here (size, UTF-8, a number where a number goes,
    a time for ``hold_until`` and ``until``); whether the value is allowed (limits, words,
    how far ahead) is for the core's :func:`~roomloop.core.commands.apply_command` alone.
    ``program_next`` gives the program's next change (POSIX seconds, None: never), what
    ``next-change`` stands for.
    """
    if field not in FIELDS:
        return Command(zone.name, field, None)  # the core refuses it, naming the fields
    value, until_raw = _payload_value(payload)
    until: float | Unset | None = UNSET
    ends: Ends | None = None
    if until_raw is not UNSET:
        if field not in UNTIL_FIELDS:
            raise Refused(f"until goes with {' or '.join(UNTIL_FIELDS)} only")
        until, ends = parse_end(until_raw, tz, program_next, "until")
    if field in ("setpoint", "cooling_setpoint"):
        celsius = to_celsius(_number(value, field), units)
        return Command(zone.name, field, celsius, until, ends)
    if field in ("mode", "level", "changeover"):
        return Command(zone.name, field, value, until, ends)
    at, ends = parse_end(value, tz, program_next, "hold_until")
    return Command(zone.name, field, at, UNSET, ends)


def shown_end(command: Command, tz: ZoneInfo) -> dict[str, Any]:
    """What an answer adds for a command with an end: ``until`` (local ISO 8601, or None)
    and ``ends`` (``next-change``, ``time`` or ``never``); nothing for one without."""
    if command.ends is None:
        return {}
    shown: dict[str, Any] = {"ends": command.ends}
    if command.field != "hold_until":  # (hold_until's value is the time itself)
        until = command.until
        shown["until"] = None if not isinstance(until, float) else _shown_time(until, tz)
    return shown


def _shown_time(posix: float, tz: ZoneInfo) -> Any:
    try:
        return iso(posix, tz)
    except (OverflowError, ValueError, OSError):  # far beyond any date: the core refuses it
        return posix


def shown_value(command: Command, *, units: str, tz: ZoneInfo) -> Any:
    """The accepted value as the user sees it: the site's units, local ISO 8601 time."""
    if command.field in ("setpoint", "cooling_setpoint"):
        return round(from_celsius(float(command.value), units), 2)
    if command.field == "hold_until":
        if command.value is None:
            return None
        return _shown_time(float(command.value), tz)
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
        program_next: Callable[[str, float], float | None] | None = None,
    ) -> None:
        self.prefix = prefix
        self.zones = zones
        self.apply = apply
        self.program_next = program_next
        """``(zone, now)`` -> the zone's program's next change (None: never), for
        ``next-change``; without it a zone's program is taken never to change."""
        self.durability = durability
        """``ok``, or why an applied command cannot be saved now (the state store's status):
        the answer then says the command holds only until a restart."""
        self.units = units
        self.tz = tz
        self.limit = RateLimit(rate_per_min)
        self.refusals: tuple[type[Exception], ...] = (Refused, *refusals)

    def topics(self) -> tuple[str, ...]:
        return (command_filter(self.prefix),)

    def _program_next(self, zone: str, now: float) -> float | None:
        return None if self.program_next is None else self.program_next(zone, now)

    def handle(
        self, topic: str, payload: bytes, *, retained: bool, now: float, monotonic: float
    ) -> Answer | None:
        """Check, apply and answer one message; ``monotonic`` is real time for the rate limit."""
        where = parse_topic(self.prefix, topic)
        if where is None:
            return None
        if retained:
            return self._retained(where, topic, payload, monotonic)
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
                    zone, where.field, payload, units=self.units, tz=self.tz, now=now,
                    program_next=lambda: self._program_next(zone.name, now),
                )
                # Shown before it is applied: a value that cannot be shown is not applied.
                shown = shown_value(command, units=self.units, tz=self.tz)
                end = shown_end(command, self.tz)
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
                answer.update(ok=True, value=shown, **end)
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


    def _retained(
        self, where: CommandTopic, topic: str, payload: bytes, monotonic: float
    ) -> Answer | None:
        """A retained command, delivered at subscription or while subscribed: never applied
        (a stale one must not reprogram a zone at every start), logged and refused. An empty
        retained payload deletes the broker's retained message: it is no command at all."""
        if not payload:
            return None
        key = where.zone if where.zone in self.zones else UNKNOWN_ZONE_KEY
        if not self.limit.allow(key, monotonic):
            return None
        log.info("command.retained_ignored", topic=topic)
        reason = (
            "retained commands are ignored: publish commands without the retain flag "
            "(an empty retained message on this topic deletes the retained one)"
        )
        body = json.dumps({"field": where.field, "ok": False, "reason": reason})
        return Answer(result_topic(self.prefix, where.zone), body)

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
