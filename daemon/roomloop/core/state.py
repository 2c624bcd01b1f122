"""The controller's memory of one zone: a frozen value, replaced on every step, saved as JSON.

The service persists :class:`ZoneState` between runs (``to_json``/``from_json``),
so everything the control law needs to continue is here and nothing else:
commands (mode, hold, level override), the anticipator and droop terms, the
relay and its recent switchings (for short-cycle protection and the published
cycle figures), fail-safe status, the learned-duty history and each input
point's reliability memory. Every collection is bounded: a state never grows
with uptime.

JSON shape (version 1)::

    {"schema": "roomloop.zone-state", "version": 1,
     "mode": "auto", "hold_setpoint": null, "hold_level": null, "hold_until": null,
     "level_override": null, "scheduled_level": "comfort",
     "anticipator_k": 0.41, "droop_k": 0.12, "tau_scale": 0.8, "cycle_clean": true,
     "relay_on": false, "switched_at": 1700000000.0, "protection_run": false,
     "switches": [[1699999000.0, true], [1699999300.0, false]],
     "started_at": 1699990000.0, "last_step_at": 1700000010.0,
     "last_setpoint": 20.0, "recovering": 0,
     "temperature": 19.9, "good_at": 1700000010.0, "good_since": 1699990000.0, "normal": true,
     "fail_safe": false, "fail_safe_since": null, "fail_safe_duty": null, "fail_safe_reason": null,
     "duty_buckets": [[1699996400.0, 310.0, 900.0]], "duty_current": [1700000000.0, 0.0, 10.0],
     "points": [{"name": "t1", "reliability": "ok", "verdict": "ok", "value": 19.9,
                 "value_at": 1700000010.0, "seen_at": 1700000010.0, "still_value": 19.9,
                 "still_on_s": 0.0, "good_since": 1699990000.0, "faulted": false}],
     "backup": null, "smoothed_c": 19.96}

Times are POSIX seconds as given to ``step``, within +/- :data:`MAX_TIME_S` (the end of
year 9999: a time beyond breaks every date display); temperatures Celsius.
``smoothed_c`` (the switching temperature, see :mod:`roomloop.core.controller`)
came later within version 1: a state saved without it loads with ``None``, and
the controller then restarts the smoothing from the next reading.
"""

from __future__ import annotations

import json
import math
from dataclasses import dataclass, fields
from typing import TYPE_CHECKING, Any

from roomloop.errors import RoomloopError

from .types import RELIABILITY_VALUES, Reliability

if TYPE_CHECKING:
    from .settings import ZoneSettings

STATE_SCHEMA = "roomloop.zone-state"
STATE_VERSION = 1
MAX_TIME_S = 253402300799.0
"""The last second of year 9999 (POSIX): the bound of every time field in a saved state."""
PLAUSIBLE_C = (-100.0, 200.0)
"""Bounds of any saved temperature (Celsius): no room, pipe or slab reads beyond them, so a
value outside is a corrupted file, not a measurement."""


class StateFormatError(RoomloopError, ValueError):
    """A saved state that is not ours, is corrupt or comes from an unknown version."""


@dataclass(frozen=True, slots=True)
class PointState:
    """Reliability memory of one input point (see :mod:`roomloop.core.reliability`)."""

    name: str
    reliability: Reliability = "stale"
    """Published: ``ok`` only while trusted; otherwise the fault (kept while recovering)."""
    verdict: Reliability = "stale"
    """The latest reading's own verdict, before the recovery time is applied."""
    value: float | None = None
    """The last accepted reading (the reference for the rate-of-change check)."""
    value_at: float | None = None
    seen_at: float | None = None
    """``received_at`` of the last reading judged, so a repeated sample is not judged twice."""
    still_value: float | None = None
    """The value the point has not moved away from (beyond its resolution) ..."""
    still_on_s: float = 0.0
    """... and the relay-on seconds since (stuck detection)."""
    good_since: float | None = None
    faulted: bool = False
    """Had a fault and has not yet read good for the recovery time."""

    @property
    def trusted(self) -> bool:
        return self.reliability == "ok"


@dataclass(frozen=True, slots=True)
class CoolingState:
    """The cooling call's memory and the changeover (a zone with a cooling call only)."""

    changeover: str
    """``heat``, ``cool`` or ``auto`` (the configured one at first start, then commands)."""
    hold_setpoint: float | None
    """The cooling set point held by a command (used in mode ``hold``)."""
    side: str
    """``heat`` or ``cool``: the call the zone is set up for (the changeover output follows)."""
    valve: bool | None
    """The changeover output is in the cooling position (None: not set yet, or none fitted)."""
    valve_at: float | None
    """When the changeover output was last switched."""
    relay_on: bool
    switched_at: float | None
    switches: tuple[tuple[float, bool], ...]
    """The cooling call's switchings of the last hour, oldest first."""
    anticipator_k: float
    droop_k: float
    tau_scale: float
    """Cycle-rate regulation: the cooling anticipator runs with ``time_constant x tau_scale``."""
    cycle_clean: bool
    """The running cooling cycle has been ordinary control so far (it may adjust ``tau_scale``)."""
    last_setpoint: float | None
    recovering: int
    """+1 pulling down to a lowered cooling set point, -1 resting up to a raised one, 0 cycling."""
    overheat_run: bool
    """The overheat limit holds the cooling on (until ``overheat - D/2``)."""


@dataclass(frozen=True, slots=True)
class ZoneState:
    """Everything the zone step carries from one tick to the next."""

    # commands
    mode: str
    hold_setpoint: float | None
    hold_level: str | None
    hold_until: float | None
    level_override: str | None
    scheduled_level: str
    # control terms
    anticipator_k: float
    droop_k: float
    tau_scale: float
    """Cycle-rate regulation: the anticipator runs with ``time_constant x tau_scale``."""
    cycle_clean: bool
    """The running cycle has been ordinary control so far (it may adjust ``tau_scale``)."""
    # relay
    relay_on: bool
    switched_at: float | None
    protection_run: bool
    """Protection holds the relay on: the run lasts up to ``P + D/2`` (``P`` in mode off)."""
    switches: tuple[tuple[float, bool], ...]
    """Switchings of the last hour, oldest first: (time, relay on after it)."""
    # time and set point
    started_at: float
    last_step_at: float
    last_setpoint: float | None
    recovering: int
    """+1 recovering up to a raised set point, -1 down to a lowered one, 0 cycling normally."""
    # temperature
    temperature: float | None
    """The last trusted zone temperature (kept while readings are missing)."""
    good_at: float
    """When the zone last had a trusted temperature (the start time if never)."""
    good_since: float | None
    """Start of the current stretch with a trusted temperature (None while there is none)."""
    normal: bool
    """The last tick was ordinary control (counts toward the learned duty)."""
    # fail-safe
    fail_safe: bool
    fail_safe_since: float | None
    fail_safe_duty: float | None
    fail_safe_reason: str | None
    # learned duty: closed buckets (start, on seconds, seconds counted) and the open one
    duty_buckets: tuple[tuple[float, float, float], ...]
    duty_current: tuple[float, float, float]
    # points
    points: tuple[PointState, ...]
    backup: PointState | None
    smoothed_c: float | None = None
    """The zone temperature smoothed for switching (None until the first trusted reading)."""

    @property
    def cooling(self) -> CoolingState | None:
        """The cooling call and changeover: None in a heating-only zone (a zone with a cooling
        call has a :class:`DualZoneState`, whose own field this is)."""
        return None

    # ------------------------------------------------------------------ JSON

    def to_json(self) -> str:
        """Serialise (compact, one line); :meth:`from_json` reads it back equal."""
        data: dict[str, Any] = {"schema": STATE_SCHEMA, "version": STATE_VERSION}
        for f in fields(self):
            value = getattr(self, f.name)
            if f.name == "points":
                value = [_point_to_dict(p) for p in value]
            elif f.name == "backup":
                value = None if value is None else _point_to_dict(value)
            elif f.name == "cooling":
                if value is None:
                    continue
                value = {
                    g.name: _tuples_to_lists(getattr(value, g.name)) for g in fields(value)
                }
            elif isinstance(value, tuple):
                value = _tuples_to_lists(value)
            data[f.name] = value
        return json.dumps(data, separators=(",", ":"), allow_nan=False)

    @classmethod
    def from_json(cls, text: str | bytes) -> ZoneState:
        """Read a saved state; :class:`StateFormatError` if it is not a valid version-1 state."""
        try:
            data = json.loads(text)
        except (ValueError, UnicodeDecodeError) as exc:
            raise StateFormatError(f"zone state is not JSON: {exc}") from None
        except RecursionError:
            raise StateFormatError("zone state is nested too deeply to be ours") from None
        if not isinstance(data, dict):
            raise StateFormatError("zone state is not a JSON object")
        if data.get("schema") != STATE_SCHEMA:
            raise StateFormatError(f"not a roomloop zone state (schema {data.get('schema')!r})")
        if data.get("version") != STATE_VERSION:
            raise StateFormatError(
                f"zone state version {data.get('version')!r} is not supported "
                f"(expected {STATE_VERSION})"
            )
        r = _Reader(data, "state")
        switches = tuple(
            (_num(item, 0, "switches"), _bool(item, 1, "switches"))
            for item in r.items("switches")
        )
        buckets = tuple(_triple(item, "duty_buckets") for item in r.items("duty_buckets"))
        points_raw = r.items("points")
        backup_raw = r.get("backup")
        known = {f.name for f in fields(ZoneState)} | {"schema", "version", "cooling"}
        extra = sorted(set(data) - known)
        if extra:
            raise StateFormatError(f"zone state has unknown keys: {', '.join(extra)}")
        cooling = _cooling_from(data.get("cooling"))
        kind = ZoneState if cooling is None else DualZoneState
        state = kind(
            mode=r.choice("mode", ("auto", "hold", "off")),
            hold_setpoint=r.opt_celsius("hold_setpoint"),
            hold_level=r.opt_choice("hold_level", _LEVELS),
            hold_until=r.opt_time("hold_until"),
            level_override=r.opt_choice("level_override", _LEVELS),
            scheduled_level=r.choice("scheduled_level", _LEVELS),
            anticipator_k=r.non_negative("anticipator_k"),
            droop_k=r.non_negative("droop_k"),
            tau_scale=r.positive("tau_scale"),
            cycle_clean=r.flag("cycle_clean"),
            relay_on=r.flag("relay_on"),
            switched_at=r.opt_time("switched_at"),
            protection_run=r.flag("protection_run"),
            switches=switches,
            started_at=r.time("started_at"),
            last_step_at=r.time("last_step_at"),
            last_setpoint=r.opt_celsius("last_setpoint"),
            recovering=int(r.choice("recovering", (-1, 0, 1))),
            temperature=r.opt_celsius("temperature"),
            good_at=r.time("good_at"),
            good_since=r.opt_time("good_since"),
            normal=r.flag("normal"),
            fail_safe=r.flag("fail_safe"),
            fail_safe_since=r.opt_time("fail_safe_since"),
            fail_safe_duty=r.opt_fraction("fail_safe_duty"),
            fail_safe_reason=r.opt_text("fail_safe_reason"),
            duty_buckets=buckets,
            duty_current=_triple(r.get("duty_current"), "duty_current"),
            points=tuple(_point_from(item, f"points[{i}]") for i, item in enumerate(points_raw)),
            backup=None if backup_raw is None else _point_from(backup_raw, "backup"),
            smoothed_c=r.opt_celsius("smoothed_c") if "smoothed_c" in data else None,
        )
        return state if cooling is None else with_cooling_state(state, cooling)


@dataclass(frozen=True, slots=True)
class DualZoneState(ZoneState):
    """The state of a zone with a cooling call: :class:`ZoneState` and the cooling part (a
    subclass, so a heating-only zone's state carries, builds and saves nothing more)."""

    cooling: CoolingState | None = None


def with_cooling_state(state: ZoneState, cooling: CoolingState) -> DualZoneState:
    """``state`` with the cooling part (a :class:`DualZoneState`)."""
    values = {f.name: getattr(state, f.name) for f in fields(ZoneState)}
    return DualZoneState(**values, cooling=cooling)


_LEVELS = ("comfort", "standby", "economy", "protection")


MAX_HOLD_AHEAD_S = 366 * 86400.0
"""How far ahead a hold may end (the bound commands enforce, core/commands.py MAX_HOLD_S)."""


def check_for_zone(state: ZoneState, settings: ZoneSettings, now: float | None = None) -> None:
    """Refuse a loaded state the zone's settings could never have produced.

    Raises :class:`StateFormatError` naming the field: a hold set point outside the
    zone's limits (commands clamp to them, so only a corrupted or hand-edited file, or
    limits narrowed since, hold one; the zone would otherwise heat to the limit with
    no command to show for it), or, given ``now``, a hold ending more than 366 days
    ahead (no command can set one). Values a changed tuning legitimately leaves out of
    range (the anticipator above a lowered gain) are not refused here:
    :meth:`ZoneController.resume` clamps them.
    """
    low, high = settings.limit_min_c, settings.limit_max_c
    if state.hold_setpoint is not None and not low <= state.hold_setpoint <= high:
        raise StateFormatError(
            f"zone state: hold_setpoint {state.hold_setpoint:g} C is outside the zone's "
            f"limits {low:g}..{high:g} C"
        )
    cooling = state.cooling
    held = None if cooling is None else cooling.hold_setpoint
    if held is not None and not low <= held <= high:
        raise StateFormatError(
            f"zone state: cooling.hold_setpoint {held:g} C is outside the zone's limits "
            f"{low:g}..{high:g} C"
        )
    until = state.hold_until
    if now is not None and until is not None and until > now + MAX_HOLD_AHEAD_S:
        raise StateFormatError(
            f"zone state: hold_until {until:.0f} is more than 366 days after the "
            f"restart at {now:.0f}"
        )


def _cooling_from(raw: Any) -> CoolingState | None:
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise StateFormatError("zone state: cooling is not an object")
    extra = sorted(set(raw) - {f.name for f in fields(CoolingState)})
    if extra:
        raise StateFormatError(f"zone state: cooling has unknown keys: {', '.join(extra)}")
    r = _Reader(raw, "cooling")
    switches = tuple(
        (_num(item, 0, "cooling.switches"), _bool(item, 1, "cooling.switches"))
        for item in r.items("switches")
    )
    valve = r.get("valve")
    if valve is not None and not isinstance(valve, bool):
        raise StateFormatError("zone state: cooling.valve must be true, false or null")
    return CoolingState(
        changeover=r.choice("changeover", ("heat", "cool", "auto")),
        hold_setpoint=r.opt_celsius("hold_setpoint"),
        side=r.choice("side", ("heat", "cool")),
        valve=valve,
        valve_at=r.opt_time("valve_at"),
        relay_on=r.flag("relay_on"),
        switched_at=r.opt_time("switched_at"),
        switches=switches,
        anticipator_k=r.non_negative("anticipator_k"),
        droop_k=r.non_negative("droop_k"),
        # a file written before the cooling call was regulated: unregulated, no cycle running
        tau_scale=r.positive("tau_scale") if "tau_scale" in raw else 1.0,
        cycle_clean=r.flag("cycle_clean") if "cycle_clean" in raw else False,
        last_setpoint=r.opt_celsius("last_setpoint"),
        recovering=int(r.choice("recovering", (-1, 0, 1))),
        overheat_run=r.flag("overheat_run"),
    )


def _tuples_to_lists(value: Any) -> Any:
    if isinstance(value, tuple):
        return [_tuples_to_lists(v) for v in value]
    return value


def _point_to_dict(point: PointState) -> dict[str, Any]:
    return {f.name: getattr(point, f.name) for f in fields(point)}


def _point_from(raw: Any, where: str) -> PointState:
    if not isinstance(raw, dict):
        raise StateFormatError(f"zone state: {where} is not an object")
    r = _Reader(raw, where)
    known = {f.name for f in fields(PointState)}
    extra = sorted(set(raw) - known)
    if extra:
        raise StateFormatError(f"zone state: {where} has unknown keys: {', '.join(extra)}")
    return PointState(
        name=r.text("name"),
        reliability=r.choice("reliability", RELIABILITY_VALUES),
        verdict=r.choice("verdict", RELIABILITY_VALUES),
        value=r.opt_celsius("value"),
        value_at=r.opt_time("value_at"),
        seen_at=r.opt_time("seen_at"),
        still_value=r.opt_celsius("still_value"),
        still_on_s=r.non_negative("still_on_s"),
        good_since=r.opt_time("good_since"),
        faulted=r.flag("faulted"),
    )


def _is_num(value: Any) -> bool:
    if isinstance(value, bool) or not isinstance(value, int | float):
        return False
    try:
        return math.isfinite(value)
    except OverflowError:  # an integer too large for a float
        return False


def _is_time(value: Any) -> bool:
    return _is_num(value) and -MAX_TIME_S <= value <= MAX_TIME_S


def _num(item: Any, index: int, where: str) -> float:
    if not isinstance(item, list) or len(item) != 2 or not _is_time(item[index]):
        raise StateFormatError(f"zone state: {where} entries are [time, on]")
    return float(item[index])


def _bool(item: Any, index: int, where: str) -> bool:
    if not isinstance(item, list) or len(item) != 2 or not isinstance(item[index], bool):
        raise StateFormatError(f"zone state: {where} entries are [time, on]")
    return bool(item[index])


def _triple(item: Any, where: str) -> tuple[float, float, float]:
    if (
        not isinstance(item, list)
        or len(item) != 3
        or not all(_is_num(v) for v in item)
        or not _is_time(item[0])
        or not 0.0 <= item[1] <= item[2]
    ):
        raise StateFormatError(
            f"zone state: {where} entries are [start, on_s, seen_s] with 0 <= on_s <= seen_s"
        )
    return (float(item[0]), float(item[1]), float(item[2]))


class _Reader:
    """Typed access to one JSON object, with the key path in every error."""

    def __init__(self, data: dict[str, Any], where: str) -> None:
        self.data = data
        self.where = where

    def get(self, key: str) -> Any:
        if key not in self.data:
            raise StateFormatError(f"zone state: {self.where} lacks {key!r}")
        return self.data[key]

    def _bad(self, key: str, what: str) -> StateFormatError:
        return StateFormatError(f"zone state: {self.where}.{key} must be {what}")

    def num(self, key: str) -> float:
        value = self.get(key)
        if not _is_num(value):
            raise self._bad(key, "a finite number")
        return float(value)

    def time(self, key: str) -> float:
        value = self.get(key)
        if not _is_time(value):
            raise self._bad(key, f"POSIX seconds within +/-{MAX_TIME_S:.0f} (year 9999)")
        return float(value)

    def opt_time(self, key: str) -> float | None:
        return None if self.get(key) is None else self.time(key)

    def positive(self, key: str) -> float:
        value = self.num(key)
        if value <= 0:
            raise self._bad(key, "a positive number")
        return value

    def opt_num(self, key: str) -> float | None:
        return None if self.get(key) is None else self.num(key)

    def non_negative(self, key: str) -> float:
        value = self.num(key)
        if value < 0:
            raise self._bad(key, "a number not below 0")
        return value

    def opt_celsius(self, key: str) -> float | None:
        value = self.opt_num(key)
        low, high = PLAUSIBLE_C
        if value is not None and not low <= value <= high:
            raise self._bad(key, f"a temperature within {low:g}..{high:g} C")
        return value

    def opt_fraction(self, key: str) -> float | None:
        value = self.opt_num(key)
        if value is not None and not 0.0 <= value <= 1.0:
            raise self._bad(key, "a fraction within 0..1")
        return value

    def flag(self, key: str) -> bool:
        value = self.get(key)
        if not isinstance(value, bool):
            raise self._bad(key, "true or false")
        return value

    def text(self, key: str) -> str:
        value = self.get(key)
        if not isinstance(value, str):
            raise self._bad(key, "a string")
        return value

    def opt_text(self, key: str) -> str | None:
        return None if self.get(key) is None else self.text(key)

    def choice(self, key: str, allowed: tuple[Any, ...]) -> Any:
        value = self.get(key)
        if isinstance(value, bool) or value not in allowed:
            raise self._bad(key, "one of " + ", ".join(repr(a) for a in allowed))
        return value

    def opt_choice(self, key: str, allowed: tuple[Any, ...]) -> Any:
        return None if self.get(key) is None else self.choice(key, allowed)

    def items(self, key: str) -> list[Any]:
        value = self.get(key)
        if not isinstance(value, list):
            raise self._bad(key, "a list")
        return value
