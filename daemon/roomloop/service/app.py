"""The service: the wiring of one site's parts, and the one place its tasks are started.

The parts, one job each, meet through small protocols:

* the links and points (``roomloop.io``): Modbus links (``modbus-poll:<link>``
  polls each and re-asserts the outputs the writer commanded) and the MQTT points;
* :class:`~roomloop.service.zones.ZoneRunner`: each zone's loop (``zone:<name>``),
  the one way in for commands, and the per-step hooks;
* :class:`~roomloop.service.sources.SourceRunner`: each heat source's loop
  (``source:<name>``) on its local zones' steps and its remote zones' messages;
* :class:`~roomloop.service.outputs.OutputWriter` (``outputs``): the one owner of
  each output's wanted state; writes it, holds the safe state, does the safe stop;
* :class:`~roomloop.service.session.BrokerSession` (``broker``, ``publish``,
  ``mqtt-points``, only with a broker in the site);
* :class:`~roomloop.service.persistence.Persistence` (``persist``): restore,
  saves, the final save;
* :class:`~roomloop.service.supervisor.Supervisor`: every task restarted with
  backoff if it fails; the bounded cancel at stop; ``watchdog`` feeds systemd.

Control never waits on the broker: a zone's step only hands its decision to the
publisher's hook and wakes it. On stop every output goes to its safe state,
``offline`` is published and the states are saved.

Embedding (the demo, the tests, the benchmark)::

    service = Service(site, clock=VirtualClock(), state_dir=path, on_tick=show)
    await service.run(stop_event)

More per-step work subscribes with ``service.runner.subscribe(hook)`` before
``run``; more tasks go in :meth:`Service._start_tasks`.
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
from collections.abc import Awaitable, Callable, Sequence
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo

import structlog

from roomloop.bms.alarm_book import AlarmBook, ServiceZones
from roomloop.clock import Clock, RealClock, timeout
from roomloop.config.models import (
    ModbusInput,
    ModbusOutput,
    MqttInput,
    MqttOutput,
    Site,
)
from roomloop.core.commands import CommandRejected
from roomloop.history.recorder import HistoryRecorder
from roomloop.io.modbus import ModbusLink
from roomloop.io.mqtt import MqttPoints
from roomloop.io.ports import InputSource
from roomloop.service.commands import Command
from roomloop.service.description import description_payload
from roomloop.service.notify import Progress, notify, watchdog_interval_s
from roomloop.service.outputs import OutputWriter, SafeSink, outputs_as_found, zone_outputs
from roomloop.service.persist import StateStore
from roomloop.service.persistence import (
    Persistence,
    restore_states,
    restored_sources,
    restored_warm_up,
)
from roomloop.service.publisher import (
    OutputView,
    StatePublisher,
    ZoneView,
    override_of,
    zone_outputs_agree,
)
from roomloop.service.restart import read_output_states
from roomloop.service.session import BrokerSession
from roomloop.service.sources import SOURCE_TICK_S, SourceRunner, owner
from roomloop.service.supervisor import Supervisor, cancel_and_wait, watchdog_loop
from roomloop.service.zones import OnTick, TickReport, ZoneRunner, ZoneRuntime

if TYPE_CHECKING:
    from roomloop.service.reload import Carried, Handover

__all__ = ["OnTick", "Service", "TickReport", "ZoneRuntime"]

log = structlog.get_logger("roomloop.service")

READY_WAIT_S = 15.0
"""Clock seconds to wait for the links before declaring READY=1 anyway."""
STOP_TASKS_S = 1.5
"""``clock.io`` seconds the control tasks get to end once cancelled, before outputs go safe."""
WATCHDOG_GRACE_S = 30.0
"""Clock seconds a zone loop may be late (a slow link, a busy board) before the watchdog starves."""


Starter = Callable[[str, Callable[[], Awaitable[None]], bool], None]
"""Starts a named, supervised task; True: a control task (cancelled before outputs go safe)."""


class Service:
    """The running service for one site; see the module docstring for its parts and tasks."""

    def __init__(
        self,
        site: Site,
        *,
        clock: Clock | None = None,
        state_dir: str | Path | None = None,
        on_tick: OnTick | None = None,
        ready_wait_s: float = READY_WAIT_S,
        watchdog_grace_s: float = WATCHDOG_GRACE_S,
        carried: Carried | None = None,
    ) -> None:
        self.site = site
        self.carried = carried
        """A reload's hand-over from the service before (reload.py): the states and outputs."""
        self.handover: Handover | None = None
        """Set before ``stop`` when the stop is a reload: kept outputs are left as they are."""
        self.clock: Clock = clock if clock is not None else RealClock()
        self.tz = ZoneInfo(site.site.timezone)
        self.units = site.site.units
        self.prefix = site.topic_prefix
        self.ready_wait_s = ready_wait_s
        self.watchdog_grace_s = watchdog_grace_s
        self.ready = asyncio.Event()
        """Set once the links are up (or after ``ready_wait_s``): READY=1 under systemd."""
        self._links_up = asyncio.Event()
        self.store = StateStore(
            state_dir if state_dir is not None else site.site.state_dir, site.name
        )
        self.progress = Progress(self.clock.monotonic)
        self.publisher = StatePublisher(
            self.prefix,
            units=self.units,
            tz=self.tz,
            interval_s=site.broker.publish_interval_s if site.broker else 60.0,
        )
        self.links, self.mqtt_points, sources, sinks = self._build_io()
        self.outputs = OutputWriter(
            self.clock,
            [output for z in site.zones for output in zone_outputs(z)],
            sinks,
            before_write=self._journal_switch,
        )
        self.zones: dict[str, ZoneRuntime] = {}
        """Filled by :meth:`run` from the restored states."""
        self.runner = ZoneRunner(
            self.clock, self.zones, sources, self.outputs, self.progress, units=self.units
        )
        self.persistence = Persistence(
            self.store,
            self.clock,
            lambda: {n: r.state for n, r in self.zones.items()},
            lambda: {n: r.program.model for n, r in self.zones.items()},
            lambda: {n: loop.runtime.memory for n, loop in self.sources.sources.items()},
        )
        self.sources = SourceRunner(
            site,
            self.clock,
            self.outputs,
            self.progress,
            tz=self.tz,
            publish_interval_s=self.publisher.interval_s,
            inputs_ready=self.runner.inputs_ready,
            on_step=self.persistence.note_source,
        )
        """The heat sources (``heat_sources``), each on its own loop."""
        self.outputs.add(self.sources.writer_outputs())
        outdoor = site.site.outdoor_point
        if outdoor is not None:
            point = site.point(outdoor)  # an input: the config checks refuse anything else
            if isinstance(point, ModbusInput | MqttInput):
                self.runner.outdoor_point = (outdoor, point.reliability.stale_after_s)
        self.supervisor = Supervisor(self.clock, on_failure=self._task_failed)
        self.restarts = self.supervisor.restarts
        """Restarts per task name (tests and status)."""
        self.alarms = AlarmBook(site, self.prefix, self.tz)
        """The zones' alarms, evaluated after each step (published, and the BMS face's bits)."""
        self.session: BrokerSession | None = None
        if site.broker is not None:
            self.session = BrokerSession(
                site.broker,
                self.prefix,
                self.clock,
                publisher=self.publisher,
                mqtt_points=self.mqtt_points,
                zones={z.name: z for z in site.zones},
                apply=self._apply_parsed,
                units=self.units,
                tz=self.tz,
                refusals=(CommandRejected,),
                alarms=self.alarms,
                durability=lambda: self.store.status,
                program_next=self._program_next,
                sources=self.sources if self.sources.sources else None,
            )
            self.sources.on_change = self.session.wake
        # After each step: the published view, persistence, then the embedder's hook.
        self.runner.subscribe(self._publish_step)
        self.runner.subscribe(self.sources.note_zone)
        self.runner.subscribe(lambda r: self.persistence.note(r.zone, r.state))
        self.runner.subscribe(
            lambda r: self.persistence.note_model(r.zone, self.zones[r.zone].program.model)
        )
        self.history = HistoryRecorder.for_site(
            site, state_dir if state_dir is not None else site.site.state_dir
        )
        """Each zone's ticks into SQLite off the control path (None: ``history`` disabled)."""
        self.runner.subscribe(self._record_history)
        if on_tick is not None:
            self.runner.subscribe(on_tick)
        self.runner.on_command(lambda _zone: self.persistence.mark_dirty())

    # ------------------------------------------------------------------ wiring

    def _build_io(
        self,
    ) -> tuple[dict[str, ModbusLink], MqttPoints, dict[str, InputSource], dict[str, SafeSink]]:
        """One ModbusLink per link with points, the MQTT points, and who serves each point."""
        site = self.site
        modbus_inputs: dict[str, list[ModbusInput]] = {link.name: [] for link in site.links}
        modbus_outputs: dict[str, list[ModbusOutput]] = {link.name: [] for link in site.links}
        mqtt_inputs: list[MqttInput] = []
        mqtt_outputs: list[MqttOutput] = []
        for point in site.points:
            if isinstance(point, ModbusInput):
                modbus_inputs[point.link].append(point)
            elif isinstance(point, ModbusOutput):
                modbus_outputs[point.link].append(point)
            elif isinstance(point, MqttInput):
                mqtt_inputs.append(point)
            else:
                mqtt_outputs.append(point)
        links = {
            link.name: ModbusLink(
                link, modbus_inputs[link.name], modbus_outputs[link.name], clock=self.clock
            )
            for link in site.links
            if modbus_inputs[link.name] or modbus_outputs[link.name]
        }
        mqtt_points = MqttPoints(mqtt_inputs, mqtt_outputs, clock=self.clock)
        sources: dict[str, InputSource] = {}
        sinks: dict[str, SafeSink] = {}
        for link in links.values():
            sources.update(dict.fromkeys(link.input_names(), link))
            sinks.update(dict.fromkeys(link.output_names(), link))
        sources.update(dict.fromkeys(mqtt_points.input_names(), mqtt_points))
        sinks.update(dict.fromkeys(mqtt_points.output_names(), mqtt_points))
        return links, mqtt_points, sources, sinks

    def _restore(self, relays: dict[str, bool | None]) -> None:
        """The zones' states (saved and checked, or fresh), each resumed from its output as
        found on the device; each output is held as found until its zone decides."""
        saved = None
        if self.carried is not None:  # a reload: the states in memory, the outputs as commanded
            saved = self.carried.states
            read = {point: on for point, on in relays.items() if on is not None}
            relays = {**self.carried.relays, **read}
        restored_zones = restore_states(
            self.site, self.store, self.clock.now(), relays, saved=saved
        )
        for name, restored in restored_zones.items():
            zone = self.site.zone(name)
            self.zones[name] = ZoneRuntime(
                zone, restored.settings, restored.controller, restored.state, self.tz,
                calendar=self.site.calendar_for(name),
                warm_up=restored_warm_up(self.store, name),
            )
            for point, on in outputs_as_found(zone, restored.state):
                self.outputs.hold_as_found(point, on)
            self.publisher.describe(
                name,
                description_payload(
                    zone, restored.settings, units=self.units,
                    publish_interval_s=self.publisher.interval_s,
                ),
            )
            self.persistence.saved_as(name, restored.state)
        now = self.clock.now()
        if self.carried is not None:  # a reload: each kept source's state in memory
            held = self.sources.resume(relays, now, carried=self.carried.sources)
        else:  # a start: each source's history from the state file
            held = self.sources.resume(
                relays, now, memories=restored_sources(self.site, self.store, now)
            )
        for point, on in held.items():
            self.outputs.hold_as_found(point, on)

    async def _journal_switch(self, zone: str, point: str, on: bool) -> None:
        runtime = self.zones.get(zone)
        if runtime is not None:
            await asyncio.to_thread(self.store.record_switch, zone, runtime.state)

    def _start_tasks(self, start: Starter) -> None:
        """Every task of the service, named; ``control`` ones are cancelled before the
        outputs go safe, the others after."""
        start("outputs", self.outputs.run, True)
        for name, link in self.links.items():
            poll = functools.partial(
                link.run, on_cycle=self._check_links, commanded=self.outputs.commanded
            )
            start(f"modbus-poll:{name}", poll, True)
        for runtime in self.zones.values():
            self.progress.register(f"zone:{runtime.name}", self._allowed_gap(runtime))
            loop = functools.partial(self.runner.run_zone, runtime)
            start(f"zone:{runtime.name}", loop, True)
        for name in self.sources.sources:
            self.progress.register(owner(name), self._source_gap())
            start(owner(name), functools.partial(self.sources.run_source, name), True)
        start("persist", self.persistence.run, False)
        interval = watchdog_interval_s()
        if interval is not None:
            feed = functools.partial(watchdog_loop, self.progress, self.clock, interval)
            start("watchdog", feed, False)
        if self.session is not None:
            start("broker", self.session.run, False)
            start("publish", self.session.publish_loop, False)
            start("mqtt-points", self.session.mqtt_points_loop, False)
        if self.site.bms is not None:
            start("bms", self._bms_loop, False)

    # ------------------------------------------------------------------ public

    def apply_command(self, zone: str, field: str, value: Any) -> None:
        """Apply a checked command to a zone now (see :meth:`ZoneRunner.apply_command`)."""
        self.runner.apply_command(zone, field, value)

    async def run(self, stop: asyncio.Event) -> None:
        """Run until ``stop`` is set, then stop cleanly: outputs safe, ``offline``, state saved.

        Raises :class:`~roomloop.io.broker.BrokerSetupError` at once, before any output is
        touched, when a TLS or password file or variable of the broker section is missing
        (the site's mistake: retrying could never connect).
        """
        if self.site.broker is not None:
            from roomloop.io.broker import check_broker_files

            check_broker_files(self.site.broker)
        log.info(
            "service.starting",
            site=self.site.name,
            zones=len(self.site.zones),
            heat_sources=len(self.site.heat_sources),
            links=len(self.links),
            broker=None
            if self.site.broker is None
            else f"{self.site.broker.host}:{self.site.broker.port}",
            clock=self.clock.kind,
        )
        async with contextlib.AsyncExitStack() as stack:
            for link in self.links.values():
                await stack.enter_async_context(link)
            if self.history is not None:  # its writer thread; flushed (bounded) at the exit
                await stack.enter_async_context(self.history)
            # Each output read as it is before any zone resumes (restart.py): no start-up pulse.
            self._restore(await read_output_states(self.links.values()))
            control: list[asyncio.Task[None]] = []
            others: list[asyncio.Task[None]] = []
            stopped_cleanly = False
            try:
                async with asyncio.TaskGroup() as group:

                    def start(
                        name: str, body: Callable[[], Awaitable[None]], is_control: bool
                    ) -> None:
                        task = group.create_task(self.supervisor.supervise(name, body), name=name)
                        (control if is_control else others).append(task)

                    self._start_tasks(start)
                    others.append(group.create_task(self._ready_once(), name="ready"))
                    await stop.wait()
                    if self.handover is not None:  # a reload (reload.py): no safe stop, no offline
                        await self.handover.stop(self, control)
                    else:
                        log.info("service.stopping", site=self.site.name)
                        notify("STOPPING=1")
                        await cancel_and_wait(self.clock.io, control, STOP_TASKS_S)
                        await self._stop_outputs_and_session()
                    stopped_cleanly = True
                    # bounded and repeated, as for control: the task group's exit waits for
                    # every task, and one that lost its cancellation would hold the stop
                    await cancel_and_wait(self.clock.io, others, STOP_TASKS_S)
            finally:
                if not stopped_cleanly:
                    # Cancelled from outside, or something escaped the task group: the
                    # outputs still go safe (the links are still open here), bounded.
                    await self._stop_after_unexpected_exit([*control, *others])
                await self.persistence.save_final()
        log.info("service.stopped" if self.handover is None else "service.handed_over",
                 site=self.site.name)

    async def _stop_outputs_and_session(self) -> None:
        await self.outputs.stop_safe()
        if self.session is not None:
            await self.session.announce_offline()

    async def _stop_after_unexpected_exit(self, tasks: Sequence[asyncio.Task[None]]) -> None:
        """The stop's output and broker steps when ``run`` ends other than by ``stop``."""
        log.warning("service.stopping_unexpectedly", site=self.site.name)
        notify("STOPPING=1")
        try:
            await cancel_and_wait(self.clock.io, tasks, STOP_TASKS_S)
            await self._stop_outputs_and_session()
        except Exception:
            log.exception("service.stop_failed")

    # ------------------------------------------------------------------ glue

    def _apply_parsed(self, command: Command) -> None:
        self.runner.apply_command(command.zone, command.field, command.value, until=command.until)

    def _program_next(self, zone: str, now: float) -> float | None:
        """When the zone's program next changes level (None: never), for ``next-change``."""
        runtime = self.zones.get(zone)
        if runtime is None:
            return None
        change = runtime.program.cursor.at(now)[1]
        return None if change is None else change.at

    def _task_failed(self, task: str) -> None:
        if task.startswith("zone:"):
            zone = task[len("zone:") :]
            self.runner.zone_failed(zone)
            runtime = self.zones.get(zone)
            if runtime is not None:
                self.sources.zone_failed(zone, runtime.zone.safe_state == "on")
        elif task.startswith("source:"):
            self.sources.failed(task[len("source:") :])

    def _allowed_gap(self, runtime: ZoneRuntime) -> float:
        """Clock seconds a zone loop may go without progress before the watchdog starves."""
        return runtime.zone.tick_s + self.ready_wait_s + self.watchdog_grace_s

    def _source_gap(self) -> float:
        """Clock seconds a source loop may go without progress before the watchdog starves."""
        return SOURCE_TICK_S + self.ready_wait_s + self.watchdog_grace_s

    def _publish_step(self, report: TickReport) -> None:
        """The zone's step as the publisher shows it; wakes the publish task."""
        runtime = self.zones[report.zone]
        zone = runtime.zone
        point = zone.output if zone.output is not None else zone.cooling.output  # type: ignore[union-attr]
        out_state = self.outputs.state(point)
        verdict = None if out_state is None else out_state.verdict
        cooling = self._output_view(zone.cooling.output) if zone.cooling is not None else None
        changeover = self._output_view(zone.changeover.output)
        # whether the read-back agrees with what was written (None: not known, no read-back);
        # any of the zone's outputs disagreeing raises the alarm
        verdicts = [verdict] + [v.verdict for v in (cooling, changeover) if v is not None]
        agrees = zone_outputs_agree(verdicts)
        self.alarms.observe(report.zone, report.outputs, output_confirmed=agrees, now=report.at)
        state = report.state
        self.publisher.update(
            ZoneView(
                zone=report.zone,
                outputs=report.outputs,
                at=report.at,
                output_point=point,
                output_verdict=verdict,
                output_read_back=None if out_state is None else out_state.confirmed,
                hold_until=state.hold_until,
                next_change=report.next_change if state.mode == "auto" else None,
                fail_safe_policy=runtime.settings.fail_safe_policy,
                persistence=self.store.status,
                early_start=runtime.program.decision,
                output_commanded=None if out_state is None else out_state.wanted,
                override=override_of(state, report.next_change),
                program_level=state.scheduled_level,
                window_1h_s=min(3600.0, max(0.0, report.at - state.started_at)),
                cooling_output=cooling,
                changeover_output=changeover,
            )
        )
        if self.session is not None:
            self.session.wake()

    def _output_view(self, point: str | None) -> OutputView | None:
        """What the writer knows of one more output of a zone (None: no such output)."""
        if point is None:
            return None
        known = self.outputs.state(point)
        if known is None:
            return OutputView(point)
        return OutputView(point, known.wanted, known.confirmed, known.verdict)

    async def _bms_loop(self) -> None:
        """The BMS face: its reads come from the zones, its writes go the commands' way."""
        from roomloop.bms.face import BmsFace  # pymodbus's server side only when serving

        zones = ServiceZones(self.zones, self.alarms, self.clock.now)
        face = BmsFace(self.site, zones, self.apply_command, clock=self.clock.now)
        await face.run(sleep=self.clock.sleep)

    def _record_history(self, report: TickReport) -> None:
        if self.history is not None:
            point = self.runner.outdoor_point
            outdoor = None if point is None else (point[0], self.runner.outdoor_c(report.at))
            self.history.record(report.zone, report.at, report.outputs, report.state, outdoor)

    def _check_links(self) -> None:
        """Zones start once every link was polled once (answered or not); READY once all answer."""
        links = self.links.values()
        if all(link.cycles > 0 for link in links):
            self.runner.inputs_ready.set()
            if all(link.up for link in links):
                self._links_up.set()

    async def _ready_once(self) -> None:
        """READY=1 once every link answers, or after ``ready_wait_s`` (a dead link blocks none)."""
        if self.links:
            with contextlib.suppress(TimeoutError):
                async with timeout(self.clock, self.ready_wait_s):
                    await self._links_up.wait()
        self.runner.inputs_ready.set()
        down = [name for name, link in self.links.items() if not link.up]
        self.ready.set()
        sources = len(self.sources.sources)
        status = f"STATUS=controlling {len(self.zones)} zone(s)"
        notify("READY=1", status + (f", {sources} heat source(s)" if sources else ""))
        log.info("service.ready", zones=len(self.zones), sources=sources, links_down=down)
