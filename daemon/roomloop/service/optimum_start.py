"""A zone's weekly program with optimum start: the level the zone loop hands to the controller.

:class:`OptimumStartProgram` wraps :class:`~roomloop.service.program.ProgramCursor`: it asks
the cursor for the level in force and the next change, hands both with the mode, the zone
temperature and the outdoor temperature to the pure planner
(:func:`roomloop.core.optimum_start.plan`), and returns the level to use now, so the zone
loop calls it where it called the cursor::

    level, next_change = runtime.program.at(now, mode=..., temperature=..., outdoor=...)

With optimum start disabled it returns the cursor's answer unchanged. The learned warm-up
model is :attr:`model` (a frozen record with ``to_json``/``from_json``) for the state file;
:attr:`decision` says whether an early start runs, since when and why, for the published state.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any
from zoneinfo import ZoneInfo

from roomloop.config.models import CalendarEntry, Level, Zone
from roomloop.core.optimum_start import (
    OptimumStartDecision,
    OptimumStartInputs,
    OptimumStartSettings,
    OptimumStartState,
    WarmUpModel,
    plan,
)
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import PointSample
from roomloop.service.program import ProgramCursor, Switch
from roomloop.units import delta_from_kelvin


def settings_for_zone(zone: Zone, settings: ZoneSettings) -> OptimumStartSettings:
    """The zone's ``optimum_start:`` keys, the heating type's defaults for the rest, and the set
    points as the controller uses them (clamped to the zone's limits)."""
    levels = ("comfort", "standby", "economy", "protection")
    clamped = {
        level: min(max(settings.setpoint_for(level), settings.limit_min_c), settings.limit_max_c)
        for level in levels
    }
    given = zone.optimum_start
    return OptimumStartSettings.for_heating(
        zone.heating,
        enabled=given.enabled,
        earliest_s=given.earliest_s,
        initial_rate_k_per_h=given.initial_rate_k_per_h,
        dead_time_s=given.dead_time_s,
        setpoints=clamped,
    )


def outdoor_value(sample: PointSample | None, now: float, stale_after_s: float) -> float | None:
    """The outdoor temperature if its point reads good and fresh, else None (plan without it)."""
    if sample is None or sample.value is None or sample.received_at is None:
        return None
    if sample.transport != "ok" or now - sample.received_at > stale_after_s:
        return None
    return sample.value


def published(
    decision: OptimumStartDecision | None, tz: ZoneInfo, units: str = "C"
) -> dict[str, Any] | None:
    """The ``early_start`` object of a zone's state JSON (None while optimum start is off):
    whether an early start runs, since when, for which switch and why, and the warm-up rate
    the plan uses (K/h, or F degrees per hour on an F site)."""
    if decision is None:
        return None

    def when(posix: float | None) -> str | None:
        if posix is None:
            return None
        return dt.datetime.fromtimestamp(posix, tz).isoformat(timespec="seconds")

    rate = decision.rate_k_per_h
    if rate is not None and units == "F":
        rate = delta_from_kelvin(rate, "F")
    return {
        "active": decision.early,
        "since": when(decision.since),
        "switch_at": when(decision.switch_at),
        "level": decision.level,
        "reason": decision.reason,
        "rate_per_h": None if rate is None else round(rate, 3),
        "rate_source": decision.rate_source,
    }


class OptimumStartProgram:
    """The program cursor plus optimum start, for one zone's ticks."""

    def __init__(
        self,
        cursor: ProgramCursor,
        settings: OptimumStartSettings,
        model: WarmUpModel | None = None,
    ) -> None:
        self.cursor = cursor
        self.settings = settings
        self.state = OptimumStartState(model=model if model is not None else WarmUpModel())
        self.decision: OptimumStartDecision | None = None

    @classmethod
    def for_zone(
        cls,
        zone: Zone,
        settings: ZoneSettings,
        tz: ZoneInfo,
        calendar: Sequence[CalendarEntry] = (),
        model: WarmUpModel | None = None,
    ) -> OptimumStartProgram:
        cursor = ProgramCursor(zone.program, tz, zone.default_level, calendar)
        return cls(cursor, settings_for_zone(zone, settings), model)

    @property
    def model(self) -> WarmUpModel:
        """The learned warm-up rates: what the state file must keep."""
        return self.state.model

    def at(
        self,
        when: float,
        *,
        mode: str = "auto",
        temperature: float | None = None,
        outdoor: float | None = None,
    ) -> tuple[Level, Switch | None]:
        """The level to use at ``when`` and the program's next change (as the cursor's ``at``)."""
        level, next_change = self.cursor.at(when)
        if not self.settings.enabled:
            return level, next_change
        inputs = OptimumStartInputs(
            mode=mode,
            scheduled_level=level,
            next_switch_at=None if next_change is None else next_change.at,
            next_level=None if next_change is None else next_change.level,
            temperature_c=temperature,
            outdoor_c=outdoor,
        )
        self.state, self.decision = plan(self.settings, self.state, inputs, when)
        return self.decision.level, next_change
