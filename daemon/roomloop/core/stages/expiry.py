"""Commands that expire: a hold past its ``hold_until`` returns to ``auto``; a level override
set in ``auto`` lasts until the weekly program's level changes."""

from __future__ import annotations

from ..state import ZoneState

Commands = tuple[str, float | None, str | None, float | None, str | None, str]
"""(mode, hold set point, hold level, hold until, level override, the program's level) in
force this tick: the commands section of :class:`~roomloop.core.state.ZoneState`."""


def expire(state: ZoneState, scheduled_level: str, now: float) -> Commands:
    override = state.level_override
    if override is not None and scheduled_level != state.scheduled_level:
        override = None
    hold_until = state.hold_until
    if state.mode == "hold" and hold_until is not None and now >= hold_until:
        return "auto", None, None, None, override, scheduled_level
    return (
        state.mode, state.hold_setpoint, state.hold_level, hold_until, override, scheduled_level
    )
