"""The two shapes field I/O has for the service and the simulator.

A Modbus link, the MQTT points and a simulated device all look the same from
above: an :class:`InputSource` hands out the latest :class:`PointSample` per
input point, an :class:`OutputSink` switches output points and says whether
the device confirmed it. The service never needs to know which one it has.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, Protocol, runtime_checkable

from roomloop.core.types import PointSample

OutputVerdict = Literal["ok", "pending", "mismatch", "comm-failure", "unverified"]
"""``ok`` read back as wanted; ``pending`` written, read-back not yet in;
``mismatch`` read back differently (or the state topic never answered);
``comm-failure`` the write itself failed; ``unverified`` written, no read-back configured."""


@dataclass(frozen=True, slots=True)
class OutputState:
    """What is known about one output point after the last write or read-back."""

    name: str
    wanted: bool | None = None
    """The last commanded state (``None``: never commanded)."""
    confirmed: bool | None = None
    """The state the device reported last (``None``: unknown)."""
    verdict: OutputVerdict = "pending"
    detail: str | None = None
    written_at: float | None = None
    confirmed_at: float | None = None


@runtime_checkable
class InputSource(Protocol):
    """Something that delivers readings of input points."""

    def input_names(self) -> tuple[str, ...]: ...

    def samples(self, now: float) -> dict[str, PointSample]:
        """The latest sample of every input point, as it arrived (transport facts only:
        the core judges range and staleness from ``value`` and ``received_at``)."""
        ...


@runtime_checkable
class OutputSink(Protocol):
    """Something that switches output points and verifies them."""

    def output_names(self) -> tuple[str, ...]: ...

    async def set_output(self, name: str, on: bool) -> OutputState:
        """Command ``name`` on or off now; returns after the write (and read-back where quick)."""
        ...

    def output_state(self, name: str) -> OutputState: ...

