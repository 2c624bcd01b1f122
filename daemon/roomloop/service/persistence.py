"""Persistence of the zone states: restore at start, save when it matters, the final save.

:func:`restore_states` reads the state file (``persist.StateStore``, which validates
it) and resumes each zone's saved state, or starts it fresh. :class:`Persistence`
saves the states when something that must survive a restart changed (a command,
the relay and its switch times, fail-safe: :func:`persist_key`), every
``PERIODIC_SAVE_S`` otherwise (the slowly drifting terms), and once more at stop.
Each zone's learned warm-up model (optimum start) is saved with the states, soon after
it learns from a warm-up; :func:`restored_warm_up` reads it back at start. Each heat
source's short-cycle history is saved likewise, soon after the source starts or stops
(:meth:`Persistence.note_source`); :func:`restored_sources` reads it back, checked.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import json
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import Any

import structlog

from roomloop.clock import Clock, sleep_or_wake
from roomloop.config.models import Site
from roomloop.core.controller import ZoneController
from roomloop.core.optimum_start import WarmUpModel
from roomloop.core.settings import ZoneSettings
from roomloop.core.source import SourceMemory
from roomloop.core.state import StateFormatError, ZoneState
from roomloop.service.persist import StateStore
from roomloop.service.restart import restore_zone

log = structlog.get_logger("roomloop.service")

PERIODIC_SAVE_S = 300.0
"""Clock seconds between saves of the slowly drifting terms (droop, learned duty)."""
BURST_S = 0.05
"""Clock seconds a save waits, so a burst (a command and the switch it causes) is one write."""


def persist_key(state: ZoneState) -> str:
    """What must reach the disk at once: commands, the relay and its switch times, fail-safe."""
    keep = (
        "mode",
        "hold_setpoint",
        "hold_level",
        "hold_until",
        "level_override",
        "relay_on",
        "switched_at",
        "switches",
        "fail_safe",
    )
    return repr(tuple(getattr(state, k) for k in keep))


@dataclass(frozen=True, slots=True)
class RestoredZone:
    settings: ZoneSettings
    controller: ZoneController
    state: ZoneState


def restore_states(
    site: Site,
    store: StateStore,
    now: float,
    relays: Mapping[str, bool | None],
    *,
    saved: Mapping[str, Any] | None = None,
) -> dict[str, RestoredZone]:
    """Each zone's controller and its state: the saved one checked and resumed from its
    output as found on the device (``relays``: True/False, None if unknown), or a fresh one.
    ``saved``: the states to use instead of the store's (a reload hands them over)."""
    if saved is None:
        saved = store.load()
    zones: dict[str, RestoredZone] = {}
    for zone in site.zones:
        settings = ZoneSettings.from_site(site, zone.name)
        controller = ZoneController(settings)
        state = restore_zone(
            controller,
            saved.get(zone.name),
            now,
            zone=zone.name,
            relay_on=False if zone.output is None else relays.get(zone.output),
            cooling_on=None if zone.cooling is None else relays.get(zone.cooling.output),
            safe_on=zone.safe_state == "on",
        )
        zones[zone.name] = RestoredZone(settings, controller, state)
    return zones


def restored_warm_up(store: StateStore, zone: str) -> WarmUpModel | None:
    """The zone's saved warm-up model (after :meth:`StateStore.load`), or None: none saved,
    or one that does not read as a model (logged; the zone learns again from scratch)."""
    raw = store.warm_up.get(zone)
    if raw is None:
        return None
    try:
        return WarmUpModel.from_dict(raw)
    except ValueError as exc:
        log.warning("persist.warm_up_discarded", zone=zone, reason=str(exc))
        return None


def restored_sources(site: Site, store: StateStore, now: float) -> dict[str, SourceMemory]:
    """Each source's saved history (after :meth:`StateStore.load`) that reads as one for the
    source of that name as configured now; a bad one (garbage, a time after ``now``,
    another kind of source) is refused with ``persist.source_state_rejected`` and that
    source resumes as without a saved state."""
    memories: dict[str, SourceMemory] = {}
    for source in site.heat_sources:
        raw = store.sources.get(source.name)
        if raw is None:
            continue
        try:
            memory = SourceMemory.from_dict(raw, kind=source.kind, now=now)
        except StateFormatError as exc:
            log.warning("persist.source_state_rejected", source=source.name, reason=str(exc))
            continue
        except (RecursionError, ValueError, TypeError) as exc:  # not JSON-like at all
            log.warning(
                "persist.source_state_rejected", source=source.name,
                reason=f"source state cannot be read: {type(exc).__name__}",
            )
            continue
        log.info(
            "persist.source_restored", source=source.name, running=memory.running,
            starts=len(memory.starts),
        )
        memories[source.name] = memory
    return memories


def source_key(memory: SourceMemory) -> str:
    """What of a source's history must reach the disk at once: a start or a stop (the
    starts ageing out of the hour wait for the next save)."""
    return repr((memory.kind, memory.running, memory.running_since, memory.stopped_at))


def _worth_keeping(model: WarmUpModel) -> bool:
    return bool(model.bands) or model.dead_time_s is not None


class Persistence:
    """Saves the states that ``states()`` returns (and the warm-up models ``models()``
    returns), in order, never on the event loop."""

    def __init__(
        self,
        store: StateStore,
        clock: Clock,
        states: Callable[[], Mapping[str, ZoneState]],
        models: Callable[[], Mapping[str, WarmUpModel]] | None = None,
        sources: Callable[[], Mapping[str, SourceMemory]] | None = None,
    ) -> None:
        self.store = store
        self.clock = clock
        self.states = states
        self.models = models
        self.sources = sources
        self._saved_source_key: dict[str, str] = {}
        self._last_model: dict[str, WarmUpModel] = {}
        self._dirty = asyncio.Event()
        self._last_saved_key: dict[str, str] = {}
        self._lock = asyncio.Lock()
        self._in_flight: asyncio.Future[bool] | None = None

    def saved_as(self, zone: str, state: ZoneState) -> None:
        """``state`` is what the disk holds for ``zone`` (restored at start)."""
        self._last_saved_key[zone] = persist_key(state)

    def note_model(self, zone: str, model: WarmUpModel) -> None:
        """A zone stepped: save soon if its warm-up model learned something new."""
        last = self._last_model.get(zone)
        if last is None:
            self._last_model[zone] = model
        elif model is not last:
            self._last_model[zone] = model
            if model != last:
                self._dirty.set()

    def note_source(self, name: str, memory: SourceMemory) -> None:
        """A source stepped: save soon if it started or stopped since the last save."""
        if source_key(memory) != self._saved_source_key.get(name):
            self._dirty.set()

    def mark_dirty(self) -> None:
        """Save soon (a command was applied)."""
        self._dirty.set()

    def note(self, zone: str, state: ZoneState) -> None:
        """A zone stepped: save soon if what must survive a restart changed."""
        if persist_key(state) != self._last_saved_key.get(zone):
            self._dirty.set()

    async def save(self, now: float) -> None:
        """Write the zone states if they changed since the last write (the store compares).

        The snapshot is taken on the loop; the write and its fsyncs run in a thread, so
        a slow SD card stalls no zone loop. One write at a time, in order: a write whose
        caller was cancelled is still waited for before the next one starts.
        """
        async with self._lock:
            if self._in_flight is not None:
                with contextlib.suppress(Exception):
                    await asyncio.shield(self._in_flight)
            states = self.states()
            zones = {name: json.loads(state.to_json()) for name, state in states.items()}
            keys = {name: persist_key(state) for name, state in states.items()}
            models = self.models() if self.models is not None else {}
            warm_up = {n: m.to_dict() for n, m in models.items() if _worth_keeping(m)}
            memories = self.sources() if self.sources is not None else {}
            sources = {n: m.to_dict() for n, m in memories.items()}
            source_keys = {n: source_key(m) for n, m in memories.items()}
            extra: dict[str, Any] = {"sources": sources} if sources else {}
            saving = (
                functools.partial(self.store.save, zones, now, warm_up, **extra)
                if warm_up
                else functools.partial(self.store.save, zones, now, **extra)
            )
            write = asyncio.ensure_future(asyncio.to_thread(saving))
            self._in_flight = write
            try:
                written = await asyncio.shield(write)
            except OSError:
                return  # logged by the store (persist.save_failed, folded); tried again later
            self._last_saved_key.update(keys)
            self._saved_source_key.update(source_keys)
            if written:
                log.debug("persist.saved", path=str(self.store.path))

    async def run(self) -> None:
        """Save when dirty (a burst at once) or every ``PERIODIC_SAVE_S``, until cancelled."""
        while True:
            await sleep_or_wake(self.clock, PERIODIC_SAVE_S, self._dirty)
            await self.clock.sleep(BURST_S)
            self._dirty.clear()
            await self.save(self.clock.now())

    async def save_final(self) -> None:
        """The last save at stop, on every exit path."""
        try:
            await self.save(self.clock.now())
        except Exception:
            log.exception("persist.final_save_failed")
