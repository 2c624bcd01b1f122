"""The plant model file's shape (DESIGN.md "Plant model file"), frozen once loaded.

A plant is a three-node RC network: heat source (with a transport delay) ->
emitter -> room air <-> building mass, room air -> outdoors, plus internal
gains, and a sensor with a first-order lag, a resolution and noise. Two
extensions beyond DESIGN.md, both optional: ``emitter`` and ``mass`` may be
``null`` (the heat goes straight into the room air; no building mass), which
gives the single-node room the textbook checks need; and ``floor_area_m2`` /
``mass_class`` record what an ISO 13790 class a plant claims, so a test can
check the capacities against the class figures.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

Positive = Annotated[float, Field(gt=0, allow_inf_nan=False)]
NonNegative = Annotated[float, Field(ge=0, allow_inf_nan=False)]


class _Strict(BaseModel):
    """Frozen, and unknown keys are errors (a typo is never ignored), as in the site file."""

    model_config = ConfigDict(frozen=True, extra="forbid")


class Emitter(_Strict):
    """The radiator, floor screed or heater element between the heat source and the room."""

    capacity_j_per_k: Positive
    conductance_w_per_k: Positive | None = None
    """Linear emitter: output = conductance x (T_emitter - T_room)."""
    rated_output_w: Positive | None = None
    """EN 442: output = rated_output_w x ((T_emitter - T_room) / 50 K) ** exponent."""
    exponent: Annotated[float, Field(ge=1.0, le=2.0, allow_inf_nan=False)] | None = None

    @model_validator(mode="after")
    def _one_law(self) -> Emitter:
        linear = self.conductance_w_per_k is not None
        en442 = self.rated_output_w is not None or self.exponent is not None
        if linear and en442:
            raise ValueError(
                "give conductance_w_per_k (linear emitter) or rated_output_w and exponent "
                "(EN 442), not both"
            )
        if not linear and not en442:
            raise ValueError(
                "give conductance_w_per_k (linear emitter) or rated_output_w and exponent (EN 442)"
            )
        if en442 and (self.rated_output_w is None or self.exponent is None):
            raise ValueError("an EN 442 emitter needs both rated_output_w and exponent")
        return self

    @property
    def is_linear(self) -> bool:
        return self.conductance_w_per_k is not None


class Room(_Strict):
    """The room air (with its furnishings): the node the controller must hold at the set point."""

    capacity_j_per_k: Positive
    loss_w_per_k: Positive
    """Everything from the room to outdoors: fabric and ventilation."""


class Mass(_Strict):
    """The building's thermal mass, coupled only to the room air."""

    capacity_j_per_k: Positive
    conductance_w_per_k: Positive


class Sensor(_Strict):
    """The room sensor: first-order lag on the room air, then noise, then the resolution."""

    time_constant_s: NonNegative = 0.0
    resolution_k: NonNegative = 0.0
    noise_k: NonNegative = 0.0
    """Standard deviation of Gaussian noise added before the reading is rounded."""


class PlantSpec(_Strict):
    """One plant model file."""

    name: Annotated[str, Field(min_length=1, max_length=64, pattern=r"^[a-z0-9][a-z0-9_-]*$")]
    heater_w: Positive
    """Heat output while the relay is closed (after the transport delay)."""
    transport_delay_s: NonNegative = 0.0
    emitter: Emitter | None
    room: Room
    mass: Mass | None
    sensor: Sensor = Sensor()
    internal_gains_w: NonNegative = 0.0
    floor_area_m2: Positive | None = None
    mass_class: Literal["very-light", "light", "medium", "heavy", "very-heavy"] | None = None

    def emitter_output_w(self, excess_k: float) -> float:
        """Heat from the emitter to the room at an emitter-to-room excess of ``excess_k``."""
        emitter = self.emitter
        if emitter is None:
            raise ValueError("this plant has no emitter")
        if emitter.conductance_w_per_k is not None:
            return float(emitter.conductance_w_per_k * excess_k)
        assert emitter.rated_output_w is not None and emitter.exponent is not None
        return en442_output_w(emitter.rated_output_w, emitter.exponent, excess_k)

    def emitter_excess_for_output_k(self, output_w: float) -> float:
        """The steady emitter-to-room excess that delivers ``output_w`` (inverse of the law)."""
        emitter = self.emitter
        if emitter is None:
            raise ValueError("this plant has no emitter")
        if emitter.conductance_w_per_k is not None:
            return output_w / emitter.conductance_w_per_k
        assert emitter.rated_output_w is not None and emitter.exponent is not None
        if output_w <= 0:
            return 0.0
        return float(50.0 * (output_w / emitter.rated_output_w) ** (1.0 / emitter.exponent))

    def outdoor_for_load_c(self, load: float, room_c: float = 20.0) -> float:
        """DESIGN.md: the outdoor temperature at which the heater covers ``load`` of its output."""
        return room_c - (load * self.heater_w + self.internal_gains_w) / self.room.loss_w_per_k


def en442_output_w(rated_output_w: float, exponent: float, excess_k: float) -> float:
    """EN 442-2: Phi = Phi_n (dT / 50 K) ** n, odd-extended below 0 K.

    A radiator colder than the room takes heat back by the same law; the odd extension
    keeps the output continuous (and its slope finite) through 0 K.
    """
    if excess_k >= 0.0:
        return float(rated_output_w * (excess_k / 50.0) ** exponent)
    return -float(rated_output_w * (-excess_k / 50.0) ** exponent)


def log_mean_excess_k(flow_c: float, return_c: float, room_c: float) -> float:
    """EN 442-2 logarithmic mean excess (ts - tr) / ln((ts - ti) / (tr - ti))."""
    if flow_c == return_c:
        return flow_c - room_c
    return (flow_c - return_c) / math.log((flow_c - room_c) / (return_c - room_c))
