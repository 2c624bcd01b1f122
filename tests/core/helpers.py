"""Shared helpers for the core tests: building settings and driving a controller."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from typing import Any

from roomloop.core import PointSample, ZoneController, ZoneInputs, ZoneOutputs, ZoneSettings
from roomloop.core.state import ZoneState

POINT = "temperature"


def settings(**changes: Any) -> ZoneSettings:
    """A forced-air zone with one input point, with any field replaced."""
    base = ZoneSettings.for_heating_type("forced-air")
    return replace(base, **changes)


def sample(value: float | None, at: float | None, name: str = POINT) -> ZoneInputs:
    if value is None:
        return ZoneInputs((PointSample(name, None, None, "comm-failure"),))
    return ZoneInputs((PointSample(name, value, at),))


def run(
    controller: ZoneController,
    temperature: Callable[[float, bool], float | None],
    *,
    start: float = 0.0,
    end: float,
    tick: float,
    state: ZoneState | None = None,
) -> list[tuple[float, ZoneOutputs, ZoneState]]:
    """Tick from ``start`` to ``end``; ``temperature(now, relay_on)`` gives each reading."""
    st = controller.initial_state(start) if state is None else state
    trace: list[tuple[float, ZoneOutputs, ZoneState]] = []
    steps = round((end - start) / tick)
    for i in range(1, steps + 1):
        now = start + i * tick
        value = temperature(now, st.relay_on)
        st, out = controller.step(st, sample(value, now), now)
        trace.append((now, out, st))
    return trace


def switch_times(trace: list[tuple[float, ZoneOutputs, ZoneState]], on: bool) -> list[float]:
    """Times at which the relay switched to ``on``."""
    times = []
    previous = False
    for now, out, _ in trace:
        if out.demand != previous and out.demand == on:
            times.append(now)
        previous = out.demand
    return times
