"""Time for the service: a real clock and a faster simulated one behind one protocol.

The service never reads ``time.time()`` or calls ``asyncio.sleep`` directly for
control timing; it asks its :class:`Clock`. The demo and the tests run the very
same code on a :class:`SimulatedClock` that runs ``speed`` times faster than the
wall clock, so an hour of control takes seconds without a separate code path.
"""

from __future__ import annotations

import asyncio
import time
from typing import Protocol


class Clock(Protocol):
    """Where the service gets its time from: POSIX seconds, and sleeping in those seconds."""

    @property
    def speed(self) -> float:
        """Clock seconds per real second (1 for the real clock)."""
        ...

    def now(self) -> float:
        """The current time, POSIX seconds."""
        ...

    async def sleep(self, seconds: float) -> None:
        """Sleep for ``seconds`` of this clock's time."""
        ...


class RealClock:
    """The wall clock."""

    @property
    def speed(self) -> float:
        return 1.0

    def now(self) -> float:
        return time.time()

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds))


class SimulatedClock:
    """A clock running ``speed`` times faster than real time.

    Its time is ``start + (real time - origin) * speed``: at the real instant
    ``origin`` (POSIX seconds, default: now) it reads ``start`` (default:
    ``origin``). Two processes given the same ``origin`` share one simulated
    timeline, so a service restarted in a test continues where it left off.
    Real time advances on the monotonic clock, so the simulated clock advances
    steadily while the event loop is busy, exactly like the real clock does.
    """

    def __init__(
        self, speed: float, start: float | None = None, origin: float | None = None
    ) -> None:
        if not speed > 0:
            raise ValueError("a clock speed must be positive")
        self._speed = float(speed)
        wall, mono = time.time(), time.monotonic()
        self._origin = wall if origin is None else float(origin)
        self._start = self._origin if start is None else float(start)
        # real time now, expressed on the monotonic clock
        self._mono_origin = mono - (wall - self._origin)

    @property
    def speed(self) -> float:
        return self._speed

    def now(self) -> float:
        return self._start + (time.monotonic() - self._mono_origin) * self._speed

    async def sleep(self, seconds: float) -> None:
        await asyncio.sleep(max(0.0, seconds) / self._speed)
