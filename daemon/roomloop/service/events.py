"""The journal's zone events: what changed in one zone step that an integrator must see.

A zone steps every few seconds, and most steps change nothing worth a line. The
events here are the transitions: fail-safe engaged and ended, a point going
unreliable and recovering, a frost-protection run starting and ending, a hold that
expired, the program switching the level. Each is logged once, when it happens;
the rest of the picture is in the published state.

Pure: :func:`zone_events` compares the state a step started from with the one it
produced (and the outputs before and after); the service logs what it returns.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

from roomloop.core.state import ZoneState
from roomloop.core.types import ZoneOutputs

EventLevel = Literal["info", "warning"]


@dataclass(frozen=True, slots=True)
class ZoneEvent:
    """One journal line: its event name, its level and its fields."""

    event: str
    level: EventLevel
    fields: Mapping[str, Any] = field(default_factory=dict)


def zone_events(
    zone: str,
    *,
    now: float,
    before: ZoneState,
    after: ZoneState,
    previous: ZoneOutputs | None,
    outputs: ZoneOutputs,
) -> list[ZoneEvent]:
    """The events of one step of ``zone``: ``before`` is the state the step started from (with
    any command already applied), ``after`` the state it returned; ``previous`` the outputs of
    the step before (``None`` for the first step since start), ``outputs`` this step's."""
    events: list[ZoneEvent] = []
    if outputs.fail_safe and (previous is None or not previous.fail_safe):
        events.append(
            ZoneEvent(
                "zone.fail_safe_engaged",
                "warning",
                {
                    "zone": zone,
                    "policy": outputs.fail_safe_policy,
                    "reason": outputs.fail_safe_reason,
                },
            )
        )
    elif previous is not None and previous.fail_safe and not outputs.fail_safe:
        events.append(ZoneEvent("zone.fail_safe_ended", "info", {"zone": zone}))
    events += _point_events(zone, previous, outputs)
    protecting = outputs.reason == "protection"
    was_protecting = previous is not None and previous.reason == "protection"
    if protecting and not was_protecting:
        events.append(
            ZoneEvent(
                "zone.protection_running",
                "warning",
                {"zone": zone, "temperature": outputs.temperature, "mode": outputs.mode},
            )
        )
    elif was_protecting and not protecting:
        events.append(ZoneEvent("zone.protection_ended", "info", {"zone": zone}))
    if (
        before.mode == "hold"
        and before.hold_until is not None
        and now >= before.hold_until
        and after.mode != "hold"
    ):
        events.append(
            ZoneEvent(
                "zone.hold_expired",
                "info",
                {"zone": zone, "hold_until": before.hold_until, "mode": after.mode},
            )
        )
    if after.scheduled_level != before.scheduled_level:
        events.append(
            ZoneEvent(
                "zone.program_switched",
                "info",
                {
                    "zone": zone,
                    "level_from": before.scheduled_level,
                    "level_to": after.scheduled_level,
                    # the program's level applies in mode auto only, and not over an override
                    "applies": after.mode == "auto",
                },
            )
        )
    return events


def _point_events(
    zone: str, previous: ZoneOutputs | None, outputs: ZoneOutputs
) -> list[ZoneEvent]:
    """A point whose reliability left ``ok`` (warning) or came back to it (info). At the first
    step after start every point that is not ``ok`` is named, so a restart shows them too."""
    events: list[ZoneEvent] = []
    old = {} if previous is None else previous.reliability
    for point, now_verdict in outputs.reliability.items():
        was = old.get(point, "ok")
        if now_verdict == was:
            continue
        if now_verdict == "ok":
            fields = {"zone": zone, "point": point, "was": was}
            events.append(ZoneEvent("zone.point_recovered", "info", fields))
        else:
            events.append(
                ZoneEvent(
                    "zone.point_unreliable",
                    "warning",
                    {"zone": zone, "point": point, "reliability": now_verdict, "was": was},
                )
            )
    return events
