"""Each zone's retained description, ``<prefix>/zone/<zone>/description``: what a dashboard
needs to draw the zone and bound its controls, from the site file alone.

It changes only when the site file does, so it is sent once per broker connection (the
publisher's :meth:`~roomloop.service.publisher.StatePublisher.describe`). Temperatures are
in the site's units, as every payload's; docs/topics.md lists the fields.
"""

from __future__ import annotations

from typing import Any

from roomloop.config.models import Zone
from roomloop.core.alarms import ALARM_KINDS
from roomloop.core.commands import MAX_HOLD_S, command_fields
from roomloop.core.settings import LEVEL_NAMES, MODE_NAMES, ZoneSettings
from roomloop.units import delta_from_kelvin, from_celsius


def _abs(celsius: float, units: str) -> float:
    return round(from_celsius(celsius, units), 2)


def _delta(kelvin: float, units: str) -> float:
    return round(delta_from_kelvin(kelvin, units), 3)


def description_payload(
    zone: Zone, settings: ZoneSettings, *, units: str, publish_interval_s: float
) -> dict[str, Any]:
    """The retained description JSON of one zone."""
    low, high = settings.limit_min_c, settings.limit_max_c
    payload: dict[str, Any] = {
        "zone": zone.name,
        "units": units,
        "heating": zone.heating,
        "limits": {"min": _abs(low, units), "max": _abs(high, units)},
        # each level's set point as the controller uses it (clamped to the limits)
        "setpoints": {
            level: _abs(min(max(settings.setpoint_for(level), low), high), units)
            for level in LEVEL_NAMES
        },
        "differential": _delta(settings.differential_k, units),
        "levels": list(LEVEL_NAMES),
        "modes": list(MODE_NAMES),
        "commands": list(command_fields(cooling=settings.cooling is not None)),
        "max_hold_s": MAX_HOLD_S,
        "program": [
            {"days": list(entry.days), "at": entry.at, "level": entry.level}
            | ({} if entry.changeover is None else {"changeover": entry.changeover})
            for entry in zone.program
        ],
        "default_level": zone.default_level,
        "protection_in_off": zone.protection_in_off,
        "inputs": list(zone.inputs),
        "combine": zone.combine,
        "output": zone.output,
        "safe_state": zone.safe_state,
        "fail_safe_policy": zone.fail_safe.policy,
        "optimum_start": zone.optimum_start.enabled,
        "alarm_kinds": list(ALARM_KINDS),
        "tick_s": zone.tick_s,
        "publish_interval_s": publish_interval_s,
    }
    cooling = settings.cooling
    if cooling is not None and zone.cooling is not None:
        payload["cooling"] = {
            "type": cooling.type,
            "output": zone.cooling.output,
            # each level's cooling set point as the controller uses it (clamped to the limits)
            "setpoints": {
                level: _abs(min(max(value, low), high), units)
                for level, value in (
                    ("comfort", cooling.comfort_c),
                    ("standby", cooling.standby_c),
                    ("economy", cooling.economy_c),
                )
            },
            "overheat": None if cooling.overheat_c is None else _abs(cooling.overheat_c, units),
            "differential": _delta(cooling.differential_k, units),
            "changeover": cooling.initial_changeover,
            "changeovers": ["heat", "cool", "auto"] if cooling.heating else ["cool"],
            "dead_band": _delta(cooling.dead_band_k, units),
            "changeover_output": zone.changeover.output,
        }
    return payload
