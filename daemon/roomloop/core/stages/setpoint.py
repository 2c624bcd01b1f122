"""The set point ``S`` and the level it comes from, by mode, clamped to the zone's limits.

``auto``: the override's level, else the program's; ``hold``: the held set point, else
the held level's; ``off``: the protection level (what protection holds, see
:mod:`.protection`).
"""

from __future__ import annotations

from collections.abc import Mapping
from types import MappingProxyType

from ..settings import LEVEL_NAMES, ZoneSettings
from .expiry import Commands


def clamped(s: ZoneSettings, setpoint: float) -> float:
    """``setpoint`` within the zone's limits."""
    if setpoint < s.limit_min_c:
        return s.limit_min_c
    if setpoint > s.limit_max_c:
        return s.limit_max_c
    return setpoint


def level_setpoints(s: ZoneSettings) -> Mapping[str, float]:
    """Each level's configured set point, clamped (computed once per settings)."""
    return MappingProxyType({level: clamped(s, s.setpoint_for(level)) for level in LEVEL_NAMES})


def choose(
    s: ZoneSettings, levels: Mapping[str, float], commands: Commands
) -> tuple[str, float]:
    """(level, set point) under the commands in force (:func:`.expiry.expire`); ``levels``
    from :func:`level_setpoints`."""
    mode, hold_setpoint, hold_level, _, override, scheduled_level = commands
    if mode == "auto":
        level = override if override is not None else scheduled_level
    elif mode == "hold":
        level = hold_level if hold_level is not None else scheduled_level
        if hold_setpoint is not None:
            return level, clamped(s, hold_setpoint)
    else:
        return "protection", levels["protection"]
    # (an unknown level gets the protection set point, as ZoneSettings.setpoint_for does)
    return level, levels.get(level, levels["protection"])
