"""The zone runner: each zone's control loop, its commands, and the hook after each step.

Each zone's loop (task ``zone:<name>``) reads its samples, asks its weekly program
for the level, steps the sans-IO controller, tells the output writer what it wants
and then calls every per-step hook (:meth:`ZoneRunner.subscribe`: the publisher,
persistence, the embedder's ``on_tick``; history and alarms subscribe the same way)
with a :class:`TickReport`. It sleeps its tick on the clock, woken early by a
command. Every command goes through :meth:`ZoneRunner.apply_command`.
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol
from zoneinfo import ZoneInfo

import structlog

from roomloop.clock import Clock, sleep_or_wake
from roomloop.config.models import CalendarEntry, Zone
from roomloop.core.commands import UNSET, CommandRejected, Unset, apply_command
from roomloop.core.controller import ZoneController
from roomloop.core.optimum_start import WarmUpModel
from roomloop.core.settings import ZoneSettings
from roomloop.core.state import ZoneState
from roomloop.core.types import PointSample, ZoneInputs, ZoneOutputs
from roomloop.io.ports import InputSource
from roomloop.service.events import zone_events
from roomloop.service.notify import Progress
from roomloop.service.optimum_start import OptimumStartProgram, outdoor_value
from roomloop.service.outputs import zone_outputs, zone_wants
from roomloop.service.program import Switch, changeover_at

log = structlog.get_logger("roomloop.service")


@dataclass(frozen=True, slots=True)
class TickReport:
    """One zone's decision, handed to every per-step hook (the demo's live view, the
    publisher, persistence, the benchmark)."""

    zone: str
    at: float
    outputs: ZoneOutputs
    state: ZoneState
    next_change: Switch | None = None
    """The weekly program's next switch (auto mode), for the published state."""


OnTick = Callable[[TickReport], None]


class OutputWants(Protocol):
    """What a zone tells the output writer."""

    def want(self, point: str, on: bool) -> None: ...

    def hold_safe(self, point: str) -> None: ...


class ZoneRuntime:
    """One zone's settings, controller and state, shared by its loop and its commands."""

    def __init__(
        self,
        zone: Zone,
        settings: ZoneSettings,
        controller: ZoneController,
        state: ZoneState,
        tz: ZoneInfo,
        *,
        calendar: Sequence[CalendarEntry] = (),
        warm_up: WarmUpModel | None = None,
    ) -> None:
        self.zone = zone
        self.settings = settings
        self.controller = controller
        self.state = state
        self.outputs: ZoneOutputs | None = None
        self.decided = False
        self.wake = asyncio.Event()
        self.steps = 0
        # the program cursor wrapped by optimum start (the same answer while it is off)
        # (``warm_up``: the learned warm-up model restored from the state file)
        self.program = OptimumStartProgram.for_zone(zone, settings, tz, calendar, warm_up)
        self.tz = tz
        self.calendar = tuple(calendar)
        self.changeover_since: float | None = None
        """The instant of the program change whose changeover was last taken (None: none yet)."""
        self.changeover_started = False
        """The program's changeover was looked at once (the start rule applies only then)."""

    @property
    def name(self) -> str:
        return self.zone.name


class ZoneRunner:
    """Runs the zones' loops; the one way in for commands and the one per-step hook list."""

    def __init__(
        self,
        clock: Clock,
        zones: Mapping[str, ZoneRuntime],
        sources: Mapping[str, InputSource],
        outputs: OutputWants,
        progress: Progress,
        *,
        units: str,
    ) -> None:
        self.clock = clock
        self.zones = zones
        self.sources = sources
        self.outputs = outputs
        self.progress = progress
        self.units = units
        self.inputs_ready = asyncio.Event()
        """Set once every link was polled once: the zones start then."""
        self._hooks: list[OnTick] = []
        self._on_command: list[Callable[[str], None]] = []

    def subscribe(self, hook: OnTick) -> None:
        """Call ``hook`` after each zone step (a failing hook is logged, never fatal)."""
        self._hooks.append(hook)

    def on_command(self, hook: Callable[[str], None]) -> None:
        """Call ``hook(zone)`` after each applied command (persistence saves it soon)."""
        self._on_command.append(hook)

    def apply_command(
        self, zone: str, field: str, value: Any, *, until: float | Unset | None = UNSET
    ) -> None:
        """Apply a command to a zone now (the broker's handler and in-process callers);
        ``until``: the end of a ``setpoint`` or ``level`` hold (None: never).

        Raises :class:`~roomloop.core.commands.CommandRejected` when the control core
        refuses it; nothing changes then. The zone steps at once.
        """
        runtime = self.zones[zone]
        now = self.clock.now()
        runtime.state = apply_command(
            runtime.settings, runtime.state, field, value, now, units=self.units, until=until
        )
        if until is UNSET:
            log.info("command.applied", zone=zone, field=field, value=value)
        else:
            log.info("command.applied", zone=zone, field=field, value=value, until=until)
        for hook in self._on_command:
            hook(zone)
        runtime.wake.set()

    def zone_failed(self, zone: str) -> None:
        """A zone whose loop broke holds its output at the safe state until it decides again."""
        runtime = self.zones.get(zone)
        if runtime is not None:
            runtime.decided = False
            for output in zone_outputs(runtime.zone):
                self.outputs.hold_safe(output.point)

    outdoor_point: tuple[str, float] | None = None
    """The site's outdoor point and its ``stale_after_s`` (optimum start), if it has one."""

    def outdoor_c(self, now: float) -> float | None:
        """The site's outdoor temperature if its point reads good (the history records it)."""
        return self._outdoor(now)

    def _outdoor(self, now: float) -> float | None:
        """The site's outdoor temperature if its point reads good, else None."""
        if self.outdoor_point is None:
            return None
        name, stale_after_s = self.outdoor_point
        return outdoor_value(self.samples([name], now)[0], now, stale_after_s)

    def samples(self, names: Sequence[str], now: float) -> tuple[PointSample, ...]:
        """The zone's samples by point name (``comm-failure`` for one no source has)."""
        cache: dict[int, dict[str, PointSample]] = {}
        out: list[PointSample] = []
        for name in names:
            source = self.sources.get(name)
            if source is None:
                out.append(PointSample(name, None, None, "comm-failure"))
                continue
            samples = cache.get(id(source))
            if samples is None:
                samples = source.samples(now)
                cache[id(source)] = samples
            out.append(samples.get(name, PointSample(name, None, None, "comm-failure")))
        return tuple(out)

    async def run_zone(self, runtime: ZoneRuntime) -> None:
        """One zone's loop: step at every tick (or at once on a command), until cancelled."""
        name = f"zone:{runtime.name}"
        await self.inputs_ready.wait()
        zone = runtime.zone
        backup_name = zone.fail_safe.backup_point
        while True:
            now = self.clock.now()
            level, next_change = runtime.program.at(  # optimum start: the level to use now
                now, mode=runtime.state.mode, outdoor=self._outdoor(now),
                temperature=None if runtime.outputs is None else runtime.outputs.temperature,
            )
            if runtime.settings.cooling is not None:
                self._program_changeover(runtime, now)
            inputs = ZoneInputs(
                samples=self.samples(zone.inputs, now),
                scheduled_level=level,
                backup=None if backup_name is None else self.samples([backup_name], now)[0],
            )
            before, previous = runtime.state, runtime.outputs
            runtime.state, outputs = runtime.controller.step(before, inputs, now)
            runtime.outputs = outputs
            for event in zone_events(
                runtime.name, now=now, before=before, after=runtime.state,
                previous=previous, outputs=outputs,
            ):
                getattr(log, event.level)(event.event, **event.fields)
            runtime.steps += 1
            runtime.decided = True
            if zone.cooling is None and zone.output is not None:
                self.outputs.want(zone.output, outputs.demand)
            else:
                for point, on in zone_wants(zone, outputs):
                    self.outputs.want(point, on)
            self._after_step(TickReport(runtime.name, now, outputs, runtime.state, next_change))
            self.progress.beat(name)
            runtime.wake.clear()
            await sleep_or_wake(self.clock, zone.tick_s, runtime.wake)

    def _program_changeover(self, runtime: ZoneRuntime, now: float) -> None:
        """A program entry (weekly or calendar) that sets the changeover: taken once per
        program change, as a ``changeover`` command would be (the core checks it), so a
        command in between lasts until the next such change. At start the program's
        changeover in force is taken unless a command had changed the zone's (a restored
        state that differs from the site file's)."""
        cooling = runtime.settings.cooling
        found = changeover_at(
            runtime.zone.program, runtime.calendar, now, runtime.tz,
            default=None if cooling is None else cooling.initial_changeover,
        )
        first = not runtime.changeover_started
        runtime.changeover_started = True
        if cooling is None or found is None or found.since == runtime.changeover_since:
            return
        runtime.changeover_since = found.since
        c = runtime.state.cooling
        current = cooling.initial_changeover if c is None else c.changeover
        if (first and current != cooling.initial_changeover) or current == found.changeover:
            return
        try:
            runtime.state = apply_command(
                runtime.settings, runtime.state, "changeover", found.changeover, now,
                units=self.units,
            )
        except CommandRejected as exc:
            log.warning(
                "program.changeover_refused", zone=runtime.name, changeover=found.changeover,
                by=found.by, reason=exc.reason,
            )
            return
        log.info(
            "program.changeover", zone=runtime.name, changeover=found.changeover,
            was=current, by=found.by,
        )

    def _after_step(self, report: TickReport) -> None:
        for hook in self._hooks:
            try:
                hook(report)
            except Exception:
                log.exception("service.on_tick_failed", zone=report.zone)
