"""The heat sources as the service runs them: each source's loop, what it hears, what it publishes.

One :class:`~roomloop.core.source_runtime.SourceRuntime` per ``heat_sources`` entry (the
sans-IO seam); :class:`SourceRunner` drives them:

* each source's loop (task ``source:<name>``) steps the source on the latest decision of
  each local zone it serves (:meth:`SourceRunner.note_zone`, a per-step hook of the zone
  runner) and on what was heard from the remote zones, then tells the output writer what
  the enable and pump outputs should be: the writer alone owns them (the safe state before
  the first decision and at stop, the links' re-assert, the read-back). It steps every
  :data:`SOURCE_TICK_S`, at once when a served zone's call changes, and exactly when a
  timer of the source runs out (the valve opening time, a lockout, the pump's overrun), so
  the source follows its zones within a fraction of a second, not a tick;
* the broker session subscribes to :meth:`SourceRunner.topics` at every (re)connection,
  then calls :meth:`SourceRunner.forget_sent` (the source's state is published again), and
  hands every message on those topics to :meth:`SourceRunner.handle`; it publishes what
  :meth:`SourceRunner.due` returns (retained) and reports it with :meth:`SourceRunner.sent`.

* at start each source resumes from its outputs as found and its short-cycle history saved
  in the state file (:meth:`SourceRunner.resume`; each runtime's ``memory`` is what is
  saved, soon after each start or stop through :attr:`SourceRunner.on_step`); after a
  reload a source of the same name and kind takes the old service's whole state.

The broker going away changes nothing here: what was heard stays, and ages, so a remote
zone turns stale only by the source's ``remote_stale.timeout_s`` (or its site's will), never
by the reconnection itself; after it, the retained messages replayed are the last values.
A site's ``offline`` counts only once it held :data:`OFFLINE_CONFIRM_S` with the connection
up: a broker that shuts down sends every client's will just before it drops the connection.
"""

from __future__ import annotations

import asyncio
import functools
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from zoneinfo import ZoneInfo

import structlog

from roomloop.clock import Clock, sleep_or_wake
from roomloop.config.models import HeatSource, Site
from roomloop.core.source import SourceMemory, SourceOutputs, SourceSettings, SourceState
from roomloop.core.source_runtime import SourceRuntime
from roomloop.core.source_topics import parse_status
from roomloop.service.events import source_events
from roomloop.service.notify import Progress
from roomloop.service.outputs import Output
from roomloop.service.publisher import Message
from roomloop.service.zones import OutputWants, TickReport

log = structlog.get_logger("roomloop.service")

SOURCE_TICK_S = 5.0
"""Clock seconds between two steps of a source with nothing new (it steps at once on a
change of a call, and at each of its own timers)."""
BURST_S = 0.05
"""Clock seconds a source waits after a wake, so a burst of messages is one step."""
OFFLINE_CONFIRM_S = 1.0
"""Real seconds (``clock.io``) a remote site's ``offline`` waits before it counts, dropped if
the service's own connection goes down meanwhile: a broker shutting down sends the will of
every client it still has, so the wills that come just before the connection drops are the
broker's restart, not the remote daemons'."""


def owner(source: str) -> str:
    """How a source's outputs are named as the writer's owner (zones use their name)."""
    return f"source:{source}"


@dataclass
class SourceLoop:
    """One source: its configuration, its runtime and its wake-up."""

    config: HeatSource
    runtime: SourceRuntime
    wake: asyncio.Event
    outputs: SourceOutputs | None = None
    steps: int = 0

    @property
    def name(self) -> str:
        return self.config.name

    @property
    def points(self) -> tuple[str, ...]:
        pump = self.config.pump_output
        return (self.config.output,) if pump is None else (self.config.output, pump)


class SourceRunner:
    """The site's heat sources; see the module docstring."""

    def __init__(
        self,
        site: Site,
        clock: Clock,
        outputs: OutputWants,
        progress: Progress,
        *,
        tz: ZoneInfo,
        publish_interval_s: float,
        inputs_ready: asyncio.Event,
        on_step: Callable[[str, SourceMemory], None] | None = None,
    ) -> None:
        self.clock = clock
        self.outputs = outputs
        self.progress = progress
        self.inputs_ready = inputs_ready
        self.on_change: Callable[[], None] = lambda: None
        """Called when a source's state is due for publishing (the session's wake)."""
        self.on_step: Callable[[str, SourceMemory], None] = on_step or (lambda _n, _m: None)
        """Called after each step of a source with what a restart must not forget (the
        persistence saves soon when it changed)."""
        now = clock.now()
        self.sources: dict[str, SourceLoop] = {}
        self._served_by: dict[str, SourceLoop] = {}
        for config in site.heat_sources:
            runtime = SourceRuntime(
                SourceSettings.from_config(config),
                prefix=site.topic_prefix,
                now=now,
                remote_prefixes={s: config.remote_prefix(s) for s in _sites(config)},
                tz=tz,
                publish_interval_s=publish_interval_s,
            )
            loop = SourceLoop(config, runtime, asyncio.Event())
            self.sources[config.name] = loop
            for zone in config.local_zones:
                self._served_by[zone] = loop
        self.local: dict[str, tuple[bool, str]] = {}
        """Each local served zone's latest ``(demand, reason)``."""
        self._offline: dict[tuple[str, str], tuple[bytes | bytearray | str]] = {}
        """(source, status topic) -> an ``offline`` waiting :data:`OFFLINE_CONFIRM_S`."""

    # ------------------------------------------------------------------ wiring

    def writer_outputs(self) -> list[Output]:
        """The sources' outputs for the output writer; off is their safe state."""
        return [
            Output(owner(loop.name), point, False)
            for loop in self.sources.values()
            for point in loop.points
        ]

    def resume(
        self,
        found: Mapping[str, bool | None],
        now: float,
        *,
        memories: Mapping[str, SourceMemory] | None = None,
        carried: Mapping[str, tuple[str, SourceState]] | None = None,
    ) -> dict[str, bool]:
        """At start: each source goes on from its outputs as found on the device (None: not
        known) and what it remembered (``memories``: checked, from the state file); after a
        reload a source of the same name and kind takes the old service's state instead
        (``carried``: name -> (kind, state)). Returns what each output is held at until its
        source decides."""
        held: dict[str, bool] = {}
        for loop in self.sources.values():
            enable = found.get(loop.config.output)
            pump = None if loop.config.pump_output is None else found.get(loop.config.pump_output)
            kept = None if carried is None else carried.get(loop.name)
            if kept is not None and kept[0] == loop.config.kind:
                loop.runtime.carry_on(kept[1], enable, pump, now)
                log.info("reload.source_kept", source=loop.name,
                         starts_1h=len(loop.runtime.state.starts),
                         running=loop.runtime.state.running)
            else:
                memory = None if memories is None else memories.get(loop.name)
                loop.runtime.resume(enable, pump, now, memory)
            state = loop.runtime.state
            held[loop.config.output] = state.running
            if loop.config.pump_output is not None:
                held[loop.config.pump_output] = state.pump
        return held

    def carried(self) -> dict[str, tuple[str, SourceState]]:
        """Each source's kind and whole state, for the service a reload starts."""
        return {name: (loop.config.kind, loop.runtime.state)
                for name, loop in self.sources.items()}

    def note_zone(self, report: TickReport) -> None:
        """A zone stepped (a per-step hook): a changed call of a served zone wakes its source."""
        loop = self._served_by.get(report.zone)
        if loop is None:
            return
        call = (report.outputs.demand, report.outputs.reason)
        before = self.local.get(report.zone)
        self.local[report.zone] = call
        if before is None or before[0] != call[0] or _protection(before[1]) != _protection(
            call[1]
        ):
            loop.wake.set()

    def zone_failed(self, zone: str, safe_on: bool) -> None:
        """A served zone whose loop broke: its valve is held at its safe state, so until it
        steps again it calls as that state does (not as its last step did: a source must not
        fire into a valve held shut)."""
        loop = self._served_by.get(zone)
        if loop is None:
            return
        before = self.local.get(zone)
        self.local[zone] = (safe_on, "zone-failed")
        if before is None or before[0] != safe_on or _protection(before[1]):
            loop.wake.set()

    def failed(self, name: str) -> None:
        """A source whose loop broke: its outputs back to the safe state until it decides."""
        loop = self.sources.get(name)
        if loop is not None:
            for point in loop.points:
                self.outputs.hold_safe(point)

    # ------------------------------------------------------------------ the broker's side

    def topics(self) -> list[str]:
        """Every topic the sources hear (exact topics, no wildcards)."""
        return sorted({t for loop in self.sources.values() for t in loop.runtime.subscriptions})

    def handle(self, topic: str, payload: bytes | bytearray | str, now: float) -> bool:
        """One message; False when it is for no source. A change of a call wakes the source."""
        taken = False
        for loop in self.sources.values():
            runtime = loop.runtime
            found = runtime.topics.by_topic.get(topic)
            if found is None:
                continue
            taken = True
            if found[0] == "status":
                key = (loop.name, topic)
                self._offline.pop(key, None)  # an online (or anything) cancels a pending offline
                if parse_status(payload) is False:
                    token = (payload,)
                    self._offline[key] = token
                    self.clock.io.call_later(
                        OFFLINE_CONFIRM_S, functools.partial(self._confirm, loop, key, token)
                    )
                    continue
            before = _heard(runtime, found[1], found[0] == "status", now)
            runtime.heard(topic, payload, now)
            if _heard(runtime, found[1], found[0] == "status", now) != before:
                loop.wake.set()
        return taken

    def _confirm(
        self, loop: SourceLoop, key: tuple[str, str], token: tuple[bytes | bytearray | str]
    ) -> None:
        """The ``offline`` held since :data:`OFFLINE_CONFIRM_S`, the connection up: it counts."""
        if self._offline.get(key) is not token:
            return  # cancelled: an online came, or the connection dropped
        del self._offline[key]
        loop.runtime.heard(key[1], token[0], self.clock.now())
        loop.wake.set()

    def disconnected(self) -> None:
        """The service's connection dropped: the ``offline`` wills heard just before are the
        broker's shutdown, not the remote daemons' (see :data:`OFFLINE_CONFIRM_S`)."""
        if self._offline:
            log.info("source.remote_offline_dropped", topics=sorted(t for _, t in self._offline))
        self._offline.clear()

    def forget_sent(self) -> None:
        """After a (re)connection: every source's state is due again."""
        for loop in self.sources.values():
            loop.runtime.reconnected()

    def due(self, now: float) -> list[Message]:
        return [
            Message(topic, payload)
            for loop in self.sources.values()
            for topic, payload in loop.runtime.due(now)
        ]

    def sent(self, message: Message, now: float) -> None:
        for loop in self.sources.values():
            if loop.runtime.topic == message.topic:
                loop.runtime.sent(message.payload, now)

    # ------------------------------------------------------------------ the loop

    def step(self, loop: SourceLoop, now: float) -> SourceOutputs:
        """One step of one source: decide, tell the writer, log what changed."""
        runtime = loop.runtime
        local = {z: self.local[z] for z in loop.config.local_zones if z in self.local}
        previous = loop.outputs
        out = runtime.tick(local, now)
        loop.outputs = out
        loop.steps += 1
        self.outputs.want(loop.config.output, out.enable)
        if loop.config.pump_output is not None:
            self.outputs.want(loop.config.pump_output, out.pump)
        for event in source_events(loop.name, previous=previous, outputs=out):
            getattr(log, event.level)(event.event, **event.fields)
        self.on_step(loop.name, runtime.memory)
        if runtime.due(now):
            self.on_change()
        return out

    async def run_source(self, name: str) -> None:
        """One source's loop (task ``source:<name>``), until cancelled."""
        loop = self.sources[name]
        task = owner(name)
        await self.inputs_ready.wait()
        while True:
            loop.wake.clear()
            now = self.clock.now()
            self.step(loop, now)
            self.progress.beat(task)
            if await sleep_or_wake(self.clock, self._next_in(loop, now), loop.wake):
                await self.clock.sleep(BURST_S)

    def _next_in(self, loop: SourceLoop, now: float) -> float:
        """Clock seconds to the next step: the tick, or sooner a timer of the source."""
        out, state, s = loop.outputs, loop.runtime.state, loop.runtime.settings
        timers: list[float | None] = []
        if out is not None:
            timers += [out.waiting_until, out.lockout_until]
        if state.stopped_at is not None:
            timers.append(state.stopped_at + s.pump_overrun_s)
        if state.pump and state.pump_since is not None:
            timers.append(state.pump_since + s.pump_pre_run_s)
        timers.append(state.exercise_until)
        ahead = [t - now for t in timers if t is not None and t > now]
        return min([SOURCE_TICK_S, *ahead])


def _sites(config: HeatSource) -> set[str]:
    return {z.split("/", 1)[0] for z in config.remote_zones}


def _protection(reason: str) -> bool:
    return reason.rsplit(":", 1)[-1] == "protection"


def _heard(runtime: SourceRuntime, key: str, status: bool, now: float) -> object:
    """What of a remote zone (or site, ``status``) a message can change that the step reads:
    its call, its protection flag, whether it is fresh."""
    book = runtime.book
    if status:
        return book.online.get(key)
    heard = book.zones.get(key)
    if heard is None:
        return None
    fresh = heard.heard_at is not None and now - heard.heard_at <= runtime.settings.stale_timeout_s
    return heard.calling, heard.protection, fresh
