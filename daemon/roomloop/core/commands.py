"""Commands on a zone's state, as pure functions the service calls between steps.

:func:`apply_command` takes a field name and a value as they arrived (a JSON
value or the plain payload text) and returns the new :class:`ZoneState`, or
raises :class:`CommandRejected` with a reason the service can publish on
``cmd/result``. It is the one place a command is checked: the service only parses
payloads (site units to Celsius, local times to POSIX seconds) and hands the value
here. Values are Celsius and POSIX seconds; ``units`` only words a refusal in the
site's units.

Fields:

- ``setpoint``: a number within the zone's limits: a hold at that temperature
  (keeping a running hold's ``hold_until``, otherwise indefinite).
- ``mode``: ``auto`` (clears any hold and level override), ``hold`` (a hold
  at the set point in force now), ``off``.
- ``level``: ``comfort``, ``standby``, ``economy`` or ``protection``. In
  ``auto`` it overrides the program's level until the program's level next
  changes; in ``hold`` it becomes a hold at that level's set point; in ``off``
  it starts a hold at that level.
- ``hold_until``: POSIX seconds in the future (at most :data:`MAX_HOLD_S`, 366
  days, ahead), or ``null``/empty for an indefinite hold. In ``auto`` it starts
  a hold at the set point in force now; in ``off`` it is refused (there is
  nothing to hold).

``setpoint`` and ``level`` also take an end, ``until`` (the same checks as
``hold_until``; the service turns ``next-change`` into the program's next change):
then, in any mode, the command is a hold at that set point or level ending at
``until`` (None: never), set in one step, so a refused end changes nothing either.

The next :meth:`ZoneController.step` clamps and applies the result, so a
command never has to wait for a tick to be validated.
"""

from __future__ import annotations

import enum
import json
import math
from collections.abc import Callable
from dataclasses import replace
from typing import Any, Final

from roomloop.errors import RoomloopError
from roomloop.units import delta_from_kelvin, from_celsius

from .settings import LEVEL_NAMES, MODE_NAMES, ZoneSettings
from .state import ZoneState, with_cooling_state

COMMAND_FIELDS = ("setpoint", "mode", "level", "hold_until")
COOLING_FIELDS = ("changeover", "cooling_setpoint")
"""Further fields of a zone with a cooling call."""
ACK_FIELD = "ack"
"""Acknowledges a zone's alarms: answered by the service's alarm book, not here."""


def command_fields(*, cooling: bool) -> tuple[str, ...]:
    """Every field a zone takes a command on (``cmd/<field>``), in one order: the one list
    the refusal of an unknown field names and the zone's description publishes."""
    return COMMAND_FIELDS + (COOLING_FIELDS if cooling else ()) + (ACK_FIELD,)

LIMIT_TOLERANCE_K = 1e-6
"""A set point this close to a limit is the limit (82.4 F converts to 28.000000000000004 C)."""
MAX_HOLD_S = 366 * 86400.0
"""Farthest ``hold_until`` ahead of now: a year is a real plan; 1e300 breaks every date display."""


class Unset(enum.Enum):
    """The type of :data:`UNSET`."""

    UNSET = "unset"


UNSET: Final = Unset.UNSET
"""No ``until`` given with a command (``None`` is given: a hold without end)."""
UNTIL_FIELDS = ("setpoint", "level")
"""The commands that take an ``until``."""


class CommandRejected(RoomloopError):
    """A command that was refused; ``reason`` says why in words fit for the result topic."""

    def __init__(self, field: str, reason: str) -> None:
        self.field = field
        self.reason = reason
        super().__init__(f"{field}: {reason}")


def current_level(settings: ZoneSettings, state: ZoneState) -> str:
    """The level in force for ``state`` (as the last step saw it)."""
    if state.mode == "hold" and state.hold_level is not None:
        return state.hold_level
    if state.mode == "auto" and state.level_override is not None:
        return state.level_override
    return state.scheduled_level


def current_setpoint(settings: ZoneSettings, state: ZoneState) -> float:
    """The set point in force for ``state``, clamped to the limits."""
    if state.mode == "hold" and state.hold_setpoint is not None:
        value = state.hold_setpoint
    else:
        value = settings.setpoint_for(current_level(settings, state))
    return min(max(value, settings.limit_min_c), settings.limit_max_c)


def apply_command(
    settings: ZoneSettings,
    state: ZoneState,
    field: str,
    value: object,
    now: float,
    *,
    units: str = "C",
    until: float | Unset | None = UNSET,
) -> ZoneState:
    """Return ``state`` with the command applied, or raise :class:`CommandRejected`.

    ``until`` (``setpoint`` and ``level`` only): make it a hold that ends then (None: never).
    """
    if until is not UNSET:
        return _with_end(settings, state, field, value, until=until, now=now, units=units)
    if field in COOLING_FIELDS or (field == "setpoint" and settings.cooling is not None):
        return _cooling_command(settings, state, field, value, now, units)
    if settings.cooling is not None and field in ("mode", "level"):
        after = apply_command(replace(settings, cooling=None), state, field, value, now)
        return _cooling_hold_follows(settings, state, after)
    heating_command = _HEATING_COMMANDS.get(field)
    if heating_command is not None:
        return heating_command(settings, state, value, now, units)
    fields = command_fields(cooling=settings.cooling is not None)
    raise CommandRejected(field, f"unknown field {field!r}; use one of {', '.join(fields)}")


def _shown(celsius: float, units: str) -> str:
    return f"{round(from_celsius(celsius, units), 6):g}"


def _within_limits(field: str, number: float, low: float, high: float, units: str) -> float:
    """A set point clamped to the zone's limits; refused when it is outside them by more
    than :data:`LIMIT_TOLERANCE_K` (a unit conversion's rounding)."""
    if not low - LIMIT_TOLERANCE_K <= number <= high + LIMIT_TOLERANCE_K:
        raise CommandRejected(
            field,
            f"{field} {_shown(number, units)} is outside the zone's limits "
            f"{_shown(low, units)} to {_shown(high, units)} {units}",
        )
    return min(max(number, low), high)


def _setpoint_command(
    settings: ZoneSettings, state: ZoneState, value: object, now: float, units: str
) -> ZoneState:
    """A hold at a set point within the limits (a running hold keeps its end)."""
    field = "setpoint"
    low, high = settings.limit_min_c, settings.limit_max_c
    number = _within_limits(field, _number(field, value), low, high, units)
    keep_until = state.hold_until if state.mode == "hold" else None
    return replace(
        state,
        mode="hold",
        hold_setpoint=number,
        hold_level=(
            current_level(settings, state) if state.mode != "off" else state.scheduled_level
        ),
        hold_until=keep_until,
        level_override=None,
    )


def _mode_command(
    settings: ZoneSettings, state: ZoneState, value: object, now: float, units: str
) -> ZoneState:
    """``auto`` clears holds and overrides, ``hold`` holds what is in force, ``off`` is off."""
    mode = _word("mode", value, MODE_NAMES)
    if mode == state.mode:
        return state
    if mode == "hold" and state.mode == "off":
        return replace(
            state, mode="hold", hold_setpoint=None, hold_level=state.scheduled_level,
            hold_until=None, level_override=None,
        )
    if mode == "hold":
        return replace(
            state,
            mode="hold",
            hold_setpoint=current_setpoint(settings, state),
            hold_level=current_level(settings, state),
            hold_until=None,
            level_override=None,
        )
    return replace(
        state, mode=mode, hold_setpoint=None, hold_level=None, hold_until=None,
        level_override=None,
    )


def _level_command(
    settings: ZoneSettings, state: ZoneState, value: object, now: float, units: str
) -> ZoneState:
    """In ``auto`` an override of the program's level, otherwise a hold at that level."""
    level = _word("level", value, LEVEL_NAMES)
    if state.mode == "auto":
        return replace(state, level_override=level)
    keep_until = state.hold_until if state.mode == "hold" else None
    return replace(
        state, mode="hold", hold_setpoint=None, hold_level=level, hold_until=keep_until,
        level_override=None,
    )


def _hold_until_command(
    settings: ZoneSettings, state: ZoneState, value: object, now: float, units: str
) -> ZoneState:
    """An end for the running hold, or a hold of what is in force in ``auto``; refused when off."""
    field = "hold_until"
    until = _checked_end(field, _optional_number(field, value), now)
    if state.mode == "off":
        raise CommandRejected(field, "the zone is off; set a mode, set point or level first")
    if state.mode == "auto":
        return replace(
            state,
            mode="hold",
            hold_setpoint=current_setpoint(settings, state),
            hold_level=current_level(settings, state),
            hold_until=until,
            level_override=None,
        )
    return replace(state, hold_until=until)


_HeatingCommand = Callable[[ZoneSettings, ZoneState, object, float, str], ZoneState]
_HEATING_COMMANDS: Final[dict[str, _HeatingCommand]] = {
    "setpoint": _setpoint_command,
    "mode": _mode_command,
    "level": _level_command,
    "hold_until": _hold_until_command,
}
"""The commands of a heating-only zone, by field."""


def _delta(kelvin: float, units: str) -> str:
    return f"{round(delta_from_kelvin(kelvin, units), 6):g}"


def current_cooling_setpoint(settings: ZoneSettings, state: ZoneState) -> float | None:
    """The cooling set point in force for ``state`` (None: none at this level or mode)."""
    cs, c = settings.cooling, state.cooling
    if cs is None:
        return None
    if state.mode == "off":
        return cs.overheat_c
    if state.mode == "hold" and c is not None and c.hold_setpoint is not None:
        return c.hold_setpoint
    value = cs.setpoint_for(current_level(settings, state))
    if value is None or current_level(settings, state) == "protection":
        return value
    return min(max(value, settings.limit_min_c), settings.limit_max_c)


def _cooling_command(  # noqa: PLR0917 - apply_command's arguments
    settings: ZoneSettings, state: ZoneState, field: str, value: object, now: float, units: str
) -> ZoneState:
    """``changeover``, ``cooling_setpoint``, and ``setpoint`` in a zone with a cooling call:
    in ``auto`` changeover the heating and cooling set points keep the dead band (ASHRAE
    Standard 90.1: at least 3 K / 5 F)."""
    cs = settings.cooling
    if cs is None:
        raise CommandRejected(field, "this zone has no cooling call")
    from .stages.cooling import initial

    c = state.cooling if state.cooling is not None else initial(cs, settings.fail_safe_duty)
    low, high = settings.limit_min_c, settings.limit_max_c
    if field == "changeover":
        allowed = ("heat", "cool", "auto") if cs.heating else ("cool",)
        word = _word(field, value, ("heat", "cool", "auto"))
        if word not in allowed:
            raise CommandRejected(field, f"{word}: this zone has no heating output; only cool")
        if word == "auto":
            _check_band(settings, current_setpoint(settings, state),
                        current_cooling_setpoint(settings, state), field, units)
        return with_cooling_state(state, replace(c, changeover=word))
    number = _within_limits(field, _number(field, value), low, high, units)
    if field == "setpoint":
        if c.changeover == "auto":
            _check_band(settings, number, current_cooling_setpoint(settings, state), field, units)
        held = apply_command(replace(settings, cooling=None), state, field, number, now)
        return with_cooling_state(
            held, replace(c, hold_setpoint=current_cooling_setpoint(settings, _in_force(state)))
        )
    if c.changeover == "auto":
        _check_band(settings, current_setpoint(settings, state), number, field, units)
    held = state
    if state.mode != "hold":
        held = apply_command(
            replace(settings, cooling=None), state, "setpoint",
            current_setpoint(settings, state), now,
        )
    return with_cooling_state(held, replace(c, hold_setpoint=number))


def _cooling_hold_follows(settings: ZoneSettings, before: ZoneState, after: ZoneState) -> ZoneState:
    """The cooling hold after a ``mode`` or ``level`` command: a held number keeps the cooling
    set point in force when it was taken (or the one held already); a level, ``auto`` and
    ``off`` leave none, so the level's cooling set point applies (no stale hold leaks in)."""
    c = after.cooling
    if c is None:
        return after
    hold: float | None = None
    if after.mode == "hold" and after.hold_setpoint is not None:
        hold = current_cooling_setpoint(settings, before)
    return with_cooling_state(after, replace(c, hold_setpoint=hold))


def _in_force(state: ZoneState) -> ZoneState:
    """``state`` as the set points in force would read it; in mode ``off`` the program's
    (the overheat limit is no cooling set point to hold)."""
    return replace(state, mode="auto") if state.mode == "off" else state


def _check_band(
    settings: ZoneSettings, heat: float, cool: float | None, field: str, units: str
) -> None:
    """Refuse set points closer than the dead band in ``auto`` (ASHRAE Standard 90.1)."""
    cs = settings.cooling
    if cs is None or cool is None or not cs.heating:
        return
    if cool - heat < cs.dead_band_k - LIMIT_TOLERANCE_K:
        raise CommandRejected(
            field,
            f"heating {_shown(heat, units)} and cooling {_shown(cool, units)} {units} are "
            f"closer than the dead band {_delta(cs.dead_band_k, units)} "
            f"{'F' if units == 'F' else 'K'} that changeover auto keeps (ASHRAE Standard 90.1)",
        )


def _checked_end(
    field: str, until: float | None, now: float, what: str = "hold_until"
) -> float | None:
    """``until`` if it is a fit end for a hold: in the future, at most a year ahead."""
    if until is not None and until <= now:
        raise CommandRejected(
            field,
            f"{what} {until:.0f} is in the past: it must be in the future (now {now:.0f})",
        )
    if until is not None and until > now + MAX_HOLD_S:
        raise CommandRejected(
            field,
            f"{until:.0f} is more than 366 days ahead (latest {now + MAX_HOLD_S:.0f}); "
            "use null for an indefinite hold",
        )
    return until


def _with_end(
    settings: ZoneSettings,
    state: ZoneState,
    field: str,
    value: object,
    *,
    until: float | None,
    now: float,
    units: str,
) -> ZoneState:
    """``setpoint`` or ``level`` as a hold ending at ``until``, in one step."""
    if field not in UNTIL_FIELDS:
        raise CommandRejected(field, f"until goes with {' or '.join(UNTIL_FIELDS)} only")
    end = _checked_end(field, None if until is None else _number(field, until), now, "until")
    if field == "setpoint":
        held = apply_command(settings, state, field, value, now, units=units)
        return replace(held, hold_until=end)
    level = _word(field, value, LEVEL_NAMES)
    after = replace(
        state, mode="hold", hold_setpoint=None, hold_level=level, hold_until=end,
        level_override=None,
    )
    return _cooling_hold_follows(settings, state, after)


def _unwrap(value: object) -> object:
    """Plain payload text may carry JSON (``"21.5"``, ``"\\"auto\\""``, ``null``)."""
    if isinstance(value, bytes):
        try:
            value = value.decode("utf-8")
        except UnicodeDecodeError:
            return value
    if isinstance(value, str):
        text = value.strip()
        try:
            parsed: Any = json.loads(text)
        except ValueError:
            return text
        return parsed
    return value


def _number(field: str, value: object) -> float:
    raw = _unwrap(value)
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        raise CommandRejected(field, f"{value!r} is not a number")
    try:
        number = float(raw)
    except OverflowError:
        raise CommandRejected(field, "the number is too large") from None
    if not math.isfinite(number):
        raise CommandRejected(field, f"{value!r} is not a finite number")
    return number


def _optional_number(field: str, value: object) -> float | None:
    raw = _unwrap(value)
    if raw is None or raw == "":
        return None
    return _number(field, raw)


def _word(field: str, value: object, allowed: tuple[str, ...]) -> str:
    raw = _unwrap(value)
    if not isinstance(raw, str) or raw.strip().lower() not in allowed:
        raise CommandRejected(field, f"{value!r} is not one of {', '.join(allowed)}")
    return raw.strip().lower()
