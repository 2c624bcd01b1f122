"""Shared helpers for the core tests: building settings and driving a controller."""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable
from dataclasses import replace
from typing import Any

from roomloop.core import (
    PointSample,
    PointSettings,
    ZoneController,
    ZoneInputs,
    ZoneOutputs,
    ZoneSettings,
)
from roomloop.core.state import ZoneState

POINT = "temperature"
FAST_POINT = PointSettings(POINT, max_rate_k_per_min=1e6, stuck_after_s=None)
"""A point that accepts any jump and is never stuck (for tests that step the temperature)."""


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


class FirstOrderPlant:
    """tau dT/dt = T_target - T with T_target = T_inf while the (delayed) relay is on, T_a off.

    Solved exactly per step; the dead time delays the relay by ``delay`` seconds.
    """

    def __init__(self, tau: float, t_a: float, t_inf: float, start: float, delay: float) -> None:
        self.tau, self.t_a, self.t_inf, self.delay = tau, t_a, t_inf, delay
        self.temperature = start
        self.now = 0.0
        self.changes: deque[tuple[float, bool]] = deque()
        self.effective_on = False

    def advance(self, dt: float, commanded_on: bool) -> None:
        if not self.changes or self.changes[-1][1] != commanded_on:
            self.changes.append((self.now + self.delay, commanded_on))
        end = self.now + dt
        while self.now < end:
            next_change = self.changes[0][0] if self.changes else math.inf
            if next_change <= self.now:
                self.effective_on = self.changes.popleft()[1]
                continue
            upto = min(end, next_change)
            target = self.t_inf if self.effective_on else self.t_a
            self.temperature = target + (self.temperature - target) * math.exp(
                -(upto - self.now) / self.tau
            )
            self.now = upto
