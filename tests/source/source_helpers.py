"""Shared helpers of the heat-source tests: drive a SourceLogic tick by tick."""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import dataclass

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
