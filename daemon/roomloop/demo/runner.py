"""``roomloop demo``'s run: the demo site, its plants over Modbus TCP, and the real service.

One asyncio task each for the plant server's stepping, the service
(:class:`roomloop.service.app.Service`, the same code ``roomloop run`` uses),
the scenario (a sensor goes silent and comes back) and the status refresh.
The program switch from standby to comfort comes from the site's own weekly
program. Everything runs on one clock: a :class:`PacedClock` for the live view
(``speed`` simulated seconds per real second), or a :class:`VirtualClock` that runs
as fast as the CPU allows (``DemoOptions.virtual``: the tests, on an
:class:`~roomloop.clock.AutojumpLoop`); the same code either way.

The runner knows nothing of terminals: it hands ready-made text to a
:class:`DemoObserver` (events as they happen, status rows about once a real
second) and returns a :class:`DemoResult`; ``roomloop.cli.demo`` draws it.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
import re
import tempfile
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from importlib import resources
from pathlib import Path
from typing import Any, Protocol
from zoneinfo import ZoneInfo

import structlog

from roomloop.clock import Clock, PacedClock, VirtualClock, sleep_until, timeout, wait_for
from roomloop.config.loader import load_yaml_document, site_from_data
from roomloop.config.models import Site
from roomloop.core.types import ZoneOutputs
from roomloop.demo.plant_server import STEP_S, PlantServer, PlantTrace, free_port
from roomloop.demo.sources import (
    OutputsOf,
    SourceRecord,
    read_coils,
    switch_times,
    wire_sources,
)
from roomloop.demo.summary import ZoneSummary, clock_text, summarize_zone
from roomloop.demo.timeline import Timeline
from roomloop.errors import RoomloopError
from roomloop.plant.loader import PLANT_FOR_HEATING, load_plant
from roomloop.plant.spec import PlantSpec
from roomloop.service.app import Service, TickReport

log = structlog.get_logger("roomloop.demo")

DEFAULT_HOURS = 8.0
DEFAULT_SPEED = 480.0
"""8 simulated hours in a minute."""
MAX_SPEED = 3600.0
"""Beyond this a 10 s control tick gets under 3 ms of real time."""
OUTDOOR_C = 2.0
START_ROOM_C = 18.0
"""Every room starts in steady state at its standby set point."""
SILENT_ZONE = "meeting-room"
SERVICE_STOP_S = 15.0
FIRST_DECISION_WAIT_S = 10.0
"""Real seconds at ``speed`` (simulated: times ``speed``) the view waits for every zone."""
SERVICE_CANCEL_S = 5.0
PORT_ATTEMPTS = 3


class DemoError(RoomloopError):
    """The demo could not run (its server could not start, the service failed)."""


class DemoObserver(Protocol):
    """Where the runner's text goes: a live terminal view, or plain lines."""

    def event(self, at: float, text: str) -> None:
        """Something happened at simulated time ``at``; ``text`` starts with its clock time."""

    def status(self, at: float, header: str, rows: Sequence[str]) -> None:
        """The zones now: a header and one row per zone (about once a real second)."""


@dataclass(frozen=True, slots=True)
class DemoOptions:
    hours: float = DEFAULT_HOURS
    speed: float = DEFAULT_SPEED
    broker: tuple[str, int] | None = None
    refresh_s: float = 1.0
    """Real seconds between two status refreshes at ``speed`` (``refresh_s * speed``
    simulated seconds, on a virtual clock too)."""
    virtual: bool = False
    """Run on a virtual clock (needs an AutojumpLoop) instead of pacing at ``speed``."""
    on_clock: Callable[[Clock], None] | None = None
    """Called with the demo's simulated clock before anything runs (log time stamps)."""
    state_dir: str | None = None
    """Keep the state and the history here, with the site file as run (``site.yaml``), for
    ``report`` and ``tune`` afterwards; None: a temporary directory, removed at the end."""


@dataclass
class ZoneRecord:
    """What the service decided for one zone, as the demo follows it."""

    last: TickReport | None = None
    fail_safe_s: float = 0.0
    fail_safe_episodes: int = 0
    reached_after_switch: bool = False
    history: list[tuple[float, float, bool, float]] = field(default_factory=list)
    """(time, set point, fail-safe, anticipator term) per tick, for the plot."""
    decisions: list[tuple[float, bool]] = field(default_factory=list)
    """(time, demand) whenever the decided relay state changed."""


@dataclass
class DemoResult:
    """How the run went: its site and timeline, whether it ran to the end, and the figures."""

    site: Site
    timeline: Timeline
    port: int
    completed: bool
    simulated_s: float
    real_s: float
    summaries: list[ZoneSummary]
    relays_at_stop: dict[str, bool]
    """Each zone's coil as the plant server held it after the service stopped."""
    safe_on: dict[str, bool]
    """Each zone's safe state (on or off)."""
    traces: dict[str, PlantTrace]
    records: dict[str, ZoneRecord]
    started_at: float
    sources: dict[str, SourceRecord] = field(default_factory=dict)
    """The site's heat sources (the boiler), as their coils went."""
    sources_at_stop: dict[str, tuple[bool, bool]] = field(default_factory=dict)
    """Each source's (enable, pump) coils after the service stopped; off is their safe state."""
    watched: dict[str, list[bool]] = field(default_factory=dict)
    """The sources' coils per plant step (``NAME:enable``, ``NAME:pump``), for the plot."""

    def relay_disagreement_s(self, zone: str) -> float:
        """Simulated seconds the zone's coil differed from the service's decision (see
        :func:`disagreement_s`)."""
        return disagreement_s(self.traces[zone], self.started_at, self.records[zone].decisions)

    @property
    def outputs_safe(self) -> bool:
        zones = all(self.relays_at_stop.get(z) == on for z, on in self.safe_on.items())
        return zones and not any(e or p for e, p in self.sources_at_stop.values())


DISAGREEMENT_GRACE_S = 30.0
"""A coil may lag the decision by a write and a plant step; longer runs count."""


def disagreement_s(
    trace: PlantTrace, started_at: float, decisions: Sequence[tuple[float, bool]]
) -> float:
    """Time the coil (what heated the plant) differed from the service's latest decision.

    Only stretches longer than :data:`DISAGREEMENT_GRACE_S` count: the end-to-end check
    that a decision reaches the relay and stays there.
    """
    total = 0.0
    run = 0.0
    index = -1
    for t, relay in zip(trace.time_s, trace.relay, strict=True):
        at = started_at + t
        while index + 1 < len(decisions) and decisions[index + 1][0] <= at:
            index += 1
        wanted = decisions[index][1] if index >= 0 else relay
        if relay != wanted:
            run += STEP_S
        else:
            if run > DISAGREEMENT_GRACE_S:
                total += run
            run = 0.0
    if run > DISAGREEMENT_GRACE_S:
        total += run
    return total


def demo_site_path() -> Path:
    return Path(str(resources.files("roomloop.demo").joinpath("site.yaml")))


def demo_site_timezone() -> str:
    """The demo site's time zone (the CLI stamps log lines in it before the site is built)."""
    data, _ = load_yaml_document(demo_site_path())
    return str(data["site"]["timezone"])


def demo_site(port: int, state_dir: str, broker: tuple[str, int] | None = None) -> Site:
    """The demo site with its gateway on ``127.0.0.1:port`` and, if given, a broker."""
    path = demo_site_path()
    data, lines = load_yaml_document(path)
    data["links"][0]["port"] = port
    data["site"]["state_dir"] = state_dir
    if broker is not None:
        host, broker_port = broker
        data["broker"] = {"host": host, "port": broker_port}
    return site_from_data(data, str(path), lines)


KEPT_SITE = "site.yaml"
"""The demo's site file as run, written into a kept ``--state-dir``."""


def write_kept_site(state_dir: str, port: int) -> Path:
    """The demo site's file with its state_dir and port as run, in ``state_dir``: the ``-c``
    that ``roomloop report`` and ``roomloop tune`` take to read the demo's history."""
    text = demo_site_path().read_text(encoding="utf-8")
    text = re.sub(
        r"(?m)^(\s*state_dir:).*$", lambda m: f"{m.group(1)} {json.dumps(state_dir)}", text,
        count=1,
    )
    text = re.sub(r"(?m)^(\s*port:)\s*1502\b.*$", lambda m: f"{m.group(1)} {port}", text, count=1)
    path = Path(state_dir) / KEPT_SITE
    path.write_text(
        "# Written by 'roomloop demo --state-dir': the demo's site as it ran, its history beside\n"
        "# it; read it with 'roomloop report -c' and 'roomloop tune -c' on this file.\n" + text,
        encoding="utf-8",
    )
    return path


def _plants(site: Site) -> dict[str, PlantSpec]:
    return {z.name: load_plant(PLANT_FOR_HEATING[z.heating]) for z in site.zones}


def _reliability_text(outputs: ZoneOutputs) -> str:
    bad = [v for v in outputs.reliability.values() if v != "ok"]
    return bad[0] if bad else "ok"


STATUS_HEADER = (
    f"{'zone':<14}{'room':>6}{'sensor':>8}{'set':>6} {'level':<9}{'relay':<6}"
    f"{'a K':>5}  {'sensor state':<13} reason"
)


def status_row(zone: str, room_c: float, report: TickReport | None) -> str:
    """One zone's live line: true room air, what the service reads and decides, and why."""
    if report is None:
        return f"{zone:<14}{room_c:>6.2f}  (waiting for the service's first decision)"
    o = report.outputs
    sensor = "--" if o.temperature is None else f"{o.temperature:.1f}"
    relay = "ON" if o.demand else "off"
    reason: str = o.reason
    if o.fail_safe:
        reason = f"FAIL-SAFE {reason}"
    return (
        f"{zone:<14}{room_c:>6.2f}{sensor:>8}{o.setpoint:>6.1f} {o.level:<9}{relay:<6}"
        f"{o.anticipator_k:>5.2f}  {_reliability_text(o):<13} {reason}"
    )


class _Demo:
    """One run's moving parts (see :func:`run_demo`)."""

    def __init__(self, options: DemoOptions, observer: DemoObserver) -> None:
        self.options = options
        self.observer = observer
        self.records: dict[str, ZoneRecord] = {}
        self.tz = ZoneInfo("UTC")
        self.timeline: Timeline | None = None
        self.all_decided = asyncio.Event()
        self._server: PlantServer | None = None
        self.sources: dict[str, SourceRecord] = {}
        self.outputs_of: OutputsOf = lambda _name: None

    def say(self, at: float, text: str) -> None:
        self.observer.event(at, f"[{clock_text(at, self.tz)}] {text}")
        if self._server is not None and self.all_decided.is_set():
            self._emit_status(self._server)

    def on_tick(self, report: TickReport) -> None:
        """The service's decision for a zone: note fail-safe time and tell what changed."""
        record = self.records[report.zone]
        prev = record.last
        o = report.outputs
        record.history.append((report.at, o.setpoint, o.fail_safe, o.anticipator_k))
        if not record.decisions or record.decisions[-1][1] != o.demand:
            record.decisions.append((report.at, o.demand))
        record.last = report
        for source in self.sources.values():
            if report.zone in source.calling:
                source.zone_decided(report.zone, o.demand, report.at)
        if prev is None:
            if all(r.last is not None for r in self.records.values()):
                self.all_decided.set()
            return
        p = prev.outputs
        if p.fail_safe:
            record.fail_safe_s += max(0.0, report.at - prev.at)
        if o.fail_safe and not p.fail_safe:
            record.fail_safe_episodes += 1
            self.say(
                report.at,
                f"{report.zone}: FAIL-SAFE engaged ({o.fail_safe_policy}): "
                f"{o.fail_safe_reason or 'no reliable temperature'}",
            )
        elif p.fail_safe and not o.fail_safe:
            self.say(
                report.at,
                f"{report.zone}: fail-safe ended after {record.fail_safe_s / 60:.0f} min; "
                "normal control on "
                + ("no temperature yet" if o.temperature is None else f"{o.temperature:.1f} C"),
            )
        if o.level != p.level:
            record.reached_after_switch = o.setpoint <= p.setpoint
            self.say(
                report.at,
                f"{report.zone}: program switches {p.level} -> {o.level}, set point "
                f"{p.setpoint:.1f} -> {o.setpoint:.1f} C; relay {'ON' if o.demand else 'off'} "
                f"({o.reason}), anticipator {o.anticipator_k:.2f} K",
            )
        elif (
            not record.reached_after_switch
            and self.timeline is not None
            and report.at >= self.timeline.switch_at
            and o.temperature is not None
            and o.temperature >= o.setpoint - 0.5
        ):
            record.reached_after_switch = True
            minutes = (report.at - self.timeline.switch_at) / 60
            self.say(
                report.at,
                f"{report.zone}: sensor within 0.5 K of {o.setpoint:.1f} C, {minutes:.0f} min "
                f"after the switch; anticipator {o.anticipator_k:.2f} K, relay "
                f"{'ON' if o.demand else 'off'} ({o.reason})",
            )

    async def run(self, stop: asyncio.Event) -> DemoResult:
        if self.options.state_dir:
            return await self._run_in(self.options.state_dir, stop)
        with tempfile.TemporaryDirectory(prefix="roomloop-demo-") as state_dir:
            return await self._run_in(state_dir, stop)

    async def _run_in(self, state_dir: str, stop: asyncio.Event) -> DemoResult:
        server, site = await self._start_server(state_dir)
        self._server = server
        if self.options.state_dir:
            write_kept_site(state_dir, server.port)
        try:
            return await self._run_with(server, site, state_dir, stop)
        finally:
            await server.stop()

    async def _start_server(self, state_dir: str) -> tuple[PlantServer, Site]:
        """The plant server on a free loopback port, and the site pointing at it."""
        options = self.options
        last_error: Exception | None = None
        for _ in range(PORT_ATTEMPTS):
            port = free_port()
            site = demo_site(port, state_dir, options.broker)
            self.tz = ZoneInfo(site.site.timezone)
            try:
                timeline = Timeline.for_run(options.hours, site.zone(SILENT_ZONE), self.tz)
            except ValueError as exc:
                raise DemoError(str(exc)) from None
            self.timeline = timeline
            clock: Clock = (
                VirtualClock(start=timeline.start)
                if options.virtual
                else PacedClock(options.speed, start=timeline.start)
            )
            if options.on_clock is not None:
                options.on_clock(clock)
            server = PlantServer(
                site,
                _plants(site),
                clock,
                outdoor_c=OUTDOOR_C,
                start_room_c=START_ROOM_C,
                port=port,
            )
            try:
                await server.start()
            except (OSError, TimeoutError) as exc:  # the port was taken meanwhile
                last_error = exc
                await server.stop()
                continue
            return server, site
        raise DemoError(f"the demo's Modbus server could not start on loopback: {last_error}")

    def _announce(self, server: PlantServer, site: Site, silent_unit: int) -> None:
        """The run's first lines: the site, where its plants are served, and the plan."""
        assert self.timeline is not None
        timeline = self.timeline
        self.say(
            timeline.start,
            f"demo: site {site.name}, {len(site.zones)} zones ("
            + ", ".join(f"{z.name} {z.heating}" for z in site.zones)
            + f"); plants served on modbus-tcp://127.0.0.1:{server.port}; "
            f"{timeline.hours:g} simulated h at {options_speed(self.options)}x "
            f"(about {timeline.hours * 3600 / self.options.speed:.0f} s)",
        )
        self.say(
            timeline.start,
            f"plan: {clock_text(timeline.switch_at, self.tz)} the program switches standby -> "
            f"comfort; {clock_text(timeline.silence_start, self.tz)}-"
            f"{clock_text(timeline.silence_end, self.tz)} the {SILENT_ZONE} sensor "
            f"(unit {silent_unit}) goes silent",
        )
        if self.options.broker is not None:
            host, port = self.options.broker
            self.say(timeline.start, f"publishing to the broker at {host}:{port} as 'run' does")

    async def _await_service_stop(
        self,
        server: PlantServer,
        service_task: asyncio.Task[None],
        *,
        others: set[asyncio.Task[Any]],
    ) -> None:
        """Wait (bounded) for the service to stop; a stuck stop is a :class:`DemoError` that
        names the outputs as they are and what still runs."""
        try:
            await wait_for(server.clock.io, asyncio.shield(service_task), SERVICE_STOP_S)
        except TimeoutError:
            waiting = _pending_tasks({*others, service_task})
            log.error("demo.service_stop_stuck", within_s=SERVICE_STOP_S, tasks=waiting)
            coils = await server.relays()
            raise DemoError(
                f"the service did not stop within {SERVICE_STOP_S:g} s (outputs now: "
                + ", ".join(f"{z} {'on' if on else 'off'}" for z, on in coils.items())
                + "); still running: "
                + "; ".join(waiting)
            ) from None

    async def _run_with(
        self, server: PlantServer, site: Site, state_dir: str, stop: asyncio.Event
    ) -> DemoResult:
        assert self.timeline is not None
        timeline = self.timeline
        clock = server.clock
        self.records = {z.name: ZoneRecord() for z in site.zones}
        real_start = time.monotonic()  # only for the report's "N h in M s" figure
        silent = server.zone(SILENT_ZONE)
        self._announce(server, site, silent.sensor.unit_id)
        self.sources = wire_sources(site, server)
        service = Service(site, clock=clock, state_dir=state_dir, on_tick=self.on_tick)
        loops = service.sources.sources
        self.outputs_of = lambda name: loops[name].outputs if name in loops else None
        service_stop = asyncio.Event()
        plants = asyncio.create_task(server.run(), name="demo-plants")
        follow = asyncio.create_task(self._follow_sources(server), name="demo-sources")
        service_task = asyncio.create_task(service.run(service_stop), name="demo-service")
        log.info(
            "demo.started",
            site=site.name,
            port=server.port,
            hours=timeline.hours,
            speed=self.options.speed,
        )
        scenario = asyncio.create_task(self._scenario(server, silent.sensor.unit_id))
        refresh = asyncio.create_task(self._refresh(server))
        stopper = asyncio.create_task(stop.wait())
        try:
            await asyncio.wait(
                {scenario, stopper, service_task}, return_when=asyncio.FIRST_COMPLETED
            )
            completed = scenario.done() and not scenario.cancelled()
            if service_task.done():
                raise DemoError(f"the service stopped unexpectedly: {_task_error(service_task)}")
            ended_at = min(clock.now(), timeline.end)
            if not completed:
                self.say(ended_at, "demo: stopping early (interrupted)")
            await server.catch_up()
            # The plants and the view stop with the run; only the service's stop is left.
            await _cancel(plants, scenario, refresh, stopper, follow)
            service_stop.set()
            await self._await_service_stop(
                server, service_task, others={plants, scenario, refresh, stopper}
            )
            relays = await server.relays()
            sources_at_stop = {n: await read_coils(server, r) for n, r in self.sources.items()}
        finally:
            await _cancel(plants, scenario, refresh, stopper, follow)
            if not service_task.done():
                service_stop.set()
                service_task.cancel()
                # Bounded: a service that ignores cancellation must not hang the demo.
                with contextlib.suppress(TimeoutError):
                    await wait_for(clock.io, asyncio.wait({service_task}), SERVICE_CANCEL_S)
        for source in self.sources.values():
            source.finish(ended_at)
        self._emit_status(server, ended_at)
        log.info(
            "demo.stopped", completed=completed, simulated_h=(ended_at - timeline.start) / 3600
        )
        assert server.started_at is not None
        summaries = [
            summarize_zone(
                z.name,
                z.zone.heating,
                z.trace,
                started_at=server.started_at,
                timeline=timeline,
                ended_at=ended_at,
                comfort_c=z.zone.setpoints.comfort,
                heater_w=z.spec.heater_w,
                fail_safe_s=self.records[z.name].fail_safe_s,
                silenced=z.name == SILENT_ZONE,
            )
            for z in server.zones
        ]
        return DemoResult(
            site=site,
            timeline=timeline,
            port=server.port,
            completed=completed,
            simulated_s=ended_at - timeline.start,
            real_s=time.monotonic() - real_start,
            summaries=summaries,
            relays_at_stop=relays,
            safe_on={z.name: z.safe_state == "on" for z in site.zones},
            traces={z.name: z.trace for z in server.zones},
            records=self.records,
            started_at=server.started_at,
            sources=self.sources,
            sources_at_stop=sources_at_stop,
            watched=server.watched,
        )

    async def _scenario(self, server: PlantServer, unit: int) -> None:
        assert self.timeline is not None
        timeline = self.timeline
        await sleep_until(server.clock, timeline.silence_start)
        server.silence(unit)
        self.say(
            server.clock.now(),
            f"{SILENT_ZONE}: its sensor (unit {unit}) goes silent: the gateway answers "
            "'target device failed to respond' (Modbus exception 11)",
        )
        await sleep_until(server.clock, timeline.silence_end)
        server.restore(unit)
        self.say(server.clock.now(), f"{SILENT_ZONE}: its sensor answers again")
        await sleep_until(server.clock, timeline.end)

    async def _follow_sources(self, server: PlantServer) -> None:
        """Read the sources' coils every plant step; tell what changed."""
        while True:
            for record in self.sources.values():
                enable, pump = await read_coils(server, record)
                enable_at, pump_at = switch_times(server, record)
                now = server.clock.now()
                changes = record.coils(enable, pump, now, enable_at=enable_at, pump_at=pump_at)
                for text in changes:
                    self.say(now, text)
            await server.clock.sleep(STEP_S)

    def _rows(self, server: PlantServer) -> list[str]:
        rooms = server.room_temperatures()
        rows = [status_row(name, rooms[name], r.last) for name, r in self.records.items()]
        now = server.clock.now()
        rows += [s.row(self.outputs_of(n), now, self.tz) for n, s in self.sources.items()]
        return rows

    def _header(self, at: float) -> str:
        assert self.timeline is not None
        done = (min(at, self.timeline.end) - self.timeline.start) / 3600
        return (
            f"simulated {clock_text(at, self.tz)}  ({done:.1f} of {self.timeline.hours:g} h, "
            f"{options_speed(self.options)}x)\n{STATUS_HEADER}"
        )

    async def _refresh(self, server: PlantServer) -> None:
        # The first rows once every zone has decided (bounded: show whatever there is after).
        clock = server.clock
        with contextlib.suppress(TimeoutError):
            async with timeout(clock, FIRST_DECISION_WAIT_S * self.options.speed):
                await self.all_decided.wait()
        while True:
            self._emit_status(server)
            await clock.sleep(self.options.refresh_s * self.options.speed)

    def _emit_status(self, server: PlantServer, at: float | None = None) -> None:
        now = server.clock.now() if at is None else at
        self.observer.status(now, self._header(now), self._rows(server))


def options_speed(options: DemoOptions) -> str:
    return f"{options.speed:g}"


async def _cancel(*tasks: asyncio.Task[Any]) -> None:
    for task in tasks:
        task.cancel()
    await asyncio.gather(*tasks, return_exceptions=True)


def _pending_tasks(ours: set[asyncio.Task[Any]]) -> list[str]:
    """The service's tasks that have not ended, each with where it waits (for the error)."""
    out: list[str] = []
    for task in asyncio.all_tasks():
        if task.done() or task in ours or task is asyncio.current_task():
            continue
        frames = task.get_stack()
        where = (
            f"{frames[-1].f_code.co_name} ({Path(frames[-1].f_code.co_filename).name}:"
            f"{frames[-1].f_lineno})"
            if frames
            else "?"
        )
        out.append(f"{task.get_name()} at {where}")
    return out


def _task_error(task: asyncio.Task[None]) -> str:
    if task.cancelled():
        return "cancelled"
    exc = task.exception()
    return "ended" if exc is None else f"{type(exc).__name__}: {exc}"


async def run_demo(options: DemoOptions, observer: DemoObserver, stop: asyncio.Event) -> DemoResult:
    """Run the demo until its end or until ``stop`` is set; the service stops cleanly either way.

    Raises :class:`DemoError` when the demo cannot run.
    """
    if not 0 < options.speed <= MAX_SPEED:
        raise DemoError(f"--speed must be above 0 and at most {MAX_SPEED:g}")
    return await _Demo(options, observer).run(stop)
