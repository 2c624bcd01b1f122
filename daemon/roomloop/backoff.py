"""The one backoff policy: a pause that doubles from ``min_s`` up to ``max_s``.

Pure (no clock, no sleeping): the caller asks for the next pause and waits it on its
own clock. Used by the broker connection, a Modbus link's reconnection and retries,
and the service's restart of a failed task.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Backoff:
    """Pauses ``min_s, 2 min_s, 4 min_s, ...`` never above ``max_s``."""

    min_s: float
    max_s: float
    factor: float = 2.0

    def __post_init__(self) -> None:
        if not 0 <= self.min_s <= self.max_s or self.factor < 1:
            raise ValueError(f"a backoff needs 0 <= min_s <= max_s and factor >= 1: {self}")

    def first(self) -> float:
        return self.min_s

    def after(self, pause_s: float) -> float:
        """The pause that follows ``pause_s``."""
        return min(max(pause_s, self.min_s) * self.factor, self.max_s)

    def nth(self, attempt: int) -> float:
        """The pause before retry ``attempt`` (1 for the first retry)."""
        return min(self.min_s * self.factor ** max(0, attempt - 1), self.max_s)
