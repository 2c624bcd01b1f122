"""A heat source's MQTT topics as pure functions: what it publishes, what it hears.

Naming. A source serves local zones (``office``) and remote ones written ``SITE/ZONE``:
the zone ``ZONE`` of the roomloop site named ``SITE`` on the same broker (or a bridged
one). A site publishes under its topic prefix, ``roomloop/<site>`` unless its broker
section sets another; a source that serves zones of a site with its own prefix names it in
``remote_prefixes``. So ``north-wing/office`` is heard on

- ``<prefix of north-wing>/zone/office/demand``: the retained plain ``true`` / ``false`` every
  zone publishes when its demand changes (the value);
- ``<prefix of north-wing>/zone/office/state``: the retained state JSON, re-sent at least every
  ``publish_interval_s`` of that site (the heartbeat; its ``demand`` and ``reason`` count too);
- ``<prefix of north-wing>/status``: ``online`` / ``offline`` (retained; ``offline`` is the
  remote daemon's last will, so a killed daemon turns its zones stale at once).

The source publishes its retained JSON state on ``<own prefix>/source/<name>/state``.

:class:`RemoteBook` is what the service has heard, updated per message with
:meth:`RemoteBook.heard` (any order, any repetition: the latest message wins, so a demand
that flips within one tick reaches the step only as its last value) and read per tick
with :meth:`RemoteBook.demands`. Time is an argument; nothing here does I/O.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any, Literal

from .source import SourceOutputs, ZoneDemand

TopicKind = Literal["demand", "state", "status"]


def source_state_topic(prefix: str, source: str) -> str:
    return f"{prefix}/source/{source}/state"


def split_served(text: str) -> tuple[str | None, str]:
    """``"office"`` -> ``(None, "office")``; ``"north-wing/office"`` -> ``("north-wing", ...)``."""
    if "/" in text:
        site, zone = text.split("/", 1)
        return site, zone
    return None, text


def remote_prefix(site: str, prefixes: Mapping[str, str] | None = None) -> str:
    """The topic prefix of a remote site: as named in ``remote_prefixes``, else the default."""
    return (prefixes or {}).get(site, f"roomloop/{site}")


# --------------------------------------------------------------------------- parsing

_TRUE = ("true", "1", "on")
_FALSE = ("false", "0", "off")


def _text(payload: bytes | bytearray | str) -> str | None:
    if isinstance(payload, bytes | bytearray):
        try:
            return payload.decode("utf-8").strip()
        except UnicodeDecodeError:
            return None
    return payload.strip()


def parse_demand(payload: bytes | bytearray | str) -> bool | None:
    """A zone's plain ``demand``: ``true`` / ``false`` (as published; ``1``/``0``, ``on``/``off``
    accepted); anything else, an empty payload (a retained message deleted) included, is None."""
    text = _text(payload)
    if text is None:
        return None
    text = text.lower()
    if text in _TRUE:
        return True
    if text in _FALSE:
        return False
    return None


def parse_status(payload: bytes | bytearray | str) -> bool | None:
    """A site's ``status``: ``online`` -> True, ``offline`` -> False, anything else None."""
    text = _text(payload)
    if text == "online":
        return True
    if text == "offline":
        return False
    return None


def parse_zone_state(payload: bytes | bytearray | str) -> tuple[bool, bool] | None:
    """A zone's state JSON as ``(demand, protection)``; None when it is not one."""
    text = _text(payload)
    if not text:
        return None
    try:
        data = json.loads(text)
    except ValueError:
        return None
    if not isinstance(data, dict) or not isinstance(data.get("demand"), bool):
        return None
    return data["demand"], data.get("reason") == "protection"


# --------------------------------------------------------------------------- hearing


@dataclass(frozen=True, slots=True)
class RemoteTopics:
    """Which topic belongs to which remote zone or site, for the zones one source serves."""

    by_topic: Mapping[str, tuple[TopicKind, str]]
    """topic -> (kind, key): key is ``SITE/ZONE`` for demand and state, ``SITE`` for status."""

    @classmethod
    def for_zones(
        cls, zones: Iterable[str], prefixes: Mapping[str, str] | None = None
    ) -> RemoteTopics:
        by_topic: dict[str, tuple[TopicKind, str]] = {}
        for text in zones:
            site, zone = split_served(text)
            if site is None:
                continue
            prefix = remote_prefix(site, prefixes)
            by_topic[f"{prefix}/zone/{zone}/demand"] = ("demand", text)
            by_topic[f"{prefix}/zone/{zone}/state"] = ("state", text)
            by_topic[f"{prefix}/status"] = ("status", site)
        return cls(by_topic)

    @property
    def subscriptions(self) -> tuple[str, ...]:
        """The topics to subscribe to (no wildcards: exactly what is needed)."""
        return tuple(sorted(self.by_topic))


@dataclass(frozen=True, slots=True)
class Heard:
    """What came from one remote zone: its demand, whether it calls for protection, when."""

    calling: bool | None = None
    protection: bool = False
    heard_at: float | None = None


@dataclass(frozen=True, slots=True)
class RemoteBook:
    """Everything heard from remote zones and their sites (immutable; each message a new book)."""

    zones: Mapping[str, Heard] = field(default_factory=dict)
    online: Mapping[str, bool] = field(default_factory=dict)

    def heard(
        self, topics: RemoteTopics, topic: str, payload: bytes | bytearray | str, now: float
    ) -> RemoteBook:
        """The book after one message; an unknown topic or an unreadable payload changes
        nothing (so it never refreshes a zone's heartbeat)."""
        found = topics.by_topic.get(topic)
        if found is None:
            return self
        kind, key = found
        if kind == "status":
            up = parse_status(payload)
            if up is None:
                return self
            return replace(self, online={**self.online, key: up})
        before = self.zones.get(key, Heard())
        if kind == "demand":
            calling = parse_demand(payload)
            if calling is None:
                return self
            after = replace(before, calling=calling, heard_at=now)
        else:
            parsed = parse_zone_state(payload)
            if parsed is None:
                return self
            after = Heard(calling=parsed[0], protection=parsed[1], heard_at=now)
        return replace(self, zones={**self.zones, key: after})

    def demands(self, zones: Iterable[str]) -> tuple[ZoneDemand, ...]:
        """One :class:`ZoneDemand` per remote zone in ``zones`` (local ones are skipped: the
        service builds those from its own controllers). A site never heard of counts as
        offline, so its zones are stale until its ``online`` arrives."""
        out: list[ZoneDemand] = []
        for text in zones:
            site, _ = split_served(text)
            if site is None:
                continue
            heard = self.zones.get(text, Heard())
            out.append(
                ZoneDemand(
                    text,
                    heard.calling,
                    heard_at=heard.heard_at,
                    online=self.online.get(site, False),
                    protection=heard.protection,
                )
            )
        return tuple(out)


# --------------------------------------------------------------------------- publishing


def _iso(posix: float | None, tz: dt.tzinfo) -> str | None:
    if posix is None:
        return None
    return dt.datetime.fromtimestamp(posix, tz).isoformat(timespec="seconds")


def source_state_payload(
    name: str, kind: str, out: SourceOutputs, now: float, tz: dt.tzinfo = dt.UTC
) -> dict[str, Any]:
    """The retained JSON of ``<prefix>/source/<name>/state``.

    Times are instants (ISO 8601 in the site's time zone), not countdowns, so the payload
    changes only when something happens: ``significant_source_state`` drops the timestamp.
    """
    return {
        "source": name,
        "kind": kind,
        "timestamp": _iso(now, tz),
        "running": out.enable,
        "running_since": _iso(out.running_since, tz),
        "pump": out.pump,
        "reason": out.reason,
        "pump_reason": out.pump_reason,
        "calling": list(out.calling),
        "protection": out.protection,
        "waiting_for_valve": None
        if out.waiting_for is None
        else {"zone": out.waiting_for, "until": _iso(out.waiting_until, tz)},
        "lockout": None
        if out.lockout is None
        else {"reason": out.lockout, "until": _iso(out.lockout_until, tz)},
        "starts_1h": out.starts_1h,
        "stale": list(out.stale),
        "stale_policy": out.stale_policy,
    }


def significant_source_state(payload: Mapping[str, Any]) -> str:
    """What counts as a change of a source's state (everything but its timestamp): publish
    when this differs from the last one sent, and at least every ``publish_interval_s``."""
    return json.dumps({k: v for k, v in payload.items() if k != "timestamp"}, sort_keys=True)
