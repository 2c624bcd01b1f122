"""Shared helpers of the heat-source tests: drive a SourceLogic tick by tick; watch a device's
coils on a clock."""

from __future__ import annotations

import asyncio
import contextlib
from collections.abc import AsyncIterator, Callable, Iterable
from dataclasses import dataclass
from typing import Any

from roomloop.clock import Clock
from roomloop.core.source import (
    SourceInputs,
    SourceLogic,
    SourceOutputs,
    SourceSettings,
    SourceState,
    ZoneDemand,
)

T0 = 1_767_225_600.0
"""2026-01-01T00:00:00Z, a multiple of every stale period used here."""


@dataclass
class Tick:
    now: float
    demands: tuple[ZoneDemand, ...]
    out: SourceOutputs
    state: SourceState


def local(zone: str, calling: bool, now: float, protection: bool = False) -> ZoneDemand:
    return ZoneDemand(zone, calling, heard_at=now, online=True, protection=protection)


def run(
    settings: SourceSettings,
    demands_at: Callable[[float], Iterable[ZoneDemand]],
    *,
    start: float = T0,
    ticks: int,
    tick_s: float = 10.0,
    startup_s: float | None = None,
) -> list[Tick]:
    """Step the source ``ticks`` times; ``startup_s`` before ``start`` is when it was built
    (default: long enough ago that the start-up minimum off time and overrun are over)."""
    logic = SourceLogic(settings)
    built = start - (startup_s if startup_s is not None else 10 * 3600.0)
    state = logic.initial_state(built)
    # the idle pump does not exercise before the scenario starts unless asked for
    state = SourceState(stopped_at=state.stopped_at, pump_off_since=start)
    out: list[Tick] = []
    for k in range(ticks):
        now = start + k * tick_s
        demands = tuple(demands_at(now))
        state, outputs = logic.step(state, SourceInputs(demands), now)
        out.append(Tick(now, demands, outputs, state))
    return out


def first(ticks: list[Tick], predicate: Callable[[Tick], bool]) -> Tick:
    for tick in ticks:
        if predicate(tick):
            return tick
    raise AssertionError("no tick matched")


class Coils:
    """The device's coils as seen every ``every_s`` of ``clock``: when each changed."""

    def __init__(
        self, server: Any, clock: Clock, count: int = 4, every_s: float = 1.0
    ) -> None:
        self.server, self.clock, self.count, self.every_s = server, clock, count, every_s
        self.now: list[bool] = [False] * count
        self.changes: list[tuple[float, int, bool]] = []

    def first(self, coil: int, on: bool, after: float = 0.0) -> float:
        for at, index, value in self.changes:
            if index == coil and value == on and at >= after:
                return at
        raise AssertionError(f"coil {coil} never went {on} after {after}: {self.changes}")

    @contextlib.asynccontextmanager
    async def watching(self) -> AsyncIterator[Coils]:
        async def run() -> None:
            while True:
                coils = await self.server.get_coils(0, self.count)
                for index, (was, now) in enumerate(zip(self.now, coils, strict=True)):
                    if was != now:
                        self.changes.append((self.clock.now(), index, now))
                self.now = list(coils)
                await self.clock.sleep(self.every_s)

        task = asyncio.create_task(run())
        try:
            yield self
        finally:
            task.cancel()
            with contextlib.suppress(asyncio.CancelledError):
                await task
