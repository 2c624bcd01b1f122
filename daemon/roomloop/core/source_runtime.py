"""One heat source as a daemon runs it, still without I/O: the seam for the service.

:class:`SourceRuntime` keeps what the source heard from remote zones (a
:class:`~roomloop.core.source_topics.RemoteBook`), its step's state, and which retained
state message is due. The service owns the broker and the outputs and calls, per source:

- at start: :meth:`SourceRuntime.resume` from the outputs as found on the device and the
  :attr:`SourceRuntime.memory` saved before (after a reload :meth:`SourceRuntime.carry_on`);
  subscribe to :attr:`SourceRuntime.subscriptions` (and again after each
  reconnection, then :meth:`SourceRuntime.reconnected`);
- for every message on those topics: :meth:`SourceRuntime.heard`;
- every tick, after the zones' steps: :meth:`SourceRuntime.tick` with each local served
  zone's ``(demand, reason)`` of this tick; write ``enable`` to the source's output and
  ``pump`` to its pump output;
- then publish what :meth:`SourceRuntime.due` returns (retained), and call
  :meth:`SourceRuntime.sent` once it went out.

Time is always an argument.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Mapping

from .source import (
    SourceInputs,
    SourceLogic,
    SourceMemory,
    SourceOutputs,
    SourceSettings,
    SourceState,
    local_demand,
)
from .source_topics import (
    RemoteBook,
    RemoteTopics,
    significant_source_state,
    source_state_payload,
    source_state_topic,
)


class SourceRuntime:
    """A heat source's logic, what it heard, and its publication (one per ``heat_sources``)."""

    def __init__(
        self,
        settings: SourceSettings,
        *,
        prefix: str,
        now: float,
        remote_prefixes: Mapping[str, str] | None = None,
        tz: dt.tzinfo = dt.UTC,
        publish_interval_s: float = 60.0,
    ) -> None:
        self.settings = settings
        self.logic = SourceLogic(settings)
        self.state = self.logic.initial_state(now)
        """The step's state; :meth:`resume` replaces it at a restart."""
        self.topics = RemoteTopics.for_zones(settings.zones, remote_prefixes)
        self.book = RemoteBook()
        self.topic = source_state_topic(prefix, settings.name)
        self.tz = tz
        self.publish_interval_s = publish_interval_s
        self.outputs: SourceOutputs | None = None
        self._at = now
        self._last_sent: tuple[str, float] | None = None

    def resume(
        self,
        enable_on: bool | None,
        pump_on: bool | None,
        now: float,
        memory: SourceMemory | None = None,
    ) -> None:
        """Before the first tick: go on from the outputs as found on the device (None: not
        known) and the history saved before the restart (``memory``), so a restart neither
        stops a firing source nor counts a start of its own, nor forgets the last hour's."""
        self.state = self.logic.resume(enable_on, pump_on, now, memory)

    def carry_on(
        self, state: SourceState, enable_on: bool | None, pump_on: bool | None, now: float
    ) -> None:
        """Before the first tick after a reload: the old service's state of this source
        (see :meth:`SourceLogic.carry_on`)."""
        self.state = self.logic.carry_on(state, enable_on, pump_on, now)

    @property
    def memory(self) -> SourceMemory:
        """What a restart must not forget (saved in the state file)."""
        return SourceMemory.of(self.settings.kind, self.state)

    @property
    def subscriptions(self) -> tuple[str, ...]:
        return self.topics.subscriptions

    def heard(self, topic: str, payload: bytes | bytearray | str, now: float) -> bool:
        """Take one message; False when the topic is not one of this source's."""
        if topic not in self.topics.by_topic:
            return False
        self.book = self.book.heard(self.topics, topic, payload, now)
        return True

    def tick(self, local: Mapping[str, tuple[bool, str]], now: float) -> SourceOutputs:
        """One step on this tick's local calls (zone -> (demand, reason)) and what was heard.

        A local served zone missing from ``local`` counts as not calling.
        """
        demands = [
            local_demand(zone, *local[zone], now)
            for zone in self.settings.zones
            if "/" not in zone and zone in local
        ]
        demands += self.book.demands(self.settings.zones)
        self.state, self.outputs = self.logic.step(self.state, SourceInputs(tuple(demands)), now)
        self._at = now
        return self.outputs

    def payload(self) -> str | None:
        """The retained state JSON of the last tick (None before the first)."""
        if self.outputs is None:
            return None
        data = source_state_payload(
            self.settings.name, self.settings.kind, self.outputs, self._at, self.tz
        )
        return json.dumps(data)

    def due(self, now: float) -> list[tuple[str, str]]:
        """``(topic, payload)`` to publish retained now: on a change that matters, and at least
        every ``publish_interval_s``."""
        text = self.payload()
        if text is None:
            return []
        key = significant_source_state(json.loads(text))
        last = self._last_sent
        if last is None or last[0] != key or now - last[1] >= self.publish_interval_s:
            return [(self.topic, text)]
        return []

    def sent(self, payload: str, now: float) -> None:
        """The broker took ``payload``: the next one is due on a change or after the interval."""
        self._last_sent = (significant_source_state(json.loads(payload)), now)

    def reconnected(self) -> None:
        """After a reconnection the broker may have lost retained messages: publish again."""
        self._last_sent = None
