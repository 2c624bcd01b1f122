"""Reload: the site file read again on SIGHUP, checked first, and the service rebuilt around it.

A reload is a stop of the running :class:`~roomloop.service.app.Service` that is
not a stop of the site, and a start of a new one from the new file:

* :func:`check_reload` reads the file with the checks of ``roomloop check`` (and
  those ``run`` adds at start: the broker's files, the site's name, which names
  the lock and the state file). A bad file is refused: every problem is logged
  (``reload.problem``: file, line, key path, message) and the running site is
  not touched at all.
* A good file: :meth:`Handover.stop` ends the old service's control tasks, but
  where the stop would put every output to its safe state it sends only the
  outputs of the zones the new file removed there, and clears those zones'
  retained topics; ``offline`` is not published. The kept zones' outputs are
  left as they are on the devices.
* The new service starts with what the old one handed over (:class:`Carried`):
  each kept zone's state as it was in memory (checked against the new settings
  as a saved state is at a restart: a hold outside the new limits starts the
  zone fresh), each heat source kept under the same name and kind with its whole state
  (its starts of the last hour still count; a renamed or removed source's do not), and
  each unchanged output as last commanded. As at every start,
  each Modbus output is read from its device first and held as found until its
  zone decides, so a kept zone's relay makes no off/on pulse. New zones start
  fresh; links and points are all built again from the new file.

The process keeps its site lock throughout; the broker connection is opened
again by the new service (a clean disconnect: the broker does not send the
``offline`` will).
"""

from __future__ import annotations

import asyncio
import json
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import structlog

from roomloop.bms.alarm_book import alarm_topic
from roomloop.clock import Clock, timeout
from roomloop.config.loader import load_site_with_warnings
from roomloop.config.models import HeatSource, ModbusOutput, Site
from roomloop.core.alarms import ALARM_KINDS
from roomloop.core.source import SourceState
from roomloop.errors import ConfigError, ConfigProblem
from roomloop.service.notify import notify
from roomloop.service.outputs import OutputWriter, zone_outputs
from roomloop.service.publisher import PLAIN_FIELDS, field_topic, state_topic
from roomloop.service.supervisor import cancel_and_wait

if TYPE_CHECKING:
    from roomloop.service.app import Service
    from roomloop.service.zones import OnTick

log = structlog.get_logger("roomloop.service")

CLEAR_TOPICS_S = 1.0
"""``clock.io`` seconds the removed zones' retained topics may take to clear."""


@dataclass(frozen=True, slots=True)
class Carried:
    """What a reloaded service takes over from the one before it."""

    states: Mapping[str, Any]
    """Each kept zone's state, JSON-like (as the state file holds it)."""
    relays: Mapping[str, bool]
    """Each unchanged output as the old service last commanded it (where no read says)."""
    sources: Mapping[str, tuple[str, SourceState]] = field(default_factory=dict)
    """Each heat source's kind and whole state (its starts, timers, calls), by name: a source
    the new file keeps under the same name and kind goes on with it."""


def check_reload(path: str | Path, running: Site) -> Site | None:
    """The new site if ``path`` passes every check; else None, with the problems logged."""
    try:
        site, warnings = load_site_with_warnings(path)
    except ConfigError as exc:
        _refused(path, exc.problems)
        return None
    except OSError as exc:  # pragma: no cover - the loader reports unreadable files itself
        _refused(path, [ConfigProblem(str(path), None, "", str(exc))])
        return None
    problems: list[ConfigProblem] = []
    if site.name != running.name:
        problems.append(
            ConfigProblem(
                str(path), None, "site.name",
                f"the site's name changed from {running.name!r} to {site.name!r}: it names the "
                "site lock and the state file, so a new name needs a restart",
            )
        )
    if site.broker is not None:
        from roomloop.io.broker import BrokerSetupError, check_broker_files

        try:
            check_broker_files(site.broker)
        except BrokerSetupError as exc:
            problems.append(ConfigProblem(str(path), None, "broker", str(exc)))
    if problems:
        _refused(path, problems)
        return None
    for warning in warnings:
        log.warning(
            "reload.warning", file=warning.file, line=warning.line, key=warning.path,
            message=warning.message,
        )
    return site


def _refused(path: str | Path, problems: Sequence[ConfigProblem]) -> None:
    for problem in problems:
        log.error(
            "reload.problem", file=problem.file, line=problem.line, key=problem.path,
            message=problem.message, text=str(problem),
        )
    log.error(
        "reload.refused", file=str(path), problems=len(problems),
        detail="the running site is kept unchanged",
    )


@dataclass
class Handover:
    """A reload in progress: the new site, and (once the old service stopped) what it carries."""

    new: Site
    carried: Carried | None = field(default=None)

    def removed_zones(self, old: Site) -> list[str]:
        names = {z.name for z in self.new.zones}
        return [z.name for z in old.zones if z.name not in names]

    async def stop(self, service: Service, control: Sequence[asyncio.Task[None]]) -> None:
        """The old service's side: control ends, removed zones go safe and vanish, no offline."""
        from roomloop.service.app import STOP_TASKS_S

        old = service.site
        removed = self.removed_zones(old)
        added = [z.name for z in self.new.zones if z.name not in {o.name for o in old.zones}]
        log.info("service.reloading", site=old.name, removed=removed, added=added)
        notify("RELOADING=1", f"MONOTONIC_USEC={time.monotonic_ns() // 1000}")
        await cancel_and_wait(service.clock.io, control, STOP_TASKS_S)
        kept_outputs = {o.point for z in self.new.zones for o in zone_outputs(z)}
        kept_outputs |= {p for source in self.new.heat_sources for p in _source_points(source)}
        # Every output the new file no longer switches as before goes safe: a removed zone's,
        # a dropped source's, and one a kept zone gave up or whose point or link changed
        # (the new service will not know the old device's coil).
        old_outputs = [o for z in old.zones for o in zone_outputs(z)]
        old_outputs += service.sources.writer_outputs()
        to_safe = [
            output
            for output in old_outputs
            if output.point not in kept_outputs or not _same_output(old, self.new, output.point)
        ]
        if to_safe:  # the links are still open here
            await OutputWriter(service.clock, to_safe, service.outputs.sinks).stop_safe()
        if service.session is not None and removed:
            await _clear_topics(service.session.client, service.clock, service.prefix, removed)
        self.carried = Carried(
            states={
                name: json.loads(runtime.state.to_json())
                for name, runtime in service.zones.items()
                if name not in removed
            },
            relays=_unchanged_outputs(old, self.new, service.outputs.commanded()),
            sources={
                name: kept
                for name, kept in service.sources.carried().items()
                if any(s.name == name and s.kind == kept[0] for s in self.new.heat_sources)
            },
        )


def _unchanged_outputs(old: Site, new: Site, commanded: Mapping[str, bool]) -> dict[str, bool]:
    """The commanded state of each output whose point (and link) the new file did not change."""
    return {name: on for name, on in commanded.items() if _same_output(old, new, name)}


def _same_output(old: Site, new: Site, point_name: str) -> bool:
    """The point is in both files, the same, and (a Modbus point) on the same link."""
    try:
        before, after = old.point(point_name), new.point(point_name)
    except KeyError:
        return False
    if before != after:
        return False
    return not (
        isinstance(before, ModbusOutput) and _link(old, before.link) != _link(new, before.link)
    )


def _source_points(source: HeatSource) -> list[str]:
    return [p for p in (source.output, source.pump_output) if p is not None]


def _link(site: Site, name: str) -> Any:
    return next((link for link in site.links if link.name == name), None)


async def _clear_topics(client: Any, clock: Clock, prefix: str, zones: Sequence[str]) -> None:
    """Empty retained payloads on a removed zone's topics: the broker forgets them."""
    if client is None:
        log.warning("reload.topics_not_cleared", zones=list(zones), reason="broker not connected")
        return
    topics = [
        topic
        for zone in zones
        for topic in (
            state_topic(prefix, zone),
            *(field_topic(prefix, zone, f) for f in PLAIN_FIELDS),
            *(alarm_topic(prefix, zone, kind) for kind in ALARM_KINDS),
        )
    ]
    try:
        async with timeout(clock.io, CLEAR_TOPICS_S):
            for topic in topics:
                await client.publish(topic, b"", qos=1, retain=True)
    except Exception as exc:
        log.warning(
            "reload.topics_not_cleared", zones=list(zones), reason=str(exc) or type(exc).__name__
        )
    else:
        log.info("reload.topics_cleared", zones=list(zones), topics=len(topics))


async def serve(
    path: str | Path,
    site: Site,
    *,
    stop: asyncio.Event,
    reload: asyncio.Event,
    state_dir: str | Path,
    clock: Clock,
    on_tick: OnTick | None = None,
) -> None:
    """Run the site until ``stop``; on ``reload`` check ``path`` and, if good, rebuild on it
    (``on_tick``: the embedder's per-step hook, given to every service in turn)."""
    from roomloop.service.app import Service

    carried: Carried | None = None
    while True:
        service = Service(
            site, clock=clock, state_dir=state_dir, carried=carried, on_tick=on_tick
        )
        ending = asyncio.Event()
        running = asyncio.create_task(service.run(ending), name="service")
        handover = await _until_reload(
            path, service, running=running, ending=ending, stop=stop, reload=reload
        )
        if handover is None:
            return
        carried, site = handover.carried, handover.new
        log.info("service.reloaded", file=str(path), zones=[z.name for z in site.zones])


async def _until_reload(
    path: str | Path,
    service: Service,
    *,
    running: asyncio.Task[None],
    ending: asyncio.Event,
    stop: asyncio.Event,
    reload: asyncio.Event,
) -> Handover | None:
    """Wait for the end or a good reload; None: the service stopped (its run is awaited)."""
    stop_wait = asyncio.create_task(stop.wait(), name="stop-wait")
    try:
        while True:
            reload_wait = asyncio.create_task(reload.wait(), name="reload-wait")
            try:
                await asyncio.wait(
                    {running, stop_wait, reload_wait}, return_when=asyncio.FIRST_COMPLETED
                )
            finally:
                reload_wait.cancel()
            if running.done() or stop.is_set():
                ending.set()
                await running
                return None
            reload.clear()
            log.info("reload.requested", file=str(path))
            new = check_reload(path, service.site)
            if new is None:
                continue
            handover = Handover(new)
            service.handover = handover
            ending.set()
            await running
            return handover
    finally:
        stop_wait.cancel()
