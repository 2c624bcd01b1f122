"""Rate-limited log events: a broken sensor or a command flood must not flood the journal.

The first event for a key (point and problem) is logged at once; repeats
within ``interval_s`` are counted, and the next event after the interval
carries ``suppressed=N``. When the point is good again one ``*.recovered``
event closes the story.

Routine events that may come in a flood (every command answer) go through
:meth:`RateLimitedLog.event`: up to ``burst`` per ``interval_s`` are logged as
they come, the rest counted, and the first one logged after the window carries
``suppressed=N`` (journald's own rate limit would otherwise drop real warnings).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import structlog


@dataclass
class _Entry:
    last_logged: float
    suppressed: int = 0
    logged: int = 1
    """Events logged in the window that started at ``last_logged`` (for :meth:`event`)."""


@dataclass
class RateLimitedLog:
    """Log ``event`` for ``key`` at most once per ``interval_s`` (``now`` passed in)."""

    logger: Any
    interval_s: float = 300.0
    burst: int = 1
    """Events :meth:`event` logs per window before it starts counting."""
    _entries: dict[tuple[str, str], _Entry] = field(default_factory=dict)

    def event(self, key: str, event: str, now: float, level: str = "info", **fields: Any) -> bool:
        """Log a routine event unless ``burst`` were logged in this window; returns whether."""
        entry = self._entries.get((key, event))
        if entry is not None and now - entry.last_logged < self.interval_s:
            if entry.logged >= self.burst:
                entry.suppressed += 1
                return False
            entry.logged += 1
        else:
            suppressed = entry.suppressed if entry is not None else 0
            self._entries[(key, event)] = _Entry(now)
            if suppressed:
                fields["suppressed"] = suppressed
                fields["suppressed_in_s"] = self.interval_s
        getattr(self.logger, level)(event, **fields)
        return True

    def problem(self, key: str, event: str, now: float, **fields: Any) -> bool:
        """Log a problem event unless logged recently; returns whether it was logged."""
        entry = self._entries.get((key, event))
        if entry is not None and now - entry.last_logged < self.interval_s:
            entry.suppressed += 1
            return False
        suppressed = entry.suppressed if entry is not None else 0
        self._entries[(key, event)] = _Entry(now)
        if suppressed:
            fields["suppressed"] = suppressed
        self.logger.warning(event, **fields)
        return True

    def recovered(self, key: str, event: str, **fields: Any) -> bool:
        """Log ``event`` once if ``key`` had logged problems; forget them."""
        keys = [k for k in self._entries if k[0] == key]
        if not keys:
            return False
        for k in keys:
            del self._entries[k]
        self.logger.info(event, **fields)
        return True


def get_logger(area: str) -> Any:
    """``roomloop.<area>`` structlog logger."""
    return structlog.get_logger(f"roomloop.{area}")
