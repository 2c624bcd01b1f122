"""The journal's zone events: what changed in one zone step that an integrator must see.

A zone steps every few seconds, and most steps change nothing worth a line. The
events here are the transitions: fail-safe engaged and ended, a point going
unreliable and recovering, a frost-protection run starting and ending, a hold that
expired, the program switching the level. Each is logged once, when it happens;
the rest of the picture is in the published state.

A heat source's events (:func:`source_events`): started, stopped, held by its
short-cycle protection (lockout), a remote zone gone stale or heard again.

Pure: :func:`zone_events` compares the state a step started from with the one it
produced (and the outputs before and after); the service logs what it returns.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any, Literal

from roomloop.core.source import SourceOutputs
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
    # a zone that never stepped (a fresh start) holds the default level as a placeholder:
    # the program's level at its first step is where it starts, not a switch
    never_ran = previous is None and before.last_step_at == before.started_at
    if after.scheduled_level != before.scheduled_level and not never_ran:
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


def source_events(
    source: str, *, previous: SourceOutputs | None, outputs: SourceOutputs
) -> list[ZoneEvent]:
    """The events of one heat source's tick: it started or stopped, short-cycle protection
    began to hold it (``lockout``), a remote zone went stale or was heard again.

    ``previous`` is the tick before (``None`` for the first since start: then the source's
    state at start is logged once as ``source.resumed``, and remote zones not heard yet are
    not reported stale: the broker's retained messages are still on their way).
    """
    if previous is None:
        return [
            ZoneEvent(
                "source.resumed",
                "info",
                {"source": source, "running": outputs.enable, "pump": outputs.pump,
                 "reason": outputs.reason, "stale": list(outputs.stale)},
            )
        ]
    events: list[ZoneEvent] = []
    if outputs.enable and not previous.enable:
        events.append(
            ZoneEvent(
                "source.started",
                "info",
                {"source": source, "calling": list(outputs.calling),
                 "starts_1h": outputs.starts_1h, "protection": outputs.protection},
            )
        )
    elif previous.enable and not outputs.enable:
        events.append(
            ZoneEvent(
                "source.stopped", "info", {"source": source, "pump": outputs.pump_reason}
            )
        )
    if outputs.lockout is not None and outputs.lockout != previous.lockout:
        events.append(
            ZoneEvent(
                "source.lockout",
                # most starts per hour reached: the site cycles its source too often
                "warning" if outputs.lockout == "max-starts" else "info",
                {"source": source, "lockout": outputs.lockout, "until": outputs.lockout_until,
                 "calling": list(outputs.calling)},
            )
        )
    went_stale = [z for z in outputs.stale if z not in previous.stale]
    heard_again = [z for z in previous.stale if z not in outputs.stale]
    if went_stale:
        events.append(
            ZoneEvent(
                "source.remote_stale",
                "warning",
                {"source": source, "zones": went_stale, "policy": outputs.stale_policy},
            )
        )
    if heard_again:
        events.append(
            ZoneEvent("source.remote_fresh", "info", {"source": source, "zones": heard_again})
        )
    return events
