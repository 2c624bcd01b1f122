"""What one zone's step needs from the site configuration, flattened once, in Celsius and seconds.

The config models are frozen pydantic objects: fine to validate a file, too slow
to read on every tick of hundreds of zones. :class:`ZoneSettings` copies the
resolved values (heating-type presets filled in, see ``Zone.effective``) into
a plain slotted dataclass, so the step reads attributes and nothing else.

Three ways to build one:

- :meth:`ZoneSettings.from_site` - the service: a loaded site and a zone name;
- :meth:`ZoneSettings.from_zone` - a zone model plus its input point configs;
- :meth:`ZoneSettings.for_heating_type` - the simulator's ``--heating TYPE``: a zone
  with that type's defaults and one input point, no site file needed.

Tests and tools may then adjust single values with :func:`dataclasses.replace`.

Importing this module does not import the config models (pydantic): the core stays
light to import, and pydantic is loaded only by a builder that needs it.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from roomloop.errors import RoomloopError

if TYPE_CHECKING:  # the config models (pydantic) are imported only where a builder needs them
    from roomloop.config.models import (
        FailSafe,
        InputPoint,
        Limits,
        Reliability,
        Setpoints,
        Site,
        Tuning,
        TuningInput,
        Zone,
    )

COMBINE_RULES = ("mean", "median", "min", "first-ok")
FAIL_SAFE_POLICIES = ("off", "fixed-duty", "learned-duty")
LEVEL_NAMES = ("comfort", "standby", "economy", "protection")
MODE_NAMES = ("auto", "hold", "off")


def call_tuning(tuning: Tuning) -> dict[str, Any]:
    """One call's switching and short-cycle values from its effective tuning (heating's or
    cooling's: the same keys)."""
    return {
        "differential_k": float(tuning.differential_k),
        "anticipator_gain_k": float(tuning.anticipator_gain_k),
        "anticipator_time_constant_s": float(tuning.anticipator_time_constant_s),
        "cycle_rate_cph": float(tuning.cycle_rate_cph),
        "min_on_s": float(tuning.min_on_s),
        "min_off_s": float(tuning.min_off_s),
        "max_cycles_per_hour": int(tuning.max_cycles_per_hour),
        "droop_compensation": bool(tuning.droop_compensation),
        "droop_time_s": float(tuning.droop_time_s),
    }


def cooling_settings(zone: Zone, units: str = "C") -> CoolingSettings | None:
    """The zone's cooling settings from its model (None: the zone does not cool)."""
    from roomloop.config.models import ASHRAE_DEAD_BAND

    cooling, tuning = zone.cooling, zone.cooling_effective
    if cooling is None or tuning is None:
        return None
    co = zone.changeover
    sp = cooling.setpoints
    minimum = ASHRAE_DEAD_BAND.get(units, ASHRAE_DEAD_BAND["C"])
    return CoolingSettings(
        type=cooling.type,
        **call_tuning(tuning),
        cycle_rate_regulation=(
            zone.cooling_origins.get("anticipator_time_constant_s") == "derived from cycle rate"
        ),
        comfort_c=float(sp.comfort),
        standby_c=float(sp.standby),
        economy_c=float(sp.economy),
        overheat_c=None if sp.overheat is None else float(sp.overheat),
        heating=zone.output is not None,
        initial_changeover=zone.changeover_mode,
        dead_band_k=max(minimum, 0.0 if co.dead_band_k is None else float(co.dead_band_k)),
        changeover_s=float(co.min_changeover_s),
        changeover_output=co.output is not None,
        energised_in_cooling=co.energised_in == "cooling",
        hold_s=float(co.hold_s),
    )


class SettingsError(RoomloopError, ValueError):
    """Settings the controller cannot run with (an unknown zone, a missing point, a bad value)."""


@dataclass(frozen=True, slots=True)
class PointSettings:
    """How one input point's readings are judged (see :mod:`roomloop.core.reliability`)."""

    name: str
    valid_low_c: float = -30.0
    valid_high_c: float = 60.0
    stale_after_s: float = 120.0
    max_rate_k_per_min: float = 2.0
    stuck_after_s: float | None = 10800.0
    """Relay-on seconds without a move beyond ``resolution_k`` before the point is ``stuck``."""
    resolution_k: float = 0.1
    recovery_s: float = 60.0

    @classmethod
    def from_point(cls, point: InputPoint) -> PointSettings:
        rel = point.reliability
        low, high = point.valid_range
        return cls(
            name=point.name,
            valid_low_c=float(low),
            valid_high_c=float(high),
            stale_after_s=float(rel.stale_after_s),
            max_rate_k_per_min=float(rel.max_rate_k_per_min),
            stuck_after_s=None if rel.stuck_after_s is None else float(rel.stuck_after_s),
            resolution_k=float(rel.resolution_k),
            recovery_s=float(rel.recovery_s),
        )


CHANGEOVER_NAMES = ("heat", "cool", "auto")


@dataclass(frozen=True, slots=True)
class CoolingSettings:
    """A zone's cooling call and changeover (see :mod:`roomloop.core.stages.cooling`)."""

    type: str = "direct-expansion"
    differential_k: float = 0.5
    anticipator_gain_k: float = 1.5
    anticipator_time_constant_s: float = 865.6
    cycle_rate_cph: float = 3.0
    min_on_s: float = 180.0
    min_off_s: float = 300.0
    max_cycles_per_hour: int = 4
    droop_compensation: bool = True
    droop_time_s: float = 3600.0
    cycle_rate_regulation: bool = True
    """Adjust the cooling anticipator's time constant so the plant really cycles at the cooling
    cycle rate (on when the time constant was derived from the cycle rate, off when given)."""
    comfort_c: float = 24.0
    standby_c: float = 26.0
    economy_c: float = 28.0
    overheat_c: float | None = None
    """Above it the zone cools whatever the mode and level (None: no overheat limit)."""
    heating: bool = True
    """The zone also has a heating output (False: it only cools)."""
    initial_changeover: str = "auto"
    dead_band_k: float = 3.0
    """Least gap between the heating and the cooling set point in ``auto`` (ASHRAE 90.1)."""
    changeover_s: float = 600.0
    """Least time from the end of one call to the start of the other."""
    changeover_output: bool = False
    """A changeover output (reversing valve) is fitted."""
    energised_in_cooling: bool = True
    hold_s: float = 60.0
    """Least time the changeover output sits in its position before a call starts."""

    def __post_init__(self) -> None:
        problems: list[str] = []
        for key in ("differential_k", "anticipator_time_constant_s", "droop_time_s",
                    "cycle_rate_cph"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value > 0):
                problems.append(f"cooling {key} must be a positive number, not {value!r}")
        for key in ("anticipator_gain_k", "min_on_s", "min_off_s", "changeover_s", "hold_s",
                    "dead_band_k"):
            value = getattr(self, key)
            if not (math.isfinite(value) and value >= 0):
                problems.append(f"cooling {key} must be zero or positive, not {value!r}")
        if self.max_cycles_per_hour < 1:
            problems.append("cooling max_cycles_per_hour must be at least 1")
        if self.initial_changeover not in CHANGEOVER_NAMES:
            problems.append(f"changeover {self.initial_changeover!r} is unknown")
        elif not self.heating and self.initial_changeover != "cool":
            problems.append("a zone without heating changes over to cool only")
        if problems:
            raise SettingsError("; ".join(problems))

    @classmethod
    def for_cooling_type(
        cls, cooling_type: str, *, heating: bool = False, changeover: str | None = None,
        **values: float | bool | str | None,
    ) -> CoolingSettings:
        """A cooling call with ``cooling_type``'s preset (time constant derived from its cycle
        rate), for the simulator and tests; ``values`` override single fields. As from a site
        file, a time constant given in ``values`` turns cycle-rate regulation off (unless
        ``values`` says otherwise)."""
        from roomloop.config.presets import COOLING_PRESETS, time_constant_for_cycle_rate

        try:
            preset = COOLING_PRESETS[cooling_type]
        except KeyError:
            raise SettingsError(f"unknown cooling type {cooling_type!r}") from None
        fields: dict[str, float | bool | str | None] = {
            "type": cooling_type,
            "differential_k": preset.differential_k,
            "anticipator_gain_k": preset.anticipator_gain_k,
            "anticipator_time_constant_s": time_constant_for_cycle_rate(
                preset.cycle_rate_cph, preset.anticipator_gain_k, preset.differential_k
            ),
            "cycle_rate_cph": preset.cycle_rate_cph,
            "min_on_s": preset.min_on_s,
            "min_off_s": preset.min_off_s,
            "max_cycles_per_hour": preset.max_cycles_per_hour,
            "droop_time_s": preset.droop_time_s,
            "heating": heating,
            "initial_changeover": changeover or ("auto" if heating else "cool"),
            "cycle_rate_regulation": "anticipator_time_constant_s" not in values,
        }
        fields.update(values)
        return cls(**fields)  # type: ignore[arg-type]

    def setpoint_for(self, level: str) -> float | None:
        """The configured cooling set point of a level (the overheat limit at protection)."""
        if level == "comfort":
            return self.comfort_c
        if level == "standby":
            return self.standby_c
        if level == "economy":
            return self.economy_c
        return self.overheat_c


@dataclass(frozen=True, slots=True)
class ZoneSettings:
    """Everything the zone step reads, resolved; temperatures in Celsius, differences in K."""

    name: str
    heating: str
    inputs: tuple[PointSettings, ...]
    backup: PointSettings | None = None
    combine: str = "mean"
    # tuning (Zone.effective)
    differential_k: float = 0.5
    anticipator_gain_k: float = 1.5
    anticipator_time_constant_s: float = 519.0
    cycle_rate_cph: float = 5.0
    min_on_s: float = 120.0
    min_off_s: float = 120.0
    max_cycles_per_hour: int = 6
    droop_compensation: bool = True
    droop_time_s: float = 3600.0
    cycle_rate_regulation: bool = True
    """Adjust the anticipator's time constant so the plant really cycles at the cycle rate
    (on when the time constant was derived from the cycle rate, off when it was given)."""
    smoothing_s: float | None = None
    """Time constant (s) of the smoothing of the zone temperature the relay switches on;
    ``None``: ``smoothing_periods`` cycle periods of ``3600 / cycle_rate_cph``; 0: none."""
    smoothing_periods: float = 1.0
    """The smoothing in cycle periods when ``smoothing_s`` is None (the heating type's)."""
    proportional_gain: float = 0.0
    """The room's own offset from the set point, times this, is added to the switching
    temperature (see :mod:`roomloop.core.stages.switching`); 0: none."""
    # set points per level and the limits every set point is clamped to
    comfort_c: float = 20.0
    standby_c: float = 18.0
    economy_c: float = 16.0
    protection_c: float = 7.0
    limit_min_c: float = 5.0
    limit_max_c: float = 28.0
    # fail-safe
    fail_safe_policy: str = "learned-duty"
    sensor_timeout_s: float = 600.0
    fail_safe_duty: float = 0.3
    fail_safe_period_s: float = 1200.0
    learn_hours: float = 4.0
    min_duty: float = 0.1
    max_duty: float = 0.7
    fail_safe_recovery_s: float = 120.0
    # behaviour
    protection_in_off: bool = True
    initial_mode: str = "auto"
    default_level: str = "comfort"
    tick_s: float = 10.0
    cooling: CoolingSettings | None = None
    """The cooling call and changeover; None: a heating-only zone (the heating law alone)."""

    def __post_init__(self) -> None:
        problems = [*self._name_problems(), *self._number_problems()]
        if problems:
            raise SettingsError(f"zone {self.name!r}: " + "; ".join(problems))

    def _name_problems(self) -> list[str]:
        problems: list[str] = []
        if not self.inputs:
            problems.append("a zone needs at least one input point")
        if self.combine not in COMBINE_RULES:
            problems.append(f"combine {self.combine!r} is not one of {', '.join(COMBINE_RULES)}")
        if self.fail_safe_policy not in FAIL_SAFE_POLICIES:
            problems.append(f"fail-safe policy {self.fail_safe_policy!r} is unknown")
        if self.initial_mode not in MODE_NAMES:
            problems.append(f"mode {self.initial_mode!r} is unknown")
        if self.default_level not in LEVEL_NAMES:
            problems.append(f"level {self.default_level!r} is unknown")
        return problems

    def _number_problems(self) -> list[str]:
        problems: list[str] = []
        positive = {
            "differential_k": self.differential_k,
            "anticipator_time_constant_s": self.anticipator_time_constant_s,
            "droop_time_s": self.droop_time_s,
            "sensor_timeout_s": self.sensor_timeout_s,
            "fail_safe_period_s": self.fail_safe_period_s,
            "learn_hours": self.learn_hours,
            "smoothing_periods": self.smoothing_periods,
        }
        for key, value in positive.items():
            if not (math.isfinite(value) and value > 0):
                problems.append(f"{key} must be a positive number, not {value!r}")
        if self.smoothing_s is not None and not (
            math.isfinite(self.smoothing_s) and self.smoothing_s >= 0
        ):
            problems.append(f"smoothing_s must be zero or positive, not {self.smoothing_s!r}")
        if not (math.isfinite(self.anticipator_gain_k) and self.anticipator_gain_k >= 0):
            problems.append("anticipator_gain_k must be zero or positive")
        if not (math.isfinite(self.proportional_gain) and self.proportional_gain >= 0):
            problems.append("proportional_gain must be zero or positive")
        if self.max_cycles_per_hour < 1:
            problems.append("max_cycles_per_hour must be at least 1")
        if self.limit_min_c > self.limit_max_c:
            problems.append("limit_min_c must not exceed limit_max_c")
        if not 0.0 <= self.min_duty <= self.max_duty <= 1.0:
            problems.append("need 0 <= min_duty <= max_duty <= 1")
        return problems

    def setpoint_for(self, level: str) -> float:
        """The configured set point of a level (not clamped)."""
        if level == "comfort":
            return self.comfort_c
        if level == "standby":
            return self.standby_c
        if level == "economy":
            return self.economy_c
        return self.protection_c

    # ------------------------------------------------------------------ builders

    @classmethod
    def from_zone(
        cls,
        zone: Zone,
        inputs: Mapping[str, InputPoint],
        backup: InputPoint | None = None,
        units: str = "C",
    ) -> ZoneSettings:
        """Build from a zone model and the configs of its input points (and backup point);
        ``units``: the site's (the ASHRAE dead band is 3 K, or 5 F on a Fahrenheit site)."""
        missing = [name for name in zone.inputs if name not in inputs]
        if missing:
            raise SettingsError(
                f"zone {zone.name!r}: no input point config for {', '.join(missing)}"
            )
        if zone.fail_safe.backup_point is not None and backup is None:
            raise SettingsError(
                f"zone {zone.name!r}: backup point {zone.fail_safe.backup_point!r} has no config"
            )
        tuning = zone.effective
        fs = zone.fail_safe
        sp = zone.setpoints
        return cls(
            name=zone.name,
            heating=zone.heating,
            inputs=tuple(PointSettings.from_point(inputs[name]) for name in zone.inputs),
            backup=None if backup is None else PointSettings.from_point(backup),
            combine=zone.combine,
            **call_tuning(tuning),
            smoothing_s=None if tuning.smoothing_s is None else float(tuning.smoothing_s),
            proportional_gain=float(tuning.proportional_gain),
            smoothing_periods=float(tuning.smoothing_periods),
            cycle_rate_regulation=(
                zone.origins.get("anticipator_time_constant_s") == "derived from cycle rate"
            ),
            comfort_c=float(sp.comfort),
            standby_c=float(sp.standby),
            economy_c=float(sp.economy),
            protection_c=float(sp.protection),
            limit_min_c=float(zone.limits.min),
            limit_max_c=float(zone.limits.max),
            fail_safe_policy=fs.policy,
            sensor_timeout_s=float(fs.sensor_timeout_s),
            fail_safe_duty=float(fs.duty),
            fail_safe_period_s=float(fs.period_s),
            learn_hours=float(fs.learn_hours),
            min_duty=float(fs.min_duty),
            max_duty=float(fs.max_duty),
            fail_safe_recovery_s=float(fs.recovery_s),
            protection_in_off=zone.protection_in_off,
            initial_mode=zone.mode,
            default_level=zone.default_level,
            tick_s=float(zone.tick_s),
            cooling=cooling_settings(zone, units),
        )

    @classmethod
    def from_site(cls, site: Site, zone_name: str) -> ZoneSettings:
        """Build for one zone of a loaded site (the service's way in)."""
        try:
            zone = site.zone(zone_name)
        except KeyError:
            raise SettingsError(f"site {site.name!r} has no zone {zone_name!r}") from None
        inputs: dict[str, InputPoint] = {}
        names = list(zone.inputs)
        if zone.fail_safe.backup_point is not None:
            names.append(zone.fail_safe.backup_point)
        for name in names:
            try:
                point = site.point(name)
            except KeyError:
                raise SettingsError(f"zone {zone_name!r}: no point named {name!r}") from None
            if point.type not in ("modbus-input", "mqtt-input"):
                raise SettingsError(
                    f"zone {zone_name!r}: point {name!r} is an output, not an input"
                )
            inputs[name] = point
        backup_name = zone.fail_safe.backup_point
        backup = None if backup_name is None else inputs[backup_name]
        return cls.from_zone(zone, inputs, backup, site.site.units)

    @classmethod
    def for_heating_type(
        cls,
        heating: str,
        *,
        name: str = "zone",
        input_name: str = "temperature",
        tuning: TuningInput | None = None,
        setpoints: Setpoints | None = None,
        limits: Limits | None = None,
        fail_safe: FailSafe | None = None,
        reliability: Reliability | None = None,
        valid_range: tuple[float, float] = (-30.0, 60.0),
        protection_in_off: bool = True,
        tick_s: float = 10.0,
    ) -> ZoneSettings:
        """A zone with ``heating``'s preset defaults and a single input point (simulator, tests).

        Raises :class:`SettingsError` for an unknown heating type or invalid values.
        """
        from pydantic import ValidationError

        from roomloop.config.models import (
            FailSafe,
            Limits,
            MqttInput,
            Reliability,
            Setpoints,
            TuningInput,
            Zone,
        )

        try:
            point = MqttInput(
                type="mqtt-input",
                name=input_name,
                topic=f"simulated/{name}/{input_name}",
                valid_range=valid_range,
                reliability=reliability if reliability is not None else Reliability(),
            )
            zone = Zone.model_validate(
                {
                    "name": name,
                    "inputs": [input_name],
                    "output": f"{name}-relay",
                    "heating": heating,
                    "tuning": tuning if tuning is not None else TuningInput(),
                    "setpoints": setpoints if setpoints is not None else Setpoints(),
                    "limits": limits if limits is not None else Limits(),
                    "fail_safe": (fail_safe if fail_safe is not None else FailSafe()).model_copy(
                        update={"backup_point": None}
                    ),
                    "protection_in_off": protection_in_off,
                    "tick_s": tick_s,
                }
            )
        except ValidationError as exc:
            first = exc.errors()[0]
            where = ".".join(str(p) for p in first.get("loc", ()))
            raise SettingsError(f"heating type {heating!r}: {where}: {first.get('msg')}") from None
        return cls.from_zone(zone, {input_name: point})
