"""Rate-limited log events: a broken sensor or a command flood must not flood the journal.

The first event for a key (point and problem) is logged at once, in full. The
same failure repeated is folded: repeats are counted, and a reminder (the same
event, with ``suppressed=N`` since the line before and ``failing_for_s``) is
logged after ``interval_s``, then after twice as long each time, up to
``max_interval_s``: an hour's outage of one sensor is a handful of lines, not one
per poll or per five minutes. A different failure of the same key (another
``reason`` or ``reliability`` verdict) is logged at once. When the point is good again one
``*.recovered`` event closes the story with ``failed_for_s`` and ``failures``
(how many failures the outage had in all).

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
    first_at: float = 0.0
    """When the problem began (for :meth:`problem`)."""
    failures: int = 1
    """Problems seen since ``first_at``, logged or not."""
    wait_s: float = 0.0
    """The pause before the next reminder of the same problem (doubles up to the cap)."""
    signature: str = ""
    """The problem's reason: another failure of the same key is logged at once."""


@dataclass
class RateLimitedLog:
    """Log ``event`` for ``key`` at most once per ``interval_s`` (``now`` passed in)."""

    logger: Any
    interval_s: float = 300.0
    burst: int = 1
    """Events :meth:`event` logs per window before it starts counting."""
    max_interval_s: float = 3600.0
    """The longest pause between two reminders of the same problem (:meth:`problem`)."""
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
        """Log a problem event unless the same one was logged recently; returns whether."""
        # what makes it "the same failure": its reason (or reliability verdict), not the
        # values that move with every poll (a raw reading, a retry pause)
        signature = str(fields.get("reason", fields.get("reliability", "")))
        entry = self._entries.get((key, event))
        if entry is None:
            self._entries[(key, event)] = _Entry(
                now, first_at=now, wait_s=self.interval_s, signature=signature
            )
            self.logger.warning(event, **fields)
            return True
        entry.failures += 1
        if signature == entry.signature and now - entry.last_logged < entry.wait_s:
            entry.suppressed += 1
            return False
        if signature == entry.signature:  # a reminder: the next one waits longer
            entry.wait_s = min(entry.wait_s * 2, max(self.max_interval_s, self.interval_s))
        else:  # another failure: said at once, reminders start again at the shortest pause
            entry.wait_s = self.interval_s
            entry.signature = signature
        if entry.suppressed:
            fields["suppressed"] = entry.suppressed
        fields["failing_for_s"] = round(now - entry.first_at, 1)
        entry.last_logged = now
        entry.suppressed = 0
        self.logger.warning(event, **fields)
        return True

    def recovered(self, key: str, event: str, now: float | None = None, **fields: Any) -> bool:
        """Log ``event`` once if ``key`` had logged problems, with how long and how often it
        failed (``now`` given); forget them."""
        keys = [k for k in self._entries if k[0] == key]
        if not keys:
            return False
        entries = [self._entries.pop(k) for k in keys]
        if now is not None:
            fields["failed_for_s"] = round(now - min(e.first_at for e in entries), 1)
        fields["failures"] = sum(e.failures for e in entries)
        self.logger.info(event, **fields)
        return True


def get_logger(area: str) -> Any:
    """``roomloop.<area>`` structlog logger."""
    return structlog.get_logger(f"roomloop.{area}")
