"""The values that cross the controller's boundary: what comes in each tick, what goes out.

The controller is sans-IO: the service, the simulator and the demo build a
:class:`ZoneInputs` from whatever they have (Modbus, MQTT, a plant model) and
act on the :class:`ZoneOutputs`. Time is always an argument (``now``, POSIX
seconds, possibly from a simulated clock); nothing here reads a clock.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Literal, Protocol, TypeVar

Reliability = Literal[
    "ok", "stale", "comm-failure", "over-range", "under-range", "implausible", "stuck"
]
"""Per point, after BACnet's reliability property (ASHRAE 135)."""

RELIABILITY_VALUES: tuple[Reliability, ...] = (
    "ok", "stale", "comm-failure", "over-range", "under-range", "implausible", "stuck",
)


@dataclass(frozen=True, slots=True)
class PointSample:
    """The latest reading of one input point as the I/O layer delivered it.

    ``value`` is in Celsius (already decoded, scaled and converted) or ``None``
    when the last attempt failed. ``received_at`` is when ``value`` arrived (POSIX
    seconds), so the core can judge staleness itself. ``transport`` is what the
    I/O layer knows: ``ok``, ``comm-failure``, or a range/sentinel verdict it
    made from the raw value (``over-range``, ``under-range``).
    """

    name: str
    value: float | None
    received_at: float | None
    transport: Reliability = "ok"


@dataclass(frozen=True, slots=True)
class ZoneInputs:
    """Everything the zone step needs besides its state and the time."""

    samples: tuple[PointSample, ...]
    """One per configured input point, in the zone's configured order."""
    scheduled_level: Literal["comfort", "standby", "economy", "protection"] = "comfort"
    """The level the weekly program picks now (the service evaluates the program)."""
    backup: PointSample | None = None


@dataclass(frozen=True, slots=True)
class ZoneOutputs:
    """The decision of one tick and everything the published state shows."""

    demand: bool
    reason: str
    """Which rule decided, e.g. ``cut-out``, ``min-on``, ``protection``, ``fail-safe:off``."""
    temperature: float | None
    setpoint: float
    level: str
    mode: str
    anticipator_k: float
    droop_k: float
    reliability: dict[str, Reliability] = field(default_factory=dict)
    fail_safe: bool = False
    fail_safe_policy: str | None = None
    fail_safe_reason: str | None = None
    on_fraction_1h: float = 0.0
    cycles_1h: int = 0


StateT = TypeVar("StateT")


class Controller(Protocol[StateT]):
    """The shape every controller has: ours, and the baselines the simulator compares with."""

    def initial_state(self, now: float) -> StateT: ...

    def step(self, state: StateT, inputs: ZoneInputs, now: float) -> tuple[StateT, ZoneOutputs]: ...
