"""The service: one TaskGroup owning the links, the zones' control loops, outputs and broker.

Tasks (every one named, every one restarted with backoff if it fails):

* ``modbus-poll:<link>`` polls a Modbus link and re-asserts its outputs;
* ``zone:<name>`` runs one zone's control loop at its tick (woken early by a command);
* ``outputs`` writes each zone's wanted output state to its link or topic;
* ``broker``, ``publish`` and ``mqtt-points`` keep the broker session, publish
  the retained state and serve MQTT points (only with a broker in the site);
* ``persist`` saves the zone states when they change; ``watchdog`` feeds systemd.

Control never waits on the broker: a zone loop only hands its decision to the
publisher and wakes it. Until a zone's first decision its output is held at the
zone's safe state; on stop every output goes to its safe state, ``offline`` is
published and the states are saved.

Embedding (the demo, the tests, the benchmark)::

    service = Service(site, clock=SimulatedClock(60), state_dir=path, on_tick=show)
    await service.run(stop_event)
"""

from __future__ import annotations

import asyncio
import contextlib
import functools
import json
import logging
import time
from collections.abc import Awaitable, Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import aiomqtt
import structlog

from roomloop.config.models import (
    ModbusInput,
    ModbusOutput,
    MqttInput,
    MqttOutput,
    Site,
    Zone,
)
from roomloop.core.commands import CommandRejected, apply_command
from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.state import StateFormatError, ZoneState
from roomloop.core.types import PointSample, ZoneInputs, ZoneOutputs
from roomloop.history.recorder import HistoryRecorder
from roomloop.io.modbus import ModbusLink
from roomloop.io.mqtt import MqttPoints
from roomloop.io.ports import OutputState
from roomloop.service.clock import Clock, RealClock
from roomloop.service.commands import Command, CommandHandler
from roomloop.service.notify import Progress, notify, watchdog_interval_s
from roomloop.service.persist import StateStore
from roomloop.service.program import ProgramCursor, Switch
from roomloop.service.publisher import (
    OFFLINE,
    ONLINE,
    Message,
    StatePublisher,
    ZoneView,
    status_topic,
)

log = structlog.get_logger("roomloop.service")

READY_WAIT_S = 15.0
"""Real seconds to wait for the links before declaring READY=1 anyway."""
STOP_OUTPUTS_S = 2.5
"""Real seconds the safe-state writes at stop may take (the whole stop stays under 5 s)."""
STOP_REQUEST_MIN_S = 0.1
"""Real seconds at least for each request of the stop's one try per output."""
STOP_BROKER_S = 1.0
STOP_TASKS_S = 1.5
"""Real seconds the control tasks get to end once cancelled, before the outputs go safe."""
PERIODIC_SAVE_S = 300.0
"""Clock seconds between saves of the slowly drifting terms (droop, learned duty)."""
WATCHDOG_GRACE_S = 30.0
"""Real seconds a zone loop may be late (a slow link, a busy board) before the watchdog starves."""
RESTART_MIN_S = 0.5
RESTART_MAX_S = 30.0


@dataclass(frozen=True, slots=True)
class TickReport:
    """One zone's decision, handed to ``on_tick`` (the demo's live view, the benchmark)."""

    zone: str
    at: float
    outputs: ZoneOutputs
    state: ZoneState


OnTick = Callable[[TickReport], None]


class ZoneRuntime:
    """One zone's settings, controller, state and wanted output, shared by its tasks."""

    def __init__(
        self,
        zone: Zone,
        settings: ZoneSettings,
        controller: ZoneController,
        state: ZoneState,
        tz: ZoneInfo,
    ) -> None:
        self.zone = zone
        self.settings = settings
        self.controller = controller
        self.state = state
        self.outputs: ZoneOutputs | None = None
        self.safe_on = zone.safe_state == "on"
        self.wanted = self.safe_on
        self.decided = False
        self.wake = asyncio.Event()
        self.steps = 0
        self.program = ProgramCursor(zone.program, tz, zone.default_level)

    @property
    def name(self) -> str:
        return self.zone.name


def _persist_key(state: ZoneState) -> str:
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


class Service:
    """The running service for one site; see the module docstring for the tasks it owns."""

    def __init__(
        self,
        site: Site,
        *,
        clock: Clock | None = None,
        state_dir: str | Path | None = None,
        on_tick: OnTick | None = None,
        ready_wait_s: float = READY_WAIT_S,
        watchdog_grace_s: float = WATCHDOG_GRACE_S,
    ) -> None:
        self.site = site
        self.clock: Clock = clock if clock is not None else RealClock()
        self.tz = ZoneInfo(site.site.timezone)
        self.units = site.site.units
        self.prefix = site.topic_prefix
        self.on_tick = on_tick
        self.ready_wait_s = ready_wait_s
        self.watchdog_grace_s = watchdog_grace_s
        self.ready = asyncio.Event()
        """Set once the links are up (or after ``ready_wait_s``): READY=1 under systemd."""
        self.store = StateStore(
            state_dir if state_dir is not None else site.site.state_dir, site.name
        )
        self.progress = Progress()
        self.restarts: dict[str, int] = {}
        """Restarts per task name (tests and status)."""
        self.publisher = StatePublisher(
            self.prefix,
            units=self.units,
            tz=self.tz,
            interval_s=site.broker.publish_interval_s if site.broker else 60.0,
        )
        self._build_io()
        self.zones: dict[str, ZoneRuntime] = {}
        self._persist_dirty = asyncio.Event()
        self._publish_wake = asyncio.Event()
        self._outputs_wake = asyncio.Event()
        self._inputs_ready = asyncio.Event()
        self._links_up = asyncio.Event()
        self._written: dict[str, bool] = {}
        self._last_saved_key: dict[str, str] = {}
        self._save_lock = asyncio.Lock()
        self._write_in_flight: asyncio.Future[bool] | None = None
        self._broker: Any = None
        self.commands: CommandHandler | None = None
        # history (issue 11): one recorder, entered in run(), fed after each zone step
        self.history = HistoryRecorder.for_site(
            site, state_dir if state_dir is not None else site.site.state_dir
        )

    # ------------------------------------------------------------------ wiring

    def _build_io(self) -> None:
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
        self.links: dict[str, ModbusLink] = {
            link.name: ModbusLink(
                link, modbus_inputs[link.name], modbus_outputs[link.name], clock=self.clock.now
            )
            for link in site.links
            if modbus_inputs[link.name] or modbus_outputs[link.name]
        }
        self.mqtt_points = MqttPoints(mqtt_inputs, mqtt_outputs, clock=self.clock.now)
        self._source: dict[str, ModbusLink | MqttPoints] = {}
        self._sink: dict[str, ModbusLink | MqttPoints] = {}
        for link in self.links.values():
            for name in link.input_names():
                self._source[name] = link
            for name in link.output_names():
                self._sink[name] = link
        for name in self.mqtt_points.input_names():
            self._source[name] = self.mqtt_points
        for name in self.mqtt_points.output_names():
            self._sink[name] = self.mqtt_points

    def _load_zones(self, now: float) -> None:
        saved = self.store.load()
        for zone in self.site.zones:
            settings = ZoneSettings.from_site(self.site, zone.name)
            controller = ZoneController(settings)
            state = controller.initial_state(now)
            raw = saved.get(zone.name)
            if raw is not None:
                try:
                    state = ZoneState.from_json(json.dumps(raw))
                except StateFormatError as exc:
                    log.warning("persist.zone_state_rejected", zone=zone.name, reason=str(exc))
                else:
                    log.info("persist.zone_restored", zone=zone.name, mode=state.mode)
                    # The output was held at its safe state from the restart on.
                    state = controller.resume(state, now, relay_on=zone.safe_state == "on")
            runtime = ZoneRuntime(zone, settings, controller, state, self.tz)
            self.zones[zone.name] = runtime
            self._last_saved_key[zone.name] = _persist_key(state)

    # ------------------------------------------------------------------ public

    def apply_command(self, zone: str, field: str, value: Any) -> None:
        """Apply a checked command to a zone now (the broker's handler and in-process callers).

        Raises :class:`CommandRejected` when the control core refuses it; nothing changes then.
        """
        runtime = self.zones[zone]
        now = self.clock.now()
        runtime.state = apply_command(runtime.settings, runtime.state, field, value, now)
        log.info("command.applied", zone=zone, field=field, value=value)
        self._persist_dirty.set()
        runtime.wake.set()

    def snapshot(self) -> dict[str, ZoneOutputs | None]:
        """The latest decision of every zone (None before its first)."""
        return {name: z.outputs for name, z in self.zones.items()}

    async def run(self, stop: asyncio.Event) -> None:
        """Run until ``stop`` is set, then stop cleanly: outputs safe, ``offline``, state saved.

        Raises :class:`~roomloop.io.broker.BrokerSetupError` at once, before any output is
        touched, when a TLS or password file or variable of the broker section is missing
        (the site's mistake: retrying could never connect).
        """
        if self.site.broker is not None:
            from roomloop.io.broker import check_broker_files

            check_broker_files(self.site.broker)
        now = self.clock.now()
        self._load_zones(now)
        log.info(
            "service.starting",
            site=self.site.name,
            zones=len(self.zones),
            links=len(self.links),
            broker=None
            if self.site.broker is None
            else f"{self.site.broker.host}:{self.site.broker.port}",
            clock_speed=self.clock.speed,
        )
        async with contextlib.AsyncExitStack() as stack:
            for link in self.links.values():
                await stack.enter_async_context(link)
            if self.history is not None:  # history: writer thread, flushed at stop
                await stack.enter_async_context(self.history)
            control: list[asyncio.Task[None]] = []
            others: list[asyncio.Task[None]] = []
            stopped_cleanly = False
            try:
                async with asyncio.TaskGroup() as group:

                    def start(
                        name: str, body: Callable[[], Awaitable[None]], into: list[Any]
                    ) -> None:
                        into.append(group.create_task(self._supervised(name, body), name=name))

                    start("outputs", self._output_loop, control)
                    for name, link in self.links.items():
                        start(
                            f"modbus-poll:{name}", functools.partial(self._poll_loop, link), control
                        )
                    for runtime in self.zones.values():
                        self.progress.register(f"zone:{runtime.name}", self._allowed_gap(runtime))
                        start(
                            f"zone:{runtime.name}",
                            functools.partial(self._zone_loop, runtime),
                            control,
                        )
                    start("persist", self._persist_loop, others)
                    others.append(group.create_task(self._ready_once(), name="ready"))
                    if watchdog_interval_s() is not None:
                        start("watchdog", self._watchdog_loop, others)
                    if self.site.broker is not None:
                        start("broker", self._broker_loop, others)
                        start("publish", self._publish_loop, others)
                        start("mqtt-points", self._mqtt_points_loop, others)
                    await stop.wait()
                    log.info("service.stopping", site=self.site.name)
                    notify("STOPPING=1")
                    await _cancel_and_wait(control, STOP_TASKS_S)
                    await self._stop_outputs()
                    await self._announce_offline()
                    stopped_cleanly = True
                    for task in others:
                        task.cancel()
            finally:
                if not stopped_cleanly:
                    # Cancelled from outside, or something escaped the task group: the
                    # outputs still go safe (the links are still open here), bounded.
                    await self._stop_after_unexpected_exit([*control, *others])
                await self._save_final()
        log.info("service.stopped", site=self.site.name)

    async def _stop_after_unexpected_exit(self, tasks: Sequence[asyncio.Task[None]]) -> None:
        """The stop's output and broker steps when ``run`` ends other than by ``stop``."""
        log.warning("service.stopping_unexpectedly", site=self.site.name)
        notify("STOPPING=1")
        try:
            await _cancel_and_wait(tasks, STOP_TASKS_S)
            await self._stop_outputs()
            await self._announce_offline()
        except Exception:
            log.exception("service.stop_failed")

    async def _save_final(self) -> None:
        """The last save at stop, on every exit path."""
        try:
            await self._save(self.clock.now())
        except Exception:
            log.exception("persist.final_save_failed")

    # ------------------------------------------------------------------ supervision

    async def _supervised(self, name: str, body: Callable[[], Awaitable[None]]) -> None:
        """Run ``body``; if it fails or ends, log it and start it again after a growing pause."""
        delay = RESTART_MIN_S
        while True:
            started = time.monotonic()
            try:
                await body()
            except asyncio.CancelledError:
                raise
            except Exception as exc:
                log.exception(
                    "service.task_failed", task=name, error=str(exc) or type(exc).__name__
                )
            else:
                log.error("service.task_ended", task=name)
            if name.startswith("zone:"):
                self._zone_failed(name[len("zone:") :])
            if time.monotonic() - started > 60.0:
                delay = RESTART_MIN_S
            self.restarts[name] = self.restarts.get(name, 0) + 1
            log.info("service.task_restarting", task=name, in_s=delay)
            await asyncio.sleep(delay)
            delay = min(delay * 2, RESTART_MAX_S)

    def _zone_failed(self, zone: str) -> None:
        """A zone whose loop broke holds its output at the safe state until it decides again."""
        runtime = self.zones.get(zone)
        if runtime is not None:
            runtime.wanted = runtime.safe_on
            runtime.decided = False
            self._outputs_wake.set()

    def _allowed_gap(self, runtime: ZoneRuntime) -> float:
        """Real seconds a zone loop may go without progress before the watchdog starves."""
        return runtime.zone.tick_s / self.clock.speed + self.ready_wait_s + self.watchdog_grace_s

    # ------------------------------------------------------------------ links

    async def _poll_loop(self, link: ModbusLink) -> None:
        await link.run(sleep=self.clock.sleep, on_cycle=self._check_links)

    def _check_links(self) -> None:
        """Zones start once every link was polled once (answered or not); READY once all answer."""
        links = self.links.values()
        if all(link.cycles > 0 for link in links):
            self._inputs_ready.set()
            if all(link.connected for link in links):
                self._links_up.set()

    async def _ready_once(self) -> None:
        """READY=1 once every link answers, or after ``ready_wait_s`` (a dead link blocks none)."""
        if self.links:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(self.ready_wait_s):
                    await self._links_up.wait()
        self._inputs_ready.set()
        down = [name for name, link in self.links.items() if not link.connected]
        self.ready.set()
        notify("READY=1", f"STATUS=controlling {len(self.zones)} zone(s)")
        log.info("service.ready", zones=len(self.zones), links_down=down)

    # ------------------------------------------------------------------ zones

    def _samples(self, names: Sequence[str], now: float) -> tuple[PointSample, ...]:
        cache: dict[int, dict[str, PointSample]] = {}
        out: list[PointSample] = []
        for name in names:
            source = self._source.get(name)
            if source is None:
                out.append(PointSample(name, None, None, "comm-failure"))
                continue
            samples = cache.get(id(source))
            if samples is None:
                samples = source.samples(now)
                cache[id(source)] = samples
            out.append(samples.get(name, PointSample(name, None, None, "comm-failure")))
        return tuple(out)

    async def _zone_loop(self, runtime: ZoneRuntime) -> None:
        name = f"zone:{runtime.name}"
        await self._inputs_ready.wait()
        zone = runtime.zone
        backup_name = zone.fail_safe.backup_point
        while True:
            now = self.clock.now()
            level, next_change = runtime.program.at(now)
            inputs = ZoneInputs(
                samples=self._samples(zone.inputs, now),
                scheduled_level=level,
                backup=None if backup_name is None else self._samples([backup_name], now)[0],
            )
            runtime.state, outputs = runtime.controller.step(runtime.state, inputs, now)
            runtime.outputs = outputs
            runtime.steps += 1
            if not runtime.decided or outputs.demand != runtime.wanted:
                runtime.wanted = outputs.demand
                runtime.decided = True
                self._outputs_wake.set()
            self._after_step(runtime, outputs, now, next_change)
            if self.history is not None:  # history: queue the tick, never waits
                self.history.record(runtime.name, now, outputs, runtime.state)
            self.progress.beat(name)
            runtime.wake.clear()
            await self._sleep_or_wake(zone.tick_s, runtime.wake)

    async def _sleep_or_wake(self, seconds: float, wake: asyncio.Event) -> None:
        if wake.is_set():
            return
        sleeper = asyncio.ensure_future(self.clock.sleep(seconds))
        waiter = asyncio.ensure_future(wake.wait())
        try:
            await asyncio.wait((sleeper, waiter), return_when=asyncio.FIRST_COMPLETED)
        finally:
            sleeper.cancel()
            waiter.cancel()

    def _after_step(
        self, runtime: ZoneRuntime, outputs: ZoneOutputs, now: float, next_change: Switch | None
    ) -> None:
        zone = runtime.zone
        sink = self._sink.get(zone.output)
        out_state = sink.output_state(zone.output) if sink is not None else None
        view = ZoneView(
            zone=runtime.name,
            outputs=outputs,
            at=now,
            output_point=zone.output,
            output_verdict=None if out_state is None else out_state.verdict,
            output_confirmed=None if out_state is None else out_state.confirmed,
            hold_until=runtime.state.hold_until,
            next_change=next_change if runtime.state.mode == "auto" else None,
            fail_safe_policy=runtime.settings.fail_safe_policy,
        )
        self.publisher.update(view)
        self._publish_wake.set()
        key = _persist_key(runtime.state)
        if key != self._last_saved_key.get(runtime.name):
            self._persist_dirty.set()
        if self.on_tick is not None:
            try:
                self.on_tick(TickReport(runtime.name, now, outputs, runtime.state))
            except Exception:
                log.exception("service.on_tick_failed", zone=runtime.name)

    # ------------------------------------------------------------------ outputs

    async def _output_loop(self) -> None:
        """Write each zone's wanted output when it changes (safe state until its first decision).

        Every write runs in its own task, so a slow device holds up only its own
        outputs (and, through the link's lock, the others on its link), never another
        zone's. Two writes of one output queue on the output's lock, the newest wins.
        A write that fails is not retried here: the link (or the MQTT points)
        re-asserts every commanded output whose last write failed, on its poll.
        """
        writers: set[asyncio.Task[None]] = set()
        try:
            while True:
                self._outputs_wake.clear()
                for runtime in self.zones.values():
                    point = runtime.zone.output
                    sink = self._sink.get(point)
                    if sink is None or self._written.get(point) == runtime.wanted:
                        continue
                    wanted = runtime.wanted
                    self._written[point] = wanted
                    task = asyncio.create_task(
                        self._write_output(runtime, sink, wanted, runtime.decided),
                        name=f"output:{point}",
                    )
                    writers.add(task)
                    task.add_done_callback(writers.discard)
                await self._outputs_wake.wait()
        finally:
            for task in writers:
                task.cancel()

    async def _write_output(
        self, runtime: ZoneRuntime, sink: ModbusLink | MqttPoints, on: bool, decided: bool
    ) -> None:
        point = runtime.zone.output
        try:
            state = await sink.set_output(point, on)
        except Exception as exc:  # a bug below us: the poll's re-assert still retries the write
            log.exception(
                "output.write_crashed", zone=runtime.name, point=point, error=str(exc) or repr(exc)
            )
            return
        log.info(
            "output.switched",
            zone=runtime.name,
            point=point,
            on=on,
            verdict=state.verdict,
            decided=decided,
        )

    async def _stop_outputs(self) -> None:
        """Every output to its zone's safe state at once, within ``STOP_OUTPUTS_S``.

        All safe writes start together. On a Modbus link each output gets one short
        try (no retries) for its write and its read-back, the writes first, so a slow
        gateway still sees every output's write once within the budget. Every output
        not confirmed safe is named in the log.
        """
        on_link: dict[int, int] = {}
        for runtime in self.zones.values():
            sink = self._sink.get(runtime.zone.output)
            if isinstance(sink, ModbusLink):
                on_link[id(sink)] = on_link.get(id(sink), 0) + 1

        async def one(runtime: ZoneRuntime) -> OutputState | None:
            point = runtime.zone.output
            sink = self._sink.get(point)
            if sink is None:
                return None
            if isinstance(sink, ModbusLink):
                # A write and a read-back per output share the link's half of the budget.
                share = STOP_OUTPUTS_S / (2 * on_link[id(sink)])
                timeout_s = max(STOP_REQUEST_MIN_S, min(sink.link.timeout_s, share))
                return await sink.set_output_once(point, runtime.safe_on, timeout_s)
            return await sink.set_output(point, runtime.safe_on)

        runtimes = list(self.zones.values())
        for runtime in runtimes:
            runtime.wanted = runtime.safe_on
        tasks = [
            asyncio.create_task(one(r), name=f"safe:{r.zone.output}") for r in runtimes
        ]
        _, pending = await asyncio.wait(tasks, timeout=STOP_OUTPUTS_S)
        for task in pending:
            task.cancel()
        if pending:
            await asyncio.wait(pending, timeout=0.2)
        not_safe: list[str] = []
        for runtime, task in zip(runtimes, tasks, strict=True):
            if not task.done() or task.cancelled():
                verdict = "no answer in time"
            elif task.exception() is not None:
                verdict = repr(task.exception())
            else:
                result = task.result()
                verdict = "no output" if result is None else result.verdict
            confirmed = verdict in ("ok", "unverified", "pending", "no output")
            if not confirmed:
                not_safe.append(runtime.zone.output)
            log.log(
                logging.INFO if confirmed else logging.ERROR,
                "output.safe_state",
                zone=runtime.name,
                point=runtime.zone.output,
                on=runtime.safe_on,
                verdict=verdict,
                confirmed=confirmed,
            )
        if not_safe:
            log.error("service.outputs_not_confirmed_safe", points=not_safe)

    # ------------------------------------------------------------------ broker

    async def _broker_loop(self) -> None:
        from roomloop.io.broker import BrokerConnection, LastWill

        assert self.site.broker is not None
        self.commands = CommandHandler(
            self.prefix,
            {name: r.zone for name, r in self.zones.items()},
            self._apply_checked,
            units=self.units,
            tz=self.tz,
            rate_per_min=self.site.broker.command_rate_per_min,
            refusals=(CommandRejected,),
        )
        self._broker = BrokerConnection(
            self.site.broker,
            will=LastWill(status_topic(self.prefix), OFFLINE),
            backoff_min_s=0.5,
            backoff_max_s=30.0,
        )
        await self._broker.run(
            self._on_message, on_connect=self._on_connect, on_disconnect=self.mqtt_points.detach
        )

    def _apply_checked(self, command: Command) -> None:
        self.apply_command(command.zone, command.field, command.value)

    async def _on_connect(self, client: Any) -> None:
        assert self.commands is not None
        topics = [*self.commands.topics(), *self.mqtt_points.topics()]
        for topic in topics:
            await client.subscribe(topic, qos=1)
        await client.publish(status_topic(self.prefix), ONLINE, qos=1, retain=True)
        self.publisher.forget_sent()
        self.mqtt_points.attach(client)
        await self.mqtt_points.publish_commands(client)
        self._publish_wake.set()
        log.info("broker.online", prefix=self.prefix, subscriptions=len(topics))

    async def _on_message(self, message: Any) -> None:
        topic = str(message.topic)
        payload = message.payload
        if isinstance(payload, str):
            payload = payload.encode()
        elif not isinstance(payload, bytes | bytearray):
            payload = b"" if payload is None else str(payload).encode()
        now = self.clock.now()
        if self.mqtt_points.handle(topic, payload, now):
            return
        assert self.commands is not None
        answer = self.commands.handle(
            topic,
            bytes(payload),
            retained=bool(message.retain),
            now=now,
            monotonic=time.monotonic(),
        )
        if answer is None:
            if message.retain and topic.startswith(f"{self.prefix}/zone/"):
                log.info("command.retained_ignored", topic=topic)
            return
        log.info("command.answered", topic=topic, answer=answer.payload)
        client = self._broker.client if self._broker is not None else None
        if client is not None:
            try:
                async with asyncio.timeout(5.0):
                    await client.publish(answer.topic, answer.payload, qos=1, retain=False)
            except Exception as exc:
                log.warning("command.answer_failed", topic=answer.topic, error=str(exc))

    async def _publish_loop(self) -> None:
        """Send due retained messages; never blocks a zone (they only set an event)."""
        interval = self.publisher.interval_s
        while True:
            client = self._broker.client if self._broker is not None else None
            if client is not None:
                now = self.clock.now()
                try:
                    for message in self.publisher.due(now):
                        await self._send(client, message)
                        self.publisher.sent(message, now)
                except (aiomqtt.MqttError, TimeoutError, OSError) as exc:
                    # The broker went away mid-round; after the reconnect everything is resent.
                    log.debug("broker.publish_interrupted", error=str(exc) or type(exc).__name__)
            self._publish_wake.clear()
            await self._sleep_or_wake(min(interval, 30.0), self._publish_wake)
            await asyncio.sleep(0.05)  # coalesce a burst of zone updates into one round

    async def _send(self, client: Any, message: Message) -> None:
        async with asyncio.timeout(10.0):
            await client.publish(message.topic, message.payload, qos=1, retain=message.retain)

    async def _mqtt_points_loop(self) -> None:
        if not (self.mqtt_points.inputs or self.mqtt_points.outputs):
            await asyncio.Event().wait()  # nothing to serve; stay as a (sleeping) task
            return
        while True:
            await self.mqtt_points.tick(self.clock.now())
            await asyncio.sleep(1.0)

    async def _announce_offline(self) -> None:
        client = self._broker.client if self._broker is not None else None
        if client is None:
            return
        try:
            async with asyncio.timeout(STOP_BROKER_S):
                now = self.clock.now()
                for message in self.publisher.due(now):
                    await self._send(client, message)
                await client.publish(status_topic(self.prefix), OFFLINE, qos=1, retain=True)
        except Exception as exc:
            log.warning("broker.offline_not_sent", error=str(exc) or type(exc).__name__)
        else:
            log.info("broker.offline", prefix=self.prefix)

    # ------------------------------------------------------------------ persistence

    async def _save(self, now: float) -> None:
        """Write the zone states if they changed since the last write (the store compares).

        The snapshot is taken on the loop; the write and its fsyncs run in a thread, so
        a slow SD card stalls no zone loop. One write at a time, in order: a write whose
        caller was cancelled is still waited for before the next one starts.
        """
        async with self._save_lock:
            if self._write_in_flight is not None:
                with contextlib.suppress(Exception):
                    await asyncio.shield(self._write_in_flight)
            zones = {name: json.loads(r.state.to_json()) for name, r in self.zones.items()}
            keys = {name: _persist_key(r.state) for name, r in self.zones.items()}
            write = asyncio.ensure_future(asyncio.to_thread(self.store.save, zones, now))
            self._write_in_flight = write
            try:
                written = await asyncio.shield(write)
            except OSError as exc:
                log.error("persist.save_failed", path=str(self.store.path), error=str(exc))
                return
            self._last_saved_key.update(keys)
            if written:
                log.debug("persist.saved", path=str(self.store.path))

    async def _persist_loop(self) -> None:
        while True:
            with contextlib.suppress(TimeoutError):
                async with asyncio.timeout(PERIODIC_SAVE_S / self.clock.speed):
                    await self._persist_dirty.wait()
            await asyncio.sleep(0.05)  # one write for a burst (a command and the switch it causes)
            self._persist_dirty.clear()
            await self._save(self.clock.now())

    # ------------------------------------------------------------------ systemd

    async def _watchdog_loop(self) -> None:
        interval = watchdog_interval_s()
        if interval is None:
            return
        while True:
            stuck = self.progress.stuck()
            if stuck:
                log.error("service.loops_stuck", loops=stuck)
            else:
                notify("WATCHDOG=1")
            await asyncio.sleep(interval)


async def run_service(
    site: Site,
    *,
    state_dir: str | Path | None = None,
    clock: Clock | None = None,
    stop: asyncio.Event | None = None,
    on_tick: OnTick | None = None,
) -> Service:
    """Run the service until ``stop`` is set (forever without one); returns the stopped service."""
    service = Service(site, clock=clock, state_dir=state_dir, on_tick=on_tick)
    await service.run(stop if stop is not None else asyncio.Event())
    return service


async def _cancel_and_wait(tasks: Sequence[asyncio.Task[None]], within_s: float) -> None:
    """Cancel ``tasks`` and wait for them, cancelling again any that swallowed the request.

    A library's own ``wait_for`` can lose a cancellation that arrives just as its reply
    does (seen with pymodbus on Python 3.11), which left a poll task running and the
    stop waiting forever. Here the wait is bounded and the request repeated; whatever
    still runs after ``within_s`` is named in the log, and the stop goes on regardless.
    """
    deadline = time.monotonic() + within_s
    pending = {task for task in tasks if not task.done()}
    while pending:
        for task in pending:
            task.cancel()
        left = deadline - time.monotonic()
        if left <= 0:
            log.error(
                "service.tasks_not_stopping",
                tasks=sorted(task.get_name() for task in pending),
                within_s=within_s,
            )
            return
        _, pending = await asyncio.wait(pending, timeout=min(0.25, left))
