"""Rate-limited log events: a broken sensor must not flood the journal.

The first event for a key (point and problem) is logged at once; repeats
within ``interval_s`` are counted, and the next event after the interval
carries ``suppressed=N``. When the point is good again one ``*.recovered``
event closes the story.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import structlog


@dataclass
class _Entry:
    last_logged: float
    suppressed: int = 0


@dataclass
class RateLimitedLog:
    """Log ``event`` for ``key`` at most once per ``interval_s`` (``now`` passed in)."""

    logger: Any
    interval_s: float = 300.0
    _entries: dict[tuple[str, str], _Entry] = field(default_factory=dict)

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
