"""Control-quality figures of one scored window of a run (DESIGN.md, "The standard simulation
protocol and its figures").

Every figure is computed from the room-air node's true temperature sampled at each
tick, never from the sensor reading, and from the relay state held over each tick.
Control accuracy follows EN 15500 as REFERENCES.md recalls it: CA = |CSD| + CV with
CSD = mean(T) - S and CV = (max(T) - min(T)) / 2.

In cooling the scored call is the cooling call, and the step-response figures turn with
it: the overshoot is how far the room went below the set point after the step back down
(S - min T), the settling time runs until T first comes down to S + 0.5 K.
"""

from __future__ import annotations

import dataclasses
import itertools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any


@dataclass(frozen=True, slots=True)
class PhaseFigures:
    """The figures of one scored window; ``overshoot_k`` and ``settle_s`` only for recovery."""

    setpoint_deviation_k: float
    control_variation_k: float
    control_accuracy_k: float
    cycles_per_hour: float
    on_fraction: float
    shortest_on_s: float | None
    """The shortest complete on run inside the window; ``None`` if there was none."""
    shortest_off_s: float | None
    energy_kwh: float
    overshoot_k: float | None = None
    settle_s: float | None = None
    """From the step until T first reaches set point - 0.5 K (+ 0.5 K in cooling); ``None`` if
    it never does."""

    def to_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {
            "setpoint_deviation_k": self.setpoint_deviation_k,
            "control_variation_k": self.control_variation_k,
            "control_accuracy_k": self.control_accuracy_k,
            "cycles_per_hour": self.cycles_per_hour,
            "on_fraction": self.on_fraction,
            "shortest_on_s": self.shortest_on_s,
            "shortest_off_s": self.shortest_off_s,
            "energy_kwh": self.energy_kwh,
        }
        if self.overshoot_k is not None:
            out["overshoot_k"] = self.overshoot_k
            out["settle_s"] = self.settle_s
        return out


@dataclass(frozen=True, slots=True)
class OverallFigures:
    """DESIGN.md's summary: the worse load phase, the recovery overshoot, total scored energy."""

    control_accuracy_k: float
    """The worse of the two load phases."""
    overshoot_k: float
    cycles_per_hour: float
    """The higher of the two load phases."""
    energy_kwh: float
    """Over the three scored windows."""

    def to_dict(self) -> dict[str, Any]:
        return {
            "control_accuracy_k": self.control_accuracy_k,
            "overshoot_k": self.overshoot_k,
            "cycles_per_hour": self.cycles_per_hour,
            "energy_kwh": self.energy_kwh,
        }


def window_figures(
    room_c: Sequence[float],
    demand: Sequence[bool],
    *,
    tick_s: float,
    start_s: float,
    end_s: float,
    setpoint_c: float,
    heater_w: float,
    step_response: bool = False,
    cooling: bool = False,
) -> PhaseFigures:
    """Figures over the ticks that start in ``[start_s, end_s)``.

    ``room_c[k]`` and ``demand[k]`` belong to the tick starting at ``k * tick_s``
    (temperature at its start, relay held during it). ``heater_w`` is the output of the
    scored call (the cooler's capacity with ``cooling``). With ``step_response`` the
    window starts with a set-point step and the overshoot and settling time are added
    (with ``cooling``, a step down: overshoot below the set point).
    """
    first = math.ceil(start_s / tick_s - 1e-9)
    last = min(math.ceil(end_s / tick_s - 1e-9), len(room_c))
    if last <= first:
        raise ValueError("the window holds no tick")
    temps = room_c[first:last]
    mean = math.fsum(temps) / len(temps)
    high, low = max(temps), min(temps)
    deviation = mean - setpoint_c
    variation = (high - low) / 2.0
    hours = (last - first) * tick_s / 3600.0
    switch_ons = 0
    switches: list[int] = []
    for k in range(max(first, 1), last + (1 if last < len(demand) else 0)):
        if demand[k] != demand[k - 1]:
            switches.append(k)
            if demand[k] and k < last:
                switch_ons += 1
    shortest: dict[bool, float | None] = {True: None, False: None}
    for a, b in itertools.pairwise(switches):
        length = (b - a) * tick_s
        state = bool(demand[a])
        current = shortest[state]
        if current is None or length < current:
            shortest[state] = length
    on_ticks = sum(1 for k in range(first, last) if demand[k])
    figures = PhaseFigures(
        setpoint_deviation_k=deviation,
        control_variation_k=variation,
        control_accuracy_k=abs(deviation) + variation,
        cycles_per_hour=switch_ons / hours,
        on_fraction=on_ticks / (last - first),
        shortest_on_s=shortest[True],
        shortest_off_s=shortest[False],
        energy_kwh=heater_w * on_ticks * tick_s / 3.6e6,
    )
    if not step_response:
        return figures
    settle: float | None = None
    for k in range(first, last):
        reached = room_c[k] <= setpoint_c + 0.5 if cooling else room_c[k] >= setpoint_c - 0.5
        if reached:
            settle = (k - first) * tick_s
            break
    overshoot = setpoint_c - low if cooling else high - setpoint_c
    return dataclasses.replace(figures, overshoot_k=overshoot, settle_s=settle)


def overall_figures(
    low: PhaseFigures, high: PhaseFigures, recovery: PhaseFigures
) -> OverallFigures:
    assert recovery.overshoot_k is not None
    return OverallFigures(
        control_accuracy_k=max(low.control_accuracy_k, high.control_accuracy_k),
        overshoot_k=recovery.overshoot_k,
        cycles_per_hour=max(low.cycles_per_hour, high.cycles_per_hour),
        energy_kwh=low.energy_kwh + high.energy_kwh + recovery.energy_kwh,
    )
