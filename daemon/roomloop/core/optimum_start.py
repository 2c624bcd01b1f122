"""Optimum start: heat early before a program switch to a warmer level, by a learned warm-up rate.

The published method (building-automation literature; ASHRAE Guideline 36, "optimal start"
of zone groups [recalled from memory: check the details against the text]): the time needed
to bring a zone from its set-back temperature to the occupied set point is the temperature gap
divided by the zone's warm-up rate (K per hour), learned from the zone's own previous
warm-ups; the start is limited to a maximum early period before occupancy (Guideline 36's
default is 3 hours [recalled from memory]). The warm-up rate falls as it gets colder
outdoors (more of the heater's output goes to the losses): Seem, Armstrong and Hancock,
"Comparison of seven methods for forecasting the time to return from night setback",
ASHRAE Transactions 95(2), 1989, found the outdoor temperature and the initial room
temperature the inputs that matter [recalled from memory].

Here, per zone:

* ``lead = dead_time + gap / rate + settle``, with ``gap`` = the warmer level's set point
  (less :data:`REACHED_K`) minus the room temperature now, ``rate`` the learned warm-up rate
  at the outdoor temperature now, ``dead_time`` the learned time before the room starts to
  rise (transport delay, emitter warm-up), and ``settle`` the heating type's margin for the
  first cycles after a warm-up (a light room on a fast heater dips after it);
* the early start begins at ``switch_at - lead``, never before ``switch_at - earliest_s``,
  only in mode ``auto``, only for a switch to a warmer level; once begun it lasts until the
  switch (it does not flicker off as the room warms);
* each warm-up (early or not) is measured from its start to the room reaching the set point
  (less :data:`REACHED_K`): the dead time is the time until the room has risen
  :data:`DEAD_RISE_K` above its lowest since the start, the rate the rest of the rise over the
  rest of the time; the dead time goes into an exponentially weighted mean, the rate into an
  exponentially weighted mean per outdoor-temperature band (:class:`WarmUpModel`), and the
  estimate at a given outdoor temperature is that band's, else interpolated between the
  nearest learned bands, else the overall mean, else the heating type's initial value.

Sans-IO: frozen dataclasses, time is an argument (POSIX seconds), nothing reads a clock.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, replace
from typing import Any, Literal

Level = Literal["comfort", "standby", "economy", "protection"]

REACHED_K = 0.1
"""A warm-up has reached the set point when the zone temperature is within this of it (the
usual sensor resolution, 0.1 K); the plan aims at the same temperature."""
DEAD_RISE_K = 0.2
"""The room has started to warm when it is this far above its lowest since the start (two
steps of a 0.1 K sensor, so one noisy step does not end the dead time)."""
MIN_RISE_K = 0.5
"""A warm-up of less than this is not measured: the sensor's 0.1 K steps would swamp it."""
MIN_RATE_K_PER_H = 0.05
MAX_RATE_K_PER_H = 30.0
"""Bounds of any rate learned or configured: a measured rate outside them is a sensor fault."""
MAX_DEAD_S = 4 * 3600.0
"""Longest dead time learned or restored."""
MAX_RECOVERY_S = 12 * 3600.0
"""A warm-up still running after this is measured as it stands (a lower bound) and closed."""
BAND_K = 5.0
"""Width of the outdoor-temperature bands the rate is learned in."""
WEIGHT = 0.3
"""Weight of a new warm-up in its band's running mean once the band has a few (EWMA)."""
OUTLIER_FACTOR = 2.0
"""Once a band has 3 warm-ups, a new one counts as at most this factor off its mean
(a morning disturbed by an open window must not undo a week of learning)."""
STATE_VERSION = 1


@dataclass(frozen=True, slots=True)
class HeatingDefaults:
    """A heating type's starting point before anything is learned."""

    initial_rate_k_per_h: float
    dead_time_s: float
    settle_s: float = 0.0
    earliest_s: float = 3 * 3600.0
    """The longest early start: 3 h, the usual maximum of an optimal start (ASHRAE
    Guideline 36 [recalled from memory]), longer for a slow emitter."""


HEATING_DEFAULTS: dict[str, HeatingDefaults] = {
    # Initial rates: at or below the slowest the type's built-in plant (roomloop/plant/builtin)
    # learned in tests/bench/optimum_start.py's month (17 -> 20 C at outdoor -10..10 C:
    # forced-air 2.6-4.1 K/h, electric 1.8-2.1, hydronic 1.6-2.2, underfloor 0.33-0.58, steam
    # 1.7-5.9), so that the first mornings start early rather than late; dead times about the
    # plant's transport delay plus its emitter's first rise.
    # Settle margins: the air of a light room on a fast air heater is warm within half an hour,
    # but its cycles dip below the set point for another hour or two while the cold building
    # mass takes heat (time constant about 3 h on the built-in forced-air plant), so it aims to
    # be warm 2 h before the switch (tests/bench/optimum_start.py: 30 min left a third of the
    # mornings 0.5 K low at the switch, 2 h none of twelve, for 1 % more energy); an electric
    # convector 10 min. Common practice, no source: the published method learns the rate and
    # gives no start values.
    # Earliest start: a screed or a thick slab warms the room 0.15-0.5 K/h (the underfloor and
    # thick-slab plants' learned rates), so a 3 K set-back needs 6-20 h; 9 h lets the early
    # start use a whole 22:00-07:00 night (tests/bench/optimum_start.py: 3 h left 29 and 29 of
    # 30 mornings late on the two plants, 9 h none, for 3-4 % more energy than starting 1 h
    # early) [no source].
    "forced-air": HeatingDefaults(2.0, 300.0, 7200.0),
    "electric": HeatingDefaults(1.5, 180.0, 600.0),
    "hydronic": HeatingDefaults(1.5, 900.0),
    "underfloor": HeatingDefaults(0.4, 2700.0, earliest_s=9 * 3600.0),
    "steam": HeatingDefaults(1.0, 1500.0),
}


@dataclass(frozen=True, slots=True)
class OptimumStartSettings:
    """One zone's optimum-start settings, resolved (config: the zone's ``optimum_start:``)."""

    enabled: bool = False
    earliest_s: float = 3 * 3600.0
    """The early start never begins more than this before the switch."""
    initial_rate_k_per_h: float = 1.5
    dead_time_s: float = 900.0
    """The dead time until one is learned."""
    settle_s: float = 0.0
    """Aim to reach the set point this long before the switch."""
    setpoints: tuple[tuple[str, float], ...] = (
        ("comfort", 20.0), ("standby", 18.0), ("economy", 16.0), ("protection", 7.0),
    )
    """Set point (C) per level, as the controller uses them (clamped to the zone's limits)."""

    def __post_init__(self) -> None:
        if not (math.isfinite(self.earliest_s) and self.earliest_s >= 0):
            raise ValueError(f"earliest_s must be zero or positive, not {self.earliest_s!r}")
        if not MIN_RATE_K_PER_H <= self.initial_rate_k_per_h <= MAX_RATE_K_PER_H:
            raise ValueError(
                f"initial_rate_k_per_h must be within {MIN_RATE_K_PER_H}..{MAX_RATE_K_PER_H}"
            )
        for key in ("dead_time_s", "settle_s"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value >= 0):
                raise ValueError(f"{key} must be zero or positive, not {value!r}")

    @classmethod
    def for_heating(
        cls,
        heating: str,
        *,
        enabled: bool = True,
        earliest_s: float | None = None,
        initial_rate_k_per_h: float | None = None,
        dead_time_s: float | None = None,
        settle_s: float | None = None,
        setpoints: dict[str, float] | None = None,
    ) -> OptimumStartSettings:
        """Settings with the heating type's defaults for what is not given."""
        base = HEATING_DEFAULTS.get(heating, HEATING_DEFAULTS["hydronic"])
        return cls(
            enabled=enabled,
            earliest_s=base.earliest_s if earliest_s is None else earliest_s,
            initial_rate_k_per_h=(
                base.initial_rate_k_per_h if initial_rate_k_per_h is None else initial_rate_k_per_h
            ),
            dead_time_s=base.dead_time_s if dead_time_s is None else dead_time_s,
            settle_s=base.settle_s if settle_s is None else settle_s,
            setpoints=tuple((setpoints or dict(cls().setpoints)).items()),
        )

    def setpoint_for(self, level: str) -> float:
        for name, value in self.setpoints:
            if name == level:
                return value
        raise KeyError(level)


# --------------------------------------------------------------------------- the learned model


@dataclass(frozen=True, slots=True)
class Band:
    """The running warm-up rate of one outdoor band (``index``: ``floor(outdoor / BAND_K)``;
    ``None``: every warm-up, whatever the outdoor temperature, the fall-back estimate)."""

    index: int | None
    rate_k_per_h: float
    count: int


@dataclass(frozen=True, slots=True)
class WarmUpModel:
    """A zone's learned warm-up rates: small, frozen, saved as JSON across restarts."""

    bands: tuple[Band, ...] = ()
    dead_time_s: float | None = None
    """The learned dead time (None: none learned yet, the heating type's value is used)."""
    dead_count: int = 0

    def dead_time_or(self, initial_s: float) -> float:
        return initial_s if self.dead_time_s is None else self.dead_time_s

    def learned(
        self, rate_k_per_h: float, outdoor_c: float | None, dead_time_s: float | None = None
    ) -> WarmUpModel:
        """The model with one more measured warm-up (into its band and into the overall mean)."""
        dead, dead_count = self.dead_time_s, self.dead_count
        if dead_time_s is not None:
            dead_time_s = min(max(dead_time_s, 0.0), MAX_DEAD_S)
            if dead is None:
                dead, dead_count = dead_time_s, 1
            else:
                weight = max(1.0 / (dead_count + 1), WEIGHT)
                dead, dead_count = dead + weight * (dead_time_s - dead), dead_count + 1
        rate = min(max(rate_k_per_h, MIN_RATE_K_PER_H), MAX_RATE_K_PER_H)
        keys: list[int | None] = [None]
        if outdoor_c is not None:
            keys.append(band_index(outdoor_c))
        bands = {b.index: b for b in self.bands}
        for key in keys:
            old = bands.get(key)
            bands[key] = _updated(old, key, rate)
        ordered = sorted(bands.values(), key=lambda b: -math.inf if b.index is None else b.index)
        return WarmUpModel(tuple(ordered), dead, dead_count)

    def rate_at(self, outdoor_c: float | None, initial_k_per_h: float) -> tuple[float, str]:
        """The estimated warm-up rate (K/h) at this outdoor temperature, and where it comes from."""
        by_index = {b.index: b for b in self.bands if b.index is not None}
        overall = next((b for b in self.bands if b.index is None), None)
        if outdoor_c is not None and by_index:
            key = band_index(outdoor_c)
            own = by_index.get(key)
            if own is not None:
                return own.rate_k_per_h, f"learned from {own.count} warm-up(s) at {_band_text(key)}"
            fitted = _fit(tuple(by_index.values()), outdoor_c)
            if fitted is not None:
                return fitted, f"fitted to {len(by_index)} outdoor bands of learned warm-ups"
            near = min(by_index.values(), key=lambda b: abs(_centre(b) - outdoor_c))
            rate = near.rate_k_per_h
            if outdoor_c < _centre(near) and overall is not None:
                # colder than the band: the warm-up is slower there, never assume faster
                rate = min(rate, overall.rate_k_per_h)
            assert near.index is not None
            return rate, f"nearest learned band {_band_text(near.index)}"
        if overall is not None:
            return overall.rate_k_per_h, f"learned from {overall.count} warm-up(s)"
        return initial_k_per_h, "initial value of the heating type"

    def to_json(self) -> str:
        return json.dumps(self.to_dict(), sort_keys=True)

    def to_dict(self) -> dict[str, Any]:
        return {
            "version": STATE_VERSION,
            "dead_time_s": None if self.dead_time_s is None else round(self.dead_time_s, 3),
            "dead_count": self.dead_count,
            "bands": [
                {"band": b.index, "rate_k_per_h": round(b.rate_k_per_h, 6), "count": b.count}
                for b in self.bands
            ],
        }

    @classmethod
    def from_json(cls, text: str) -> WarmUpModel:
        """Parse a saved model; anything malformed raises ``ValueError`` (start from scratch)."""
        try:
            raw = json.loads(text)
        except json.JSONDecodeError as exc:
            raise ValueError(f"warm-up model is not JSON: {exc}") from None
        return cls.from_dict(raw)

    @classmethod
    def from_dict(cls, raw: Any) -> WarmUpModel:
        if not isinstance(raw, dict) or raw.get("version") != STATE_VERSION:
            raise ValueError("warm-up model: not a version-1 record")
        items = raw.get("bands")
        if not isinstance(items, list):
            raise ValueError("warm-up model: 'bands' must be a list")
        bands: list[Band] = []
        seen: set[int | None] = set()
        for item in items:
            if not isinstance(item, dict):
                raise ValueError("warm-up model: each band is a mapping")
            index, rate, count = item.get("band"), item.get("rate_k_per_h"), item.get("count")
            if index is not None and (not isinstance(index, int) or isinstance(index, bool)):
                raise ValueError("warm-up model: band is an integer or null")
            if (
                not isinstance(rate, int | float)
                or isinstance(rate, bool)
                or not MIN_RATE_K_PER_H <= rate <= MAX_RATE_K_PER_H
            ):
                raise ValueError(f"warm-up model: rate {rate!r} out of range")
            if not isinstance(count, int) or isinstance(count, bool) or count < 1:
                raise ValueError(f"warm-up model: count {count!r} is not a positive integer")
            if index in seen:
                raise ValueError(f"warm-up model: band {index!r} twice")
            seen.add(index)
            bands.append(Band(index, float(rate), count))
        dead, dead_count = raw.get("dead_time_s"), raw.get("dead_count", 0)
        if dead is not None and (
            not isinstance(dead, int | float) or isinstance(dead, bool)
            or not 0.0 <= dead <= MAX_DEAD_S
        ):
            raise ValueError(f"warm-up model: dead time {dead!r} out of range")
        if not isinstance(dead_count, int) or isinstance(dead_count, bool) or dead_count < 0:
            raise ValueError(f"warm-up model: dead_count {dead_count!r} is not a count")
        return cls(tuple(bands), None if dead is None else float(dead), dead_count)


def _centre(band: Band) -> float:
    assert band.index is not None
    return (band.index + 0.5) * BAND_K


def _fit(bands: tuple[Band, ...], outdoor_c: float) -> float | None:
    """The rate at ``outdoor_c`` from a straight line through the bands' rates (least squares,
    weighted by their warm-up counts), or None with fewer than two bands or a line that falls
    as it gets warmer outdoors (the heater's spare output grows with the outdoor temperature,
    so the rate must not fall: such a line is noise). Clamped to the learned rates' range."""
    if len(bands) < 2:
        return None
    weights = [float(b.count) for b in bands]
    xs = [_centre(b) for b in bands]
    ys = [b.rate_k_per_h for b in bands]
    total = sum(weights)
    mx = sum(w * x for w, x in zip(weights, xs, strict=True)) / total
    my = sum(w * y for w, y in zip(weights, ys, strict=True)) / total
    sxx = sum(w * (x - mx) ** 2 for w, x in zip(weights, xs, strict=True))
    sxy = sum(w * (x - mx) * (y - my) for w, x, y in zip(weights, xs, ys, strict=True))
    if sxx <= 0.0:
        return None
    slope = sxy / sxx
    if slope < 0.0:
        return None
    rate = my + slope * (outdoor_c - mx)
    return min(max(rate, MIN_RATE_K_PER_H, min(ys) / OUTLIER_FACTOR), max(ys))


def band_index(outdoor_c: float) -> int:
    return math.floor(outdoor_c / BAND_K)


def _band_text(index: int) -> str:
    return f"outdoor {index * BAND_K:g}..{(index + 1) * BAND_K:g} C"


def _updated(old: Band | None, index: int | None, rate: float) -> Band:
    if old is None:
        return Band(index, rate, 1)
    if old.count >= 3:
        rate = min(max(rate, old.rate_k_per_h / OUTLIER_FACTOR), old.rate_k_per_h * OUTLIER_FACTOR)
    weight = max(1.0 / (old.count + 1), WEIGHT)
    return Band(index, old.rate_k_per_h + weight * (rate - old.rate_k_per_h), old.count + 1)


# --------------------------------------------------------------------------- the planner


@dataclass(frozen=True, slots=True)
class WarmUp:
    """A warm-up being measured: from ``started_at`` at ``start_c`` toward ``target_c``."""

    started_at: float
    start_c: float
    target_c: float
    outdoor_c: float | None
    level: str
    low_c: float
    """The lowest temperature since the start."""
    rose_at: float | None = None
    """When the room had risen DEAD_RISE_K above ``low_c``: the end of the dead time."""
    rose_c: float | None = None


@dataclass(frozen=True, slots=True)
class OptimumStartState:
    """What optimum start carries from tick to tick (``model`` is what must be persisted)."""

    model: WarmUpModel = WarmUpModel()
    warm_up: WarmUp | None = None
    early_since: float | None = None
    """When the current early start began (None: none running)."""
    early_for: float | None = None
    """The switch instant the current early start serves."""
    early_reason: str | None = None
    last_level: str | None = None
    """The level used on the previous tick (a warm-up starts when it gets warmer)."""
    last_rate_k_per_h: float | None = None
    """The rate measured by the latest warm-up that completed (for the published state)."""


@dataclass(frozen=True, slots=True)
class OptimumStartInputs:
    """One tick's facts: the mode, the program's level and next switch, the temperatures."""

    mode: str
    scheduled_level: Level
    next_switch_at: float | None = None
    next_level: Level | None = None
    temperature_c: float | None = None
    outdoor_c: float | None = None


@dataclass(frozen=True, slots=True)
class OptimumStartDecision:
    """The level to use now, and why (the published state shows it as ``early_start``)."""

    level: Level
    early: bool = False
    since: float | None = None
    """When the early start began."""
    switch_at: float | None = None
    """The switch it serves."""
    reason: str = ""
    rate_k_per_h: float | None = None
    """The warm-up rate the plan uses now (K/h)."""
    rate_source: str = ""
    lead_s: float | None = None
    """The lead the plan asks for now (before the ``earliest_s`` cap)."""

    def to_dict(self) -> dict[str, Any]:
        """The fields for the zone's published state (``early_start`` object)."""
        return {
            "active": self.early,
            "since": self.since,
            "switch_at": self.switch_at,
            "reason": self.reason,
            "rate_k_per_h": None if self.rate_k_per_h is None else round(self.rate_k_per_h, 3),
            "rate_source": self.rate_source,
            "lead_s": None if self.lead_s is None else round(self.lead_s),
        }


def lead_s(gap_k: float, rate_k_per_h: float, dead_time_s: float) -> float:
    """Seconds of heating needed to close ``gap_k`` at ``rate_k_per_h`` (0 when no gap)."""
    if gap_k <= 0.0:
        return 0.0
    return dead_time_s + 3600.0 * gap_k / rate_k_per_h


def plan(
    settings: OptimumStartSettings,
    state: OptimumStartState,
    inputs: OptimumStartInputs,
    now: float,
) -> tuple[OptimumStartState, OptimumStartDecision]:
    """The level to use now: the program's, or the next warmer one from the early start on."""
    decision = _decide(settings, state, inputs, now)
    state = _measure(settings, state, inputs, decision.level, now)
    if decision.early:
        state = replace(
            state,
            early_since=decision.since,
            early_for=decision.switch_at,
            early_reason=decision.reason,
        )
    else:
        state = replace(state, early_since=None, early_for=None, early_reason=None)
    return replace(state, last_level=decision.level), decision


def _decide(
    settings: OptimumStartSettings,
    state: OptimumStartState,
    inputs: OptimumStartInputs,
    now: float,
) -> OptimumStartDecision:
    rate, source = state.model.rate_at(inputs.outdoor_c, settings.initial_rate_k_per_h)
    idle = OptimumStartDecision(inputs.scheduled_level, rate_k_per_h=rate, rate_source=source)
    ahead = _warmer_switch_ahead(settings, inputs, now)
    if isinstance(ahead, str):
        return replace(idle, reason=ahead)
    switch_at, target_level, target_c = ahead
    if (
        state.early_for == switch_at
        and state.early_since is not None
        and state.early_since <= now
    ):
        # Once begun, an early start lasts until its switch (unless the clock went back).
        return OptimumStartDecision(
            target_level, True, state.early_since, switch_at, state.early_reason or "",
            rate, source, None,
        )
    if switch_at - now > settings.earliest_s:
        return replace(idle, reason="switch further ahead than the earliest start")
    return _early_start_from_lead(
        settings, state, inputs, now,
        idle=idle, rate=(rate, source), switch=(switch_at, target_level, target_c),
    )


def _warmer_switch_ahead(
    settings: OptimumStartSettings, inputs: OptimumStartInputs, now: float
) -> tuple[float, Level, float] | str:
    """The program's next switch (time, level, set point) when it is to a warmer level in
    mode auto; otherwise the reason there is nothing to start early for."""
    if not settings.enabled:
        return "optimum start disabled"
    if inputs.mode != "auto":
        return f"mode {inputs.mode}: optimum start works in mode auto only"
    switch_at, target_level = inputs.next_switch_at, inputs.next_level
    if switch_at is None or target_level is None or switch_at <= now:
        return "no program switch ahead"
    target_c = settings.setpoint_for(target_level)
    if target_c <= settings.setpoint_for(inputs.scheduled_level):
        return f"next switch is to {target_level}, not warmer"
    return switch_at, target_level, target_c


def _early_start_from_lead(
    settings: OptimumStartSettings,
    state: OptimumStartState,
    inputs: OptimumStartInputs,
    now: float,
    *,
    idle: OptimumStartDecision,
    rate: tuple[float, str],
    switch: tuple[float, Level, float],
) -> OptimumStartDecision:
    """Start early once the lead the room needs to reach the next switch's set point has come.

    ``rate`` is the learnt warm-up rate and where it came from; ``switch`` is the next
    switch's time, level and set point.
    """
    temperature = inputs.temperature_c
    if temperature is None:
        return replace(idle, reason="no reliable temperature: no early start")
    (rate_k_per_h, source), (switch_at, target_level, target_c) = rate, switch
    gap = target_c - REACHED_K - temperature
    dead = state.model.dead_time_or(settings.dead_time_s)
    need = lead_s(gap, rate_k_per_h, dead)
    if need > 0.0:
        need += settings.settle_s
    idle = replace(idle, lead_s=need)
    if need <= 0.0:
        return replace(idle, reason=f"within {REACHED_K:g} K of the {target_level} set point")
    capped = need > settings.earliest_s
    if now < switch_at - min(need, settings.earliest_s):
        return replace(idle, reason=f"early start due {(need / 60):.0f} min before the switch")
    reason = (
        f"{gap:.1f} K to the {target_level} set point at {rate_k_per_h:.2f} K/h ({source}) "
        f"+ {dead / 60:.0f} min dead time + {settings.settle_s / 60:.0f} min to settle: "
        f"{need / 60:.0f} min before the switch"
    )
    if capped:
        reason += f", capped at the earliest start {settings.earliest_s / 60:.0f} min"
    return OptimumStartDecision(
        target_level, True, now, switch_at, reason, rate_k_per_h, source, need,
    )


def _measure(
    settings: OptimumStartSettings,
    state: OptimumStartState,
    inputs: OptimumStartInputs,
    level: str,
    now: float,
) -> OptimumStartState:
    """Start, finish or drop the measurement of a warm-up; learn its rate when it finishes."""
    temperature = inputs.temperature_c
    warm_up = state.warm_up
    target_c = settings.setpoint_for(level)
    if warm_up is not None:
        if inputs.mode != "auto" or level != warm_up.level:
            warm_up = None  # a command or a cooler level interrupted it: nothing to learn
        elif temperature is not None and temperature >= warm_up.target_c - REACHED_K:
            return _finished(state, warm_up, temperature, now)
        elif now - warm_up.started_at >= MAX_RECOVERY_S:
            if temperature is not None:
                return _finished(state, warm_up, temperature, now)
            warm_up = None
        elif temperature is not None:
            warm_up = _tracked(warm_up, temperature, now)
        return replace(state, warm_up=warm_up)
    previous = state.last_level
    got_warmer = (
        previous is not None
        and previous != level
        and target_c > settings.setpoint_for(previous)
    )
    if (
        got_warmer
        and inputs.mode == "auto"
        and temperature is not None
        and target_c - REACHED_K - temperature >= MIN_RISE_K
    ):
        warm_up = WarmUp(now, temperature, target_c, inputs.outdoor_c, level, temperature)
    return replace(state, warm_up=warm_up)


def _tracked(warm_up: WarmUp, temperature: float, now: float) -> WarmUp:
    """Follow the dead time: the lowest temperature, then the first clear rise above it."""
    if warm_up.rose_at is not None:
        return warm_up
    if temperature < warm_up.low_c:
        return replace(warm_up, low_c=temperature)
    if temperature >= warm_up.low_c + DEAD_RISE_K - 1e-9:
        return replace(warm_up, rose_at=now, rose_c=temperature)
    return warm_up


def _finished(
    state: OptimumStartState, warm_up: WarmUp, temperature: float, now: float
) -> OptimumStartState:
    end_c = min(temperature, warm_up.target_c - REACHED_K)
    if end_c - warm_up.start_c < MIN_RISE_K:
        return replace(state, warm_up=None)
    if warm_up.rose_at is None or warm_up.rose_c is None:
        # the whole rise in one step, without a first 0.2 K: a sensor jump, not a warm-up
        return replace(state, warm_up=None)
    dead = warm_up.rose_at - warm_up.started_at
    heating_s = now - warm_up.rose_at
    rise = end_c - warm_up.rose_c
    if heating_s <= 0.0 or rise <= 0.0:
        return replace(state, warm_up=None)
    rate = rise / (heating_s / 3600.0)
    if not MIN_RATE_K_PER_H <= rate <= MAX_RATE_K_PER_H:
        return replace(state, warm_up=None)  # implausible: a sensor jump, not a warm-up
    return replace(
        state,
        warm_up=None,
        model=state.model.learned(rate, warm_up.outdoor_c, dead),
        last_rate_k_per_h=rate,
    )
