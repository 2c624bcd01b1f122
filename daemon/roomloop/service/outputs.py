"""The output writer: the one owner of each output's wanted state, and the safe stop.

A zone (or a heat source, for its enable and pump outputs) tells the writer what it
wants (:meth:`OutputWriter.want`); the writer writes each output when its wanted state
differs from what it last wrote, every write in its own task, so a slow device holds
up only its own outputs (and, through the link's lock, the others on its link), never
another zone's. Until a zone's first decision,
and again after its loop failed, its output is held at the zone's safe state. A write
that fails is not retried here: on its poll a link re-asserts what the writer
commanded (:meth:`OutputWriter.commanded`) where the last write failed or
``reassert_s`` passed; the MQTT points re-assert their own last command. At stop
every output goes to its safe state at once, within a bounded budget
(:meth:`OutputWriter.stop_safe`).

The sinks are anything with the :class:`SafeSink` methods (a Modbus link, the MQTT
points); the writer never asks which kind it has.
"""

from __future__ import annotations

import asyncio
import logging
from collections.abc import Awaitable, Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Protocol

import structlog

from roomloop.clock import Clock, wait_tasks
from roomloop.config.models import Zone
from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs
from roomloop.io.ports import OutputState

log = structlog.get_logger("roomloop.service")

STOP_OUTPUTS_S = 2.5
"""``clock.io`` seconds the safe-state writes at stop may take (the stop stays under 5 s)."""
STOP_REQUEST_MIN_S = 0.1
"""``clock.io`` seconds at least for each request of the stop's one try per output."""
REQUESTS_PER_SAFE_WRITE = 2
"""A safe write is a write and a read-back: the budget is shared among that many requests."""


BeforeWrite = Callable[[str, str, bool], Awaitable[None]]
"""``(zone, point, on)``: what the writer awaits before handing a write to the sink."""


class SafeSink(Protocol):
    """Where outputs are switched: a Modbus link or the MQTT points."""

    @property
    def request_timeout_s(self) -> float:
        """How long one request of this sink may normally take."""
        ...

    async def set_output(self, name: str, on: bool) -> OutputState: ...

    async def set_output_once(self, name: str, on: bool, timeout_s: float) -> OutputState:
        """One try (no retries), each request at most ``timeout_s``: the stop's write."""
        ...

    def output_state(self, name: str) -> OutputState: ...


@dataclass(frozen=True, slots=True)
class Output:
    """One output point, who switches it and its safe state."""

    zone: str
    """The zone that switches it, or ``source:<name>`` for a heat source's enable or pump."""
    point: str
    safe_on: bool


def zone_outputs(zone: Zone) -> list[Output]:
    """A zone's outputs with their safe states: the heating output (its configured safe
    state), the cooling output (always off: the safe stop of cooling) and the changeover
    output (de-energised; it moves only while both calls are off, and at a stop both are)."""
    found: list[Output] = []
    if zone.output is not None:
        found.append(Output(zone.name, zone.output, zone.safe_state == "on"))
    if zone.cooling is not None:
        found.append(Output(zone.name, zone.cooling.output, False))
    if zone.changeover.output is not None:
        found.append(Output(zone.name, zone.changeover.output, False))
    return found


def outputs_as_found(zone: Zone, state: ZoneState) -> list[tuple[str, bool]]:
    """Each of a zone's outputs as its resumed state has it (held so until the zone decides)."""
    found: list[tuple[str, bool]] = []
    if zone.output is not None:
        found.append((zone.output, state.relay_on))
    c = state.cooling
    if zone.cooling is not None:
        found.append((zone.cooling.output, c is not None and c.relay_on))
    if zone.changeover.output is not None:
        energised = (
            c is not None
            and c.valve is not None
            and c.valve == (zone.changeover.energised_in == "cooling")
        )
        found.append((zone.changeover.output, energised))
    return found


def zone_wants(zone: Zone, outputs: ZoneOutputs) -> list[tuple[str, bool]]:
    """What a zone's step wants of each of its outputs (the changeover output once set)."""
    wants: list[tuple[str, bool]] = []
    if zone.output is not None:
        wants.append((zone.output, outputs.demand))
    cooling = outputs.cooling
    if cooling is not None and zone.cooling is not None:
        wants.append((zone.cooling.output, cooling.demand))
        if zone.changeover.output is not None and cooling.changeover_output is not None:
            wants.append((zone.changeover.output, cooling.changeover_output))
    return wants


class OutputWriter:
    """Owns what every output should be and writes it; see the module docstring."""

    def __init__(
        self,
        clock: Clock,
        outputs: Sequence[Output],
        sinks: Mapping[str, SafeSink],
        before_write: BeforeWrite | None = None,
    ) -> None:
        self.clock = clock
        self.before_write = before_write
        """Awaited before each write: the switch is journalled before the device sees it, so
        a kill right after the write still knows when the relay switched."""
        self.outputs = {o.point: o for o in outputs}
        self.sinks = dict(sinks)
        self.wanted: dict[str, bool] = {o.point: o.safe_on for o in outputs}
        """What each output should be now (its safe state until its zone decides)."""
        self.decided: dict[str, bool] = {o.point: False for o in outputs}
        """Whether ``wanted`` is a zone's decision (False: the safe state held for it)."""
        self.written: dict[str, bool] = {}
        """What was last handed to each output's sink."""
        self._wake = asyncio.Event()

    def add(self, outputs: Sequence[Output]) -> None:
        """More outputs to own (the heat sources'), before :meth:`run` starts."""
        for output in outputs:
            self.outputs[output.point] = output
            self.wanted[output.point] = output.safe_on
            self.decided[output.point] = False

    def want(self, point: str, on: bool) -> None:
        """A zone's decision for its output (cheap when unchanged)."""
        if self.decided.get(point) and self.wanted.get(point) == on:
            return
        self.wanted[point] = on
        self.decided[point] = True
        self._wake.set()

    def hold_as_found(self, point: str, on: bool) -> None:
        """At start: hold the output as it was found on the device (or its safe state when it
        could not be read) until its zone decides, so a restart makes no pulse."""
        if point in self.outputs:
            self.wanted[point] = on
            self.decided[point] = False
            self._wake.set()

    def hold_safe(self, point: str) -> None:
        """A zone whose loop broke: its output back to the safe state until it decides again."""
        output = self.outputs.get(point)
        if output is not None:
            self.wanted[point] = output.safe_on
            self.decided[point] = False
            self._wake.set()

    def commanded(self) -> Mapping[str, bool]:
        """What was handed to each output's sink: what a link re-asserts on its poll."""
        return self.written

    def state(self, point: str) -> OutputState | None:
        """What the output's sink knows of it (None for a point no sink serves)."""
        sink = self.sinks.get(point)
        return sink.output_state(point) if sink is not None else None

    async def run(self) -> None:
        """Write each output when its wanted state changes, until cancelled."""
        writers: set[asyncio.Task[None]] = set()
        try:
            while True:
                self._wake.clear()
                for point, wanted in self.wanted.items():
                    sink = self.sinks.get(point)
                    if sink is None or self.written.get(point) == wanted:
                        continue
                    self.written[point] = wanted
                    task = asyncio.create_task(
                        self._write(point, sink, wanted, self.decided[point]),
                        name=f"output:{point}",
                    )
                    writers.add(task)
                    task.add_done_callback(writers.discard)
                await self._wake.wait()
        finally:
            for task in writers:
                task.cancel()

    async def _write(self, point: str, sink: SafeSink, on: bool, decided: bool) -> None:
        zone = self.outputs[point].zone
        if self.before_write is not None:
            try:
                await self.before_write(zone, point, on)
            except Exception as exc:  # the journal must never stop a write
                log.warning("output.switch_not_journalled", zone=zone, point=point, error=str(exc))
        try:
            state = await sink.set_output(point, on)
        except Exception as exc:  # a bug below us: the poll's re-assert still retries the write
            log.exception(
                "output.write_crashed", zone=zone, point=point, error=str(exc) or repr(exc)
            )
            return
        if state.verdict == "comm-failure":
            # not switched: the poll's re-assert retries the write
            log.warning(
                "output.write_failed", zone=zone, point=point, on=on, detail=state.detail,
                decided=decided,
            )
            return
        if state.verdict == "mismatch":
            # written, but the device reads back something else: not switched as far as we
            # know; the poll's re-assert writes it again
            log.warning(
                "output.readback_disagrees", zone=zone, point=point, on=on,
                detail=state.detail, decided=decided,
            )
            return
        # "ok" (read back as written), "unverified" (no read-back configured) or "pending"
        # (the read-back has not come yet: an MQTT relay's state topic)
        log.info(
            "output.switched", zone=zone, point=point, on=on, verdict=state.verdict, decided=decided
        )

    async def stop_safe(self) -> None:
        """Every output to its zone's safe state at once, within ``STOP_OUTPUTS_S``.

        All safe writes start together. Each output gets one short try (no retries) for
        its write and its read-back, its share of the budget among the outputs of its
        sink, so a slow gateway still sees every output's write once within the budget.
        Every output not confirmed safe is named in the log.
        """
        clock = self.clock.io
        on_sink: dict[int, int] = {}
        for point in self.outputs:
            sink = self.sinks.get(point)
            if sink is not None:
                on_sink[id(sink)] = on_sink.get(id(sink), 0) + 1

        async def one(output: Output) -> OutputState | None:
            sink = self.sinks.get(output.point)
            if sink is None:
                return None
            share = STOP_OUTPUTS_S / (REQUESTS_PER_SAFE_WRITE * on_sink[id(sink)])
            timeout_s = max(STOP_REQUEST_MIN_S, min(sink.request_timeout_s, share))
            return await sink.set_output_once(output.point, output.safe_on, timeout_s)

        outputs = list(self.outputs.values())
        for output in outputs:
            self.wanted[output.point] = output.safe_on
            self.decided[output.point] = False
        tasks = [asyncio.create_task(one(o), name=f"safe:{o.point}") for o in outputs]
        _, pending = await wait_tasks(clock, tasks, STOP_OUTPUTS_S)
        for task in pending:
            task.cancel()
        if pending:
            await wait_tasks(clock, pending, 0.2)
        not_safe: list[str] = []
        for output, task in zip(outputs, tasks, strict=True):
            if not task.done() or task.cancelled():
                verdict = "no answer in time"
            elif task.exception() is not None:
                verdict = repr(task.exception())
            else:
                result = task.result()
                verdict = "no output" if result is None else result.verdict
            confirmed = verdict in ("ok", "unverified", "pending", "no output")
            if not confirmed:
                not_safe.append(output.point)
            log.log(
                logging.INFO if confirmed else logging.ERROR,
                "output.safe_state",
                zone=output.zone,
                point=output.point,
                on=output.safe_on,
                verdict=verdict,
                confirmed=confirmed,
            )
        if not_safe:
            log.error("service.outputs_not_confirmed_safe", points=not_safe)
