"""The service's clocks live in :mod:`roomloop.clock` (``io`` uses them too); re-exported here."""

from roomloop.clock import (
    AutojumpLoop,
    Clock,
    PacedClock,
    RealClock,
    SimulatedClock,
    VirtualClock,
    sleep_or_wake,
    sleep_until,
    timeout,
    wait_for,
    wait_tasks,
)

__all__ = [
    "AutojumpLoop",
    "Clock",
    "PacedClock",
    "RealClock",
    "SimulatedClock",
    "VirtualClock",
    "sleep_or_wake",
    "sleep_until",
    "timeout",
    "wait_for",
    "wait_tasks",
]
