"""The controllers roomloop is compared with, in the same sans-IO shape as ours.

Each takes the zone's :class:`~roomloop.core.settings.ZoneSettings` (set points and
the heating type's tuning, exactly what roomloop's controller gets) and is
stepped by the simulator through :class:`~roomloop.core.types.ZoneInputs` and
:class:`~roomloop.core.types.ZoneOutputs`, exactly like roomloop's own controller.
They are meant to be honest: each is set up the way an experienced engineer would
set it up for the heating type, and none is tuned down.

- :class:`PlainController`: hysteresis on the measured temperature, with the heating
  type's differential and minimum on/off times (the plant's own short-cycle protection).
- :class:`ElectromechanicalController`: the classic bimetal room thermostat: the
  element lags the room air, a fixed heater anticipator (a resistor heated by the
  heat circuit's current) warms the element while the heat is on, a snap switch with
  its differential, no droop compensation.
- :class:`TimeProportionalController`: PI control of the on-fraction over a fixed
  cycle, with a minimum on-time and conditional-integration anti-windup. Its
  published ``droop_k`` is the PI's integral term in K (what plays the droop
  compensation's part there), so plots show it beside ours.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

from roomloop.core.settings import ZoneSettings
from roomloop.core.types import BaselineReason, PointSample, Reason, ZoneInputs, ZoneOutputs

BASELINE_NAMES: tuple[str, ...] = ("plain", "electromechanical", "time-proportional")


def clamped_setpoint(settings: ZoneSettings, level: str) -> float:
    """The level's set point clamped to the zone's limits, as every controller applies it."""
    return min(max(settings.setpoint_for(level), settings.limit_min_c), settings.limit_max_c)


def measured_temperature(samples: tuple[PointSample, ...]) -> float | None:
    """Mean of the samples that carry a value and report ``ok``; ``None`` if there is none."""
    values = [s.value for s in samples if s.value is not None and s.transport == "ok"]
    if not values:
        return None
    return sum(values) / len(values)


def _outputs(
    *,
    demand: bool,
    reason: Reason | BaselineReason,
    temperature: float | None,
    setpoint: float,
    level: str,
    anticipator_k: float = 0.0,
    droop_k: float = 0.0,
) -> ZoneOutputs:
    return ZoneOutputs(
        demand=demand,
        reason=reason,
        temperature=temperature,
        setpoint=setpoint,
        level=level,
        mode="auto",
        anticipator_k=anticipator_k,
        droop_k=droop_k,
    )


@dataclass(frozen=True, slots=True)
class RelayState:
    """The relay and when it last changed (for minimum on/off times)."""

    demand: bool
    changed_at: float


def _min_times_allow(
    relay: RelayState, want: bool, now: float, min_on: float, min_off: float
) -> bool:
    if want == relay.demand:
        return True
    held = now - relay.changed_at
    return held >= (min_on if relay.demand else min_off)


# --------------------------------------------------------------------------- plain


class PlainController:
    """Hysteresis only: on at S - D/2, off at S + D/2, with the heating type's minimum times."""

    def __init__(self, settings: ZoneSettings) -> None:
        self.settings = settings

    def initial_state(self, now: float) -> RelayState:
        return RelayState(demand=False, changed_at=now - 1e9)

    def step(
        self, state: RelayState, inputs: ZoneInputs, now: float
    ) -> tuple[RelayState, ZoneOutputs]:
        s = self.settings
        setpoint = clamped_setpoint(s, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        reason: Reason | BaselineReason
        if temperature is None:
            want, reason = False, "no-temperature"
        elif temperature <= setpoint - s.differential_k / 2:
            want, reason = True, "cut-in"
        elif temperature >= setpoint + s.differential_k / 2:
            want, reason = False, "cut-out"
        else:
            want, reason = state.demand, "hold"
        if not _min_times_allow(state, want, now, s.min_on_s, s.min_off_s):
            want, reason = state.demand, "min-on" if state.demand else "min-off"
        if want != state.demand:
            state = RelayState(demand=want, changed_at=now)
        return state, _outputs(
            demand=state.demand,
            reason=reason,
            temperature=temperature,
            setpoint=setpoint,
            level=inputs.scheduled_level,
        )


# --------------------------------------------------------------------------- electromechanical


@dataclass(frozen=True, slots=True)
class BimetalSettings:
    """The fixed settings of a bimetal thermostat as installed.

    ``element_time_constant_s``: the bimetal coil and its cover lag the room air
    by a few minutes beyond the plant sensor's own lag [recalled from memory].
    ``anticipator_gain_k``: how far the heater anticipator warms the element at
    steady heat; ``anticipator_time_constant_s``: how fast. A well-adjusted
    installation sets the anticipator (its current setting) so the thermostat cycles
    at the heating type's rated cycle rate at 50 % on-time (REFERENCES.md, NEMA DC 3
    rating [trade]); with the gain fixed, the time constant follows from the same
    sizing formula roomloop uses (DESIGN.md).
    """

    element_time_constant_s: float
    anticipator_gain_k: float
    anticipator_time_constant_s: float
    differential_k: float


SELECTION_RULE = (
    "the lowest worst-phase control accuracy on the heating type's built-in plant; among "
    "settings within 0.02 K of it, the lowest recovery overshoot"
)
"""How the baselines' per-type settings were picked from a sweep: the adjustment a careful
installer or commissioning engineer makes on site, never a handicap."""

BIMETAL_ANTICIPATOR_GAIN_K: dict[str, float] = {
    # Swept over 0.55-2 K at the rated cycle rate, SELECTION_RULE applied.
    "forced-air": 0.75,
    "hydronic": 1.0,
    "underfloor": 0.6,
    "electric": 1.0,
    "steam": 1.0,  # the steam plant was not swept: the hydronic value
}
BIMETAL_ELEMENT_TIME_CONSTANT_S = 120.0
"""A bimetal coil under its cover lags the room air by about 5 min [recalled from memory];
the plant's wall sensor already lags 3 min, so the element adds the difference."""


def bimetal_settings(settings: ZoneSettings, gain_k: float | None = None) -> BimetalSettings:
    """The bimetal set up for the zone's heating type (cycle rate and differential)."""
    gain = BIMETAL_ANTICIPATOR_GAIN_K.get(settings.heating, 1.0) if gain_k is None else gain_k
    diff = settings.differential_k
    if gain <= diff:
        raise ValueError("the anticipator gain must exceed the differential")
    tau = 3600.0 / (2.0 * settings.cycle_rate_cph * math.log((gain + diff) / (gain - diff)))
    return BimetalSettings(
        element_time_constant_s=BIMETAL_ELEMENT_TIME_CONSTANT_S,
        anticipator_gain_k=gain,
        anticipator_time_constant_s=tau,
        differential_k=diff,
    )


@dataclass(frozen=True, slots=True)
class BimetalState:
    element_c: float | None
    anticipator_k: float
    demand: bool
    last_now: float | None


class ElectromechanicalController:
    """A bimetal thermostat: element lag, fixed heater anticipator, snap differential, no droop
    compensation, no minimum times (the switch has none)."""

    def __init__(self, settings: ZoneSettings, bimetal: BimetalSettings | None = None) -> None:
        self.settings = settings
        self.bimetal = bimetal if bimetal is not None else bimetal_settings(settings)

    def initial_state(self, now: float) -> BimetalState:
        return BimetalState(element_c=None, anticipator_k=0.0, demand=False, last_now=None)

    def step(
        self, state: BimetalState, inputs: ZoneInputs, now: float
    ) -> tuple[BimetalState, ZoneOutputs]:
        b = self.bimetal
        setpoint = clamped_setpoint(self.settings, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        dt = 0.0 if state.last_now is None else max(0.0, now - state.last_now)
        # Anticipator: exact first-order update with the relay held over the last tick.
        target = b.anticipator_gain_k if state.demand else 0.0
        anticipator = target + (state.anticipator_k - target) * math.exp(
            -dt / b.anticipator_time_constant_s
        )
        element = state.element_c
        if temperature is not None:
            if element is None:
                element = temperature
            else:
                element += (temperature - element) * (
                    1.0 - math.exp(-dt / b.element_time_constant_s)
                )
        reason: Reason | BaselineReason
        if element is None:
            demand, reason = False, "no-temperature"
        else:
            felt = element + anticipator
            if felt <= setpoint - b.differential_k / 2:
                demand, reason = True, "cut-in"
            elif felt >= setpoint + b.differential_k / 2:
                demand, reason = False, "anticipator-cut-out"
            else:
                demand, reason = state.demand, "hold"
        new = BimetalState(
            element_c=element, anticipator_k=anticipator, demand=demand, last_now=now
        )
        return new, _outputs(
            demand=demand,
            reason=reason,
            temperature=temperature,
            setpoint=setpoint,
            level=inputs.scheduled_level,
            anticipator_k=anticipator,
        )


# --------------------------------------------------------------------------- time-proportional


@dataclass(frozen=True, slots=True)
class PiSettings:
    """PI on the on-fraction: u = gain (e + integral / integral_time), e = S - T in K."""

    gain_per_k: float
    integral_time_s: float
    cycle_s: float
    min_on_s: float
    min_off_s: float


PI_TUNING: dict[str, tuple[float, float]] = {
    # (gain per K, integral time s) per heating type: swept over gains 0.125-2 /K and integral
    # times 0.5-4 h on the type's built-in plant, SELECTION_RULE applied.
    "forced-air": (0.125, 2400.0),
    "hydronic": (0.18, 3600.0),
    "underfloor": (1.4, 10800.0),
    "electric": (0.18, 2400.0),
    "steam": (0.18, 3600.0),  # the steam plant was not swept: the hydronic values
}


def pi_settings(
    settings: ZoneSettings, gain_per_k: float | None = None, integral_time_s: float | None = None
) -> PiSettings:
    """PI tuning for the heating type, the cycle at the type's rated cycle rate."""
    default_gain, default_ti = PI_TUNING.get(settings.heating, (0.5, 3600.0))
    return PiSettings(
        gain_per_k=default_gain if gain_per_k is None else gain_per_k,
        integral_time_s=default_ti if integral_time_s is None else integral_time_s,
        cycle_s=3600.0 / settings.cycle_rate_cph,
        min_on_s=settings.min_on_s,
        min_off_s=settings.min_off_s,
    )


@dataclass(frozen=True, slots=True)
class PiState:
    integral_k_s: float
    """Integral of the error (K s); the on-fraction is gain (e + integral / Ti)."""
    cycle_start: float | None
    on_until: float
    duty: float
    last_now: float | None


class TimeProportionalController:
    """PI control of the on-fraction over a fixed cycle.

    At each cycle's start the on-time is ``duty x cycle``; an on-time shorter than the
    minimum on-time is skipped, and an off-time shorter than the minimum off-time
    becomes a full cycle on. Anti-windup by conditional integration: the integral
    only moves while the output is not saturated, or when the error drives it back
    out of saturation.
    """

    def __init__(self, settings: ZoneSettings, pi: PiSettings | None = None) -> None:
        self.settings = settings
        self.pi = pi if pi is not None else pi_settings(settings)

    def initial_state(self, now: float) -> PiState:
        return PiState(integral_k_s=0.0, cycle_start=None, on_until=now, duty=0.0, last_now=None)

    def _duty(self, error: float, integral: float) -> float:
        return self.pi.gain_per_k * (error + integral / self.pi.integral_time_s)

    def step(self, state: PiState, inputs: ZoneInputs, now: float) -> tuple[PiState, ZoneOutputs]:
        p = self.pi
        setpoint = clamped_setpoint(self.settings, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        if temperature is None:
            new = replace(state, on_until=now, last_now=now)
            return new, _outputs(
                demand=False,
                reason="no-temperature",
                temperature=None,
                setpoint=setpoint,
                level=inputs.scheduled_level,
            )
        error = setpoint - temperature
        dt = 0.0 if state.last_now is None else max(0.0, now - state.last_now)
        integral = state.integral_k_s
        raw = self._duty(error, integral)
        if (0.0 < raw < 1.0) or (raw >= 1.0 and error < 0) or (raw <= 0.0 and error > 0):
            integral += error * dt
        # Keep the integral where it alone could ask for 0..100 % (a second anti-windup bound).
        top = p.integral_time_s / p.gain_per_k
        integral = min(max(integral, 0.0), top)
        cycle_start, on_until, duty = state.cycle_start, state.on_until, state.duty
        if cycle_start is None or now >= cycle_start + p.cycle_s - 1e-9:
            cycle_start = now
            duty = min(max(self._duty(error, integral), 0.0), 1.0)
            on_time = duty * p.cycle_s
            if on_time < p.min_on_s:
                on_time = 0.0
            elif p.cycle_s - on_time < p.min_off_s:
                on_time = p.cycle_s
            on_until = now + on_time
        demand = now < on_until - 1e-9
        new = PiState(
            integral_k_s=integral,
            cycle_start=cycle_start,
            on_until=on_until,
            duty=duty,
            last_now=now,
        )
        return new, _outputs(
            demand=demand,
            reason="pulse" if demand else "pause",
            temperature=temperature,
            setpoint=setpoint,
            level=inputs.scheduled_level,
            droop_k=integral / p.integral_time_s,
        )


def make_baseline(
    name: str, settings: ZoneSettings
) -> PlainController | ElectromechanicalController | TimeProportionalController:
    """The baseline ``name`` (one of :data:`BASELINE_NAMES`) set up for the zone ``settings``."""
    if name == "plain":
        return PlainController(settings)
    if name == "electromechanical":
        return ElectromechanicalController(settings)
    if name == "time-proportional":
        return TimeProportionalController(settings)
    raise KeyError(name)
