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

Each runs either call: heating (the default, from the zone's heating tuning) or cooling (a
:class:`CallTuning` from the zone's cooling tuning, :func:`call_tuning` with ``mode="cool"``),
the rules mirrored: cooling cuts in above the band and out below it, the PI works on T - S,
and the electromechanical thermostat's cooling anticipator heats the element while the
cooling is off, so the cooling starts earlier (REFERENCES.md [trade]: common practice, no
source), and cools off while it runs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import cast

from roomloop.core.settings import LEVEL_NAMES, SettingsError, ZoneSettings
from roomloop.core.types import (
    BaselineReason,
    CoolingOutputs,
    DualZoneOutputs,
    PointSample,
    Reason,
    ZoneInputs,
    ZoneOutputs,
)

BASELINE_NAMES: tuple[str, ...] = ("plain", "electromechanical", "time-proportional")


@dataclass(frozen=True, slots=True)
class CallTuning:
    """The call a baseline switches, heating or cooling, and that call's own tuning.

    ``kind`` is the heating type or the cooling type (the key of the per-type tables below);
    ``setpoints`` the call's set point per level (a level without one makes no call: a
    cooling zone at protection without an overheat limit).
    """

    cooling: bool
    kind: str
    differential_k: float
    cycle_rate_cph: float
    min_on_s: float
    min_off_s: float
    setpoints: dict[str, float | None]

    def setpoint_for(self, settings: ZoneSettings, level: str) -> float | None:
        """The level's set point clamped to the zone's limits, as every controller applies it."""
        value = self.setpoints.get(level)
        if value is None:
            return None
        return min(max(value, settings.limit_min_c), settings.limit_max_c)


def call_tuning(settings: ZoneSettings, mode: str = "heat") -> CallTuning:
    """The zone's heating call (``mode="heat"``) or its cooling call (``"cool"``; a
    :class:`~roomloop.core.settings.SettingsError` if the zone has none)."""
    if mode != "cool":
        return heating_tuning(settings)
    cs = settings.cooling
    if cs is None:
        raise SettingsError(f"zone {settings.name!r} has no cooling call")
    return CallTuning(
        cooling=True,
        kind=cs.type,
        differential_k=cs.differential_k,
        cycle_rate_cph=cs.cycle_rate_cph,
        min_on_s=cs.min_on_s,
        min_off_s=cs.min_off_s,
        setpoints={level: cs.setpoint_for(level) for level in LEVEL_NAMES},
    )


def heating_tuning(settings: ZoneSettings) -> CallTuning:
    """The heating call of the zone ``settings``."""
    return CallTuning(
        cooling=False,
        kind=settings.heating,
        differential_k=settings.differential_k,
        cycle_rate_cph=settings.cycle_rate_cph,
        min_on_s=settings.min_on_s,
        min_off_s=settings.min_off_s,
        setpoints={level: settings.setpoint_for(level) for level in LEVEL_NAMES},
    )


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
    setpoint: float | None,
    level: str,
    anticipator_k: float = 0.0,
    droop_k: float = 0.0,
    cooling: bool = False,
) -> ZoneOutputs:
    """The outputs of a baseline's step; ``demand`` is the call it switches.

    In cooling the heating call is off and the cooling part carries the call (changeover
    ``cool``), with the nearest of the core's reasons (the baseline's own is ``reason``);
    the heating set point shown is then NaN (the call has none), as is a cooling set point
    at a level without one.
    """
    shown = math.nan if setpoint is None else setpoint
    if not cooling:
        return ZoneOutputs(
            demand=demand,
            reason=reason,
            temperature=temperature,
            setpoint=shown,
            level=level,
            mode="auto",
            anticipator_k=anticipator_k,
            droop_k=droop_k,
        )
    return DualZoneOutputs(
        demand=False,
        reason=reason,
        temperature=temperature,
        setpoint=math.nan,
        level=level,
        mode="auto",
        anticipator_k=0.0,
        droop_k=0.0,
        cooling=CoolingOutputs(
            demand=demand,
            reason=_core_reason(reason, demand),
            setpoint=setpoint,
            changeover="cool",
            side="cool",
            call="cool" if demand else None,
            changeover_output=None,
            anticipator_k=anticipator_k,
            droop_k=droop_k,
        ),
    )


def _core_reason(reason: Reason | BaselineReason, on: bool) -> Reason:
    """The core's nearest reason for a baseline's: a cut-out by the anticipator is a cut-out,
    holding the band, a PI's pulse or pause holds toward the other edge."""
    if reason == "anticipator-cut-out":
        return "cut-out"
    if reason in ("hold", "pulse", "pause"):
        return "on-to-cut-out" if on else "off-to-cut-in"
    return cast(Reason, reason)  # the rest are the core's own


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
    """Hysteresis only: on at S - D/2, off at S + D/2 (cooling: on at S + D/2, off at
    S - D/2), with the heating (cooling) type's minimum times."""

    def __init__(self, settings: ZoneSettings, call: CallTuning | None = None) -> None:
        self.settings = settings
        self.call = call if call is not None else heating_tuning(settings)

    def initial_state(self, now: float) -> RelayState:
        return RelayState(demand=False, changed_at=now - 1e9)

    def step(
        self, state: RelayState, inputs: ZoneInputs, now: float
    ) -> tuple[RelayState, ZoneOutputs]:
        s = self.call
        setpoint = s.setpoint_for(self.settings, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        reason: Reason | BaselineReason
        if temperature is None:
            want, reason = False, "no-temperature"
        elif setpoint is None:
            want, reason = False, "hold"
        elif s.cooling:
            if temperature >= setpoint + s.differential_k / 2:
                want, reason = True, "cut-in"
            elif temperature <= setpoint - s.differential_k / 2:
                want, reason = False, "cut-out"
            else:
                want, reason = state.demand, "hold"
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
            cooling=s.cooling,
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
    sizing formula roomloop uses (DESIGN.md). The cooling anticipator (a fixed resistor
    energised while the cooling is off) is the same first-order law with the call reversed,
    so the same formula sizes it from the cooling type's cycle rate.
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
    # cooling anticipators, swept over 0.55-2 K on the cooling type's built-in plant (cooling
    # protocol, seed 1), SELECTION_RULE applied: both at the sweep's low end, since the
    # cooling anticipator's mean bias G x (1 - duty) over-cools the room at light load
    "direct-expansion": 0.55,
    "chilled-water": 0.55,
}
BIMETAL_ELEMENT_TIME_CONSTANT_S = 120.0
"""A bimetal coil under its cover lags the room air by about 5 min [recalled from memory];
the plant's wall sensor already lags 3 min, so the element adds the difference."""


def bimetal_settings(
    settings: ZoneSettings, gain_k: float | None = None, call: CallTuning | None = None
) -> BimetalSettings:
    """The bimetal set up for the zone's heating type (cycle rate and differential), or for
    the cooling type of ``call``."""
    c = call if call is not None else heating_tuning(settings)
    gain = BIMETAL_ANTICIPATOR_GAIN_K.get(c.kind, 1.0) if gain_k is None else gain_k
    diff = c.differential_k
    if gain <= diff:
        raise ValueError("the anticipator gain must exceed the differential")
    tau = 3600.0 / (2.0 * c.cycle_rate_cph * math.log((gain + diff) / (gain - diff)))
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
    compensation, no minimum times (the switch has none).

    In cooling (a cooling ``call``) the anticipator is the cooling one: it warms the element
    toward ``anticipator_gain_k`` while the cooling is off and lets it cool back while the
    cooling runs; the switch closes at S + D/2 and opens at S - D/2 on the element's felt
    temperature (element + anticipator).
    """

    def __init__(
        self,
        settings: ZoneSettings,
        bimetal: BimetalSettings | None = None,
        call: CallTuning | None = None,
    ) -> None:
        self.settings = settings
        self.call = call if call is not None else heating_tuning(settings)
        self.bimetal = bimetal if bimetal is not None else bimetal_settings(settings, call=call)

    def initial_state(self, now: float) -> BimetalState:
        return BimetalState(element_c=None, anticipator_k=0.0, demand=False, last_now=None)

    def step(
        self, state: BimetalState, inputs: ZoneInputs, now: float
    ) -> tuple[BimetalState, ZoneOutputs]:
        b = self.bimetal
        cooling = self.call.cooling
        setpoint = self.call.setpoint_for(self.settings, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        dt = 0.0 if state.last_now is None else max(0.0, now - state.last_now)
        # Anticipator: exact first-order update with the relay held over the last tick; the
        # heating one is energised while the call is on, the cooling one while it is off.
        energised = state.demand != cooling
        target = b.anticipator_gain_k if energised else 0.0
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
        elif setpoint is None:
            demand, reason = False, "hold"
        else:
            demand, reason = _bimetal_switch(
                element + anticipator, setpoint, b.differential_k / 2, cooling, state.demand
            )
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
            cooling=cooling,
        )


def _bimetal_switch(
    felt: float, setpoint: float, half_differential_k: float, cooling: bool, previous: bool
) -> tuple[bool, BaselineReason | Reason]:
    """The contact after one step: the call starts past one edge of the differential and ends
    past the other (mirrored for a cooling call), and stays as it was between them."""
    low, high = setpoint - half_differential_k, setpoint + half_differential_k
    starts, ends = (felt >= high, felt <= low) if cooling else (felt <= low, felt >= high)
    if starts:
        return True, "cut-in"
    if ends:
        return False, "anticipator-cut-out"
    return previous, "hold"


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
    # cooling types, swept over the same grid on the type's built-in cooling plant (cooling
    # protocol, seed 1), SELECTION_RULE applied
    "direct-expansion": (0.125, 3600.0),
    "chilled-water": (0.18, 3600.0),
}


def pi_settings(
    settings: ZoneSettings,
    gain_per_k: float | None = None,
    integral_time_s: float | None = None,
    call: CallTuning | None = None,
) -> PiSettings:
    """PI tuning for the heating type (or the cooling type of ``call``), the cycle at the
    type's rated cycle rate."""
    c = call if call is not None else heating_tuning(settings)
    default_gain, default_ti = PI_TUNING.get(c.kind, (0.5, 3600.0))
    return PiSettings(
        gain_per_k=default_gain if gain_per_k is None else gain_per_k,
        integral_time_s=default_ti if integral_time_s is None else integral_time_s,
        cycle_s=3600.0 / c.cycle_rate_cph,
        min_on_s=c.min_on_s,
        min_off_s=c.min_off_s,
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
    out of saturation. In cooling the error is T - S (the room above its cooling set point
    asks for cooling); everything else is the same.
    """

    def __init__(
        self, settings: ZoneSettings, pi: PiSettings | None = None, call: CallTuning | None = None
    ) -> None:
        self.settings = settings
        self.call = call if call is not None else heating_tuning(settings)
        self.pi = pi if pi is not None else pi_settings(settings, call=call)

    def initial_state(self, now: float) -> PiState:
        return PiState(integral_k_s=0.0, cycle_start=None, on_until=now, duty=0.0, last_now=None)

    def _duty(self, error: float, integral: float) -> float:
        return self.pi.gain_per_k * (error + integral / self.pi.integral_time_s)

    def step(self, state: PiState, inputs: ZoneInputs, now: float) -> tuple[PiState, ZoneOutputs]:
        p = self.pi
        cooling = self.call.cooling
        setpoint = self.call.setpoint_for(self.settings, inputs.scheduled_level)
        temperature = measured_temperature(inputs.samples)
        if temperature is None or setpoint is None:
            new = replace(state, on_until=now, last_now=now)
            return new, _outputs(
                demand=False,
                reason="no-temperature" if temperature is None else "pause",
                temperature=temperature,
                setpoint=setpoint,
                level=inputs.scheduled_level,
                cooling=cooling,
            )
        error = temperature - setpoint if cooling else setpoint - temperature
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
            cooling=cooling,
        )


def make_baseline(
    name: str, settings: ZoneSettings, call: CallTuning | None = None
) -> PlainController | ElectromechanicalController | TimeProportionalController:
    """The baseline ``name`` (one of :data:`BASELINE_NAMES`) set up for the zone ``settings``,
    on its heating call or on the given ``call``."""
    if name == "plain":
        return PlainController(settings, call)
    if name == "electromechanical":
        return ElectromechanicalController(settings, call=call)
    if name == "time-proportional":
        return TimeProportionalController(settings, call=call)
    raise KeyError(name)
