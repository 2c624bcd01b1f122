"""The demo's shared boiler: what its coils did, told as events, a live row and a summary.

The demo site's ``heat_sources`` entry makes the service switch the boiler's enable and
pump coils on the served zones' calls. The plant server gates those zones' heat on the
enable coil (:meth:`~roomloop.demo.plant_server.PlantServer.gate`), so the valve opening
time and the minimum off time cost the rooms real heat. This module follows the coils as
the plant server holds them (what the boiler really did, not what the service meant) and
the served zones' decisions:

- a *call* starts when a served zone's relay (its valve) is decided on while none was;
- the boiler's *wait* is from the call to the enable coil going on (the valve opening
  time, plus any minimum off time or starts-per-hour lockout);
- the *overrun* is from the enable coil going off to the pump coil going off.

When the service tells the source's own decision (:class:`SourceOutputs`: its reason,
which valve it waits for, a lockout), the live row shows it.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

from roomloop.config.models import HeatSource, ModbusOutput, Site
from roomloop.core.source import SourceOutputs
from roomloop.demo.plant_server import PlantServer

OutputsOf = Callable[[str], SourceOutputs | None]
"""The service's latest decision of a source by name (None: none yet, or not told)."""


def _clock(at: float, tz: ZoneInfo) -> str:
    return dt.datetime.fromtimestamp(at, tz).strftime("%H:%M")


def _minutes(seconds: float) -> str:
    return f"{seconds / 60:.1f} min"


def _span(values: list[float]) -> str:
    """``3.2 min`` when every value shows the same, else ``3.2 to 5.0 min``."""
    low, high = _minutes(min(values)), _minutes(max(values))
    return low if low == high else f"{low.removesuffix(' min')} to {high}"


@dataclass
class SourceRecord:
    """One heat source of the demo site, as its coils and its zones' decisions went."""

    config: HeatSource
    enable_point: ModbusOutput
    pump_point: ModbusOutput | None
    enable: bool = False
    pump: bool = False
    calling: dict[str, bool] = field(default_factory=dict)
    """Each served zone's latest decision (its valve)."""
    call_since: float | None = None
    first_caller: str | None = None
    starts: list[float] = field(default_factory=list)
    stops: list[float] = field(default_factory=list)
    waits: list[float] = field(default_factory=list)
    """Per start: seconds from the call that it answered to the enable coil going on."""
    overruns: list[float] = field(default_factory=list)
    """Per stop followed by the pump stopping: seconds the pump ran on."""
    fired_s: float = 0.0
    _fired_from: float | None = None
    _stopped_at: float | None = None

    @property
    def name(self) -> str:
        return self.config.name

    @property
    def zones(self) -> list[str]:
        return self.config.local_zones

    # ------------------------------------------------------------------ following

    def zone_decided(self, zone: str, demand: bool, at: float) -> None:
        """A served zone's decision (from the service's tick)."""
        before = any(self.calling.values())
        self.calling[zone] = demand
        if demand and not before:
            self.call_since, self.first_caller = at, zone
        elif not any(self.calling.values()):
            self.call_since = self.first_caller = None

    def coils(
        self,
        enable: bool,
        pump: bool,
        at: float,
        *,
        enable_at: float | None = None,
        pump_at: float | None = None,
    ) -> list[str]:
        """The coils as read at ``at``; the events (text without the clock) of what changed.

        ``enable_at`` / ``pump_at``: when the coil changed, if the server knows (its write's
        arrival), else ``at``, the reading's time.
        """
        pump_at = at if pump_at is None else pump_at
        at = at if enable_at is None else enable_at
        events: list[str] = []
        if enable and not self.enable:
            self.starts.append(at)
            self._fired_from = at
            wait = None if self.call_since is None else at - self.call_since
            if wait is not None:
                self.waits.append(wait)
            if len(self.starts) == 1:
                events.append(self._first_start_text(wait))
        elif self.enable and not enable:
            self.stops.append(at)
            self._stopped_at = at
            if self._fired_from is not None:
                self.fired_s += at - self._fired_from
                self._fired_from = None
            if len(self.stops) == 1:
                events.append(
                    f"{self.name}: stops, no zone calls any more (it fired "
                    f"{_minutes(self.fired_s)}); its pump runs on to carry the heat away"
                )
        if self.pump and not pump and not enable and self._stopped_at is not None:
            self.overruns.append(pump_at - self._stopped_at)
            self._stopped_at = None
            if len(self.overruns) == 1:
                events.append(
                    f"{self.name}: pump stops {_minutes(self.overruns[0])} after the "
                    f"{self.name} (pump overrun {self.config.effective.pump_overrun_s:g} s); "
                    "further starts and stops: the live view and the summary"
                )
        self.enable, self.pump = enable, pump
        return events

    def _first_start_text(self, wait: float | None) -> str:
        timing = self.config.effective
        calling = [z for z, on in self.calling.items() if on]
        text = f"{self.name}: fires for {', '.join(calling) or 'its zones'}"
        if wait is not None and self.first_caller is not None:
            text += (
                f", {_minutes(wait)} after {self.first_caller}'s valve opened (valve opening "
                f"time {timing.valve_opening_s:g} s"
            )
            if wait > timing.valve_opening_s + 30.0:
                text += f"; minimum off time {timing.min_off_s:g} s since the start-up"
            text += ")"
        return text + "; pump on"

    def finish(self, at: float) -> None:
        if self._fired_from is not None:
            self.fired_s += at - self._fired_from
            self._fired_from = None

    # ------------------------------------------------------------------ showing

    def row(self, outputs: SourceOutputs | None, now: float, tz: ZoneInfo) -> str:
        """The source's live line: its decision and reason when told, else its coils."""
        enable, pump = (self.enable, self.pump) if outputs is None else (
            outputs.enable, outputs.pump
        )
        head = f"{self.name:<14}{'FIRING' if enable else 'off':<7}pump {'ON ' if pump else 'off'}"
        calling = [z for z, on in self.calling.items() if on]
        if outputs is None:
            tail = f"calling: {', '.join(calling)}" if calling else "no zone calls"
            return f"{head}  {tail}"
        parts = [outputs.reason]
        if outputs.waiting_for is not None and outputs.waiting_until is not None:
            parts.append(f"{outputs.waiting_for}'s valve until {_clock(outputs.waiting_until, tz)}")
        if outputs.lockout is not None and outputs.lockout_until is not None:
            parts.append(f"{outputs.lockout} until {_clock(outputs.lockout_until, tz)}")
        if outputs.pump_reason in ("overrun", "pre-run", "exercise"):
            text = f"pump {outputs.pump_reason}"
            if outputs.pump_reason == "overrun" and self._stopped_at is not None:
                overrun = self.config.effective.pump_overrun_s
                text += f" until {_clock(self._stopped_at + overrun, tz)}"
            parts.append(text)
        parts.append(f"calling: {', '.join(outputs.calling) or 'none'}")
        parts.append(f"starts in the last hour: {outputs.starts_1h}")
        return f"{head}  " + "; ".join(parts)

    def summary(self, hours: float) -> str:
        timing = self.config.effective
        text = (
            f"{self.name} ({', '.join(self.zones)}): {len(self.starts)} starts in {hours:.1f} h, "
            f"fired {self.fired_s / 3600:.1f} h"
        )
        if self.waits:
            text += (
                f";\n  each start came {_span(self.waits)} after the first valve opened (valve "
                f"opening time {timing.valve_opening_s:g} s, minimum off time "
                f"{timing.min_off_s:g} s)"
            )
        if self.overruns:
            text += (
                f"; its pump ran on {_span(self.overruns)} after each of its "
                f"{len(self.overruns)} stops (overrun {timing.pump_overrun_s:g} s)"
            )
        return text


def wire_sources(site: Site, server: PlantServer) -> dict[str, SourceRecord]:
    """Gate each served zone's heat on its source's enable coil and watch the source's coils."""
    records: dict[str, SourceRecord] = {}
    for config in site.heat_sources:
        enable = site.point(config.output)
        pump = None if config.pump_output is None else site.point(config.pump_output)
        if not isinstance(enable, ModbusOutput) or (
            pump is not None and not isinstance(pump, ModbusOutput)
        ):
            continue  # the demo's plant server serves Modbus coils only
        for zone in config.local_zones:
            server.gate(zone, server, enable.unit_id, enable.address)
        server.watch(f"{config.name}:enable", enable.unit_id, enable.address)
        if pump is not None:
            server.watch(f"{config.name}:pump", pump.unit_id, pump.address)
        records[config.name] = SourceRecord(
            config, enable, pump, calling=dict.fromkeys(config.local_zones, False)
        )
    return records


async def read_coils(server: PlantServer, record: SourceRecord) -> tuple[bool, bool]:
    """The source's enable and pump coils as the plant server holds them."""
    point = record.enable_point
    enable = await server.coil(point.unit_id, point.address) == (point.on_value == 1)
    pump = record.pump_point
    if pump is None:
        return enable, False
    return enable, await server.coil(pump.unit_id, pump.address) == (pump.on_value == 1)


def switch_times(server: PlantServer, record: SourceRecord) -> tuple[float | None, float | None]:
    """When the service's writes last changed the enable and the pump coils."""
    enable = server.changed_at(record.enable_point.unit_id, record.enable_point.address)
    pump = record.pump_point
    return enable, None if pump is None else server.changed_at(pump.unit_id, pump.address)
