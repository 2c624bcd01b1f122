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

Transport = Literal["ok", "comm-failure", "over-range", "under-range"]
"""What the I/O layer may say of a reading: ``ok`` (a value arrived), ``comm-failure`` (no
answer, an undecodable reply, a bad payload), or the verdict a device itself signalled with
a raw sentinel value (or an infinite float, which carries no value either). Range,
staleness, rate and stuck are the core's judgement (:mod:`roomloop.core.reliability`)."""


BandReason = Literal["cut-in", "cut-out", "on-to-cut-out", "off-to-cut-in"]
"""The switching band decided: it switched the relay on (``cut-in``) or off (``cut-out``), or
holds it where it is until the other edge (``on-to-cut-out``, ``off-to-cut-in``)."""

Reason = Literal[
    "cut-in", "cut-out", "on-to-cut-out", "off-to-cut-in",
    "last-temperature:cut-in", "last-temperature:cut-out",
    "last-temperature:on-to-cut-out", "last-temperature:off-to-cut-in",
    "min-on", "min-off", "max-cycles",
    "protection", "mode-off", "no-temperature",
    "fail-safe:off", "fail-safe:fixed-duty", "fail-safe:learned-duty",
    "changeover", "changeover-time", "overheat",
]
"""The rule that decided roomloop's relay this tick (published as the state's ``reason``):
the band (:data:`BandReason`), the same on the last trusted temperature while readings are
missing (``last-temperature:``), short-cycle protection holding the relay (``min-on``,
``min-off``, ``max-cycles``), ``protection``, ``mode-off``, ``no-temperature`` (never had a
reading), or fail-safe with its policy. A zone with a cooling call adds ``changeover`` (the
zone is set up for the other call), ``changeover-time`` (the other call ran too recently, or
the changeover output has not yet been held long enough) and, for cooling, ``overheat``."""

CallName = Literal["heat", "cool"]

BaselineReason = Literal["hold", "anticipator-cut-out", "pulse", "pause"]
"""Further reasons of the simulator's baseline controllers (:mod:`roomloop.plant.baselines`)."""


@dataclass(frozen=True, slots=True)
class PointSample:
    """The latest reading of one input point as the I/O layer delivered it: transport facts only.

    ``value`` is in Celsius (decoded, scaled and converted, never judged against a
    range) or ``None`` when the last attempt brought no number. ``received_at`` is
    when the attempt ended (POSIX seconds; ``None``: nothing yet), so the core
    judges staleness itself. ``raw`` is the number as the device sent it, for logs.
    """

    name: str
    value: float | None
    received_at: float | None
    transport: Transport = "ok"
    raw: float | None = None


@dataclass(frozen=True, slots=True)
class ZoneInputs:
    """Everything the zone step needs besides its state and the time."""

    samples: tuple[PointSample, ...]
    """The zone's input points' samples, matched to its configured points by name (order and
    extra samples do not matter; a configured point without a sample has no reading)."""
    scheduled_level: Literal["comfort", "standby", "economy", "protection"] = "comfort"
    """The level the weekly program picks now (the service evaluates the program)."""
    backup: PointSample | None = None
    """The backup point's sample (also matched by name; it may be in ``samples`` instead)."""


@dataclass(frozen=True, slots=True)
class CoolingOutputs:
    """The cooling call's decision of one tick and the changeover, as the state shows them."""

    demand: bool
    """The cooling call (the cooling output's wanted state)."""
    reason: Reason
    setpoint: float | None
    """The cooling set point in force (None: no cooling wanted at this level or mode)."""
    changeover: str
    """``heat``, ``cool`` or ``auto``: which calls the zone may make."""
    side: CallName
    """The call the zone is set up for now (the changeover output's position)."""
    call: CallName | None
    """The active call: ``heat``, ``cool`` or None (both off)."""
    changeover_output: bool | None
    """The changeover output's wanted state (energised), None: none fitted or not yet set."""
    anticipator_k: float
    droop_k: float
    on_fraction_1h: float = 0.0
    cycles_1h: int = 0


@dataclass(frozen=True, slots=True)
class ZoneOutputs:
    """The decision of one tick and everything the published state shows."""

    demand: bool
    reason: Reason | BaselineReason
    """Which rule decided (:data:`Reason`), e.g. ``cut-out``, ``min-on``, ``fail-safe:off``."""
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

    @property
    def cooling(self) -> CoolingOutputs | None:
        """The cooling call and changeover: None in a heating-only zone (a zone with a cooling
        call has :class:`DualZoneOutputs`, whose own field this is)."""
        return None


@dataclass(frozen=True, slots=True)
class DualZoneOutputs(ZoneOutputs):
    """The outputs of a zone with a cooling call: :class:`ZoneOutputs` and the cooling part."""

    cooling: CoolingOutputs | None = None


StateT = TypeVar("StateT")


class Controller(Protocol[StateT]):
    """The shape every controller has: ours, and the baselines the simulator compares with."""

    def initial_state(self, now: float) -> StateT: ...

    def step(self, state: StateT, inputs: ZoneInputs, now: float) -> tuple[StateT, ZoneOutputs]: ...
