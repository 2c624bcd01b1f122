"""The plant model file's shape (DESIGN.md "Plant model file"), frozen once loaded.

A plant is a three-node RC network: heat source (with a transport delay) ->
emitter -> room air <-> building mass, room air -> outdoors, plus internal
gains, and a sensor with a first-order lag, a resolution and noise. Two
extensions beyond DESIGN.md, both optional: ``emitter`` and ``mass`` may be
``null`` (the heat goes straight into the room air; no building mass), which
gives the single-node room the textbook checks need; and ``floor_area_m2`` /
``mass_class`` record what an ISO 13790 class a plant claims, so a test can
check the capacities against the class figures.

A plant that can cool gives ``cooler_w``: while the cooling call is on (after the same
transport delay) the cooling source takes that much heat out of the emitter (a fan coil's
coil on chilled water, a split unit's evaporator), so the emitter runs below the room and
draws heat out of it by the emitter's own law. A plant without ``cooler_w`` only heats.
"""

from __future__ import annotations

import math
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

MIN_NODE_TIME_CONSTANT_S = 10.0
"""Shortest physical time constant (capacity over the sum of the node's conductances) a
plant file may give a node. The fastest real node, a bare electric element or the air of
a small room without furnishings, takes minutes; a few seconds or less means a capacity or
conductance off by orders of magnitude (a unit slip), and the simulation's stable step would
shrink with it until a run takes hours."""
MIN_SENSOR_TIME_CONSTANT_S = 1.0
"""A sensor lag is 0 (none) or at least this long; a bare thermistor takes tens of seconds."""

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
    cooler_w: Positive | None = None
    """Heat removed while the cooling call is on (after the transport delay); ``None``: the
    plant cannot cool."""
    transport_delay_s: NonNegative = 0.0
    emitter: Emitter | None
    room: Room
    mass: Mass | None
    sensor: Sensor = Sensor()
    internal_gains_w: NonNegative = 0.0
    floor_area_m2: Positive | None = None
    mass_class: Literal["very-light", "light", "medium", "heavy", "very-heavy"] | None = None

    def emitter_slope_w_per_k(self) -> float:
        """The emitter's steepest conductance in use (0 without an emitter).

        Linear: its conductance. EN 442: the law's slope at the excess reached with the
        heater (or the cooler, whichever is larger) on at full output for good, times 1.5 for
        margin.
        """
        emitter = self.emitter
        if emitter is None:
            return 0.0
        if emitter.conductance_w_per_k is not None:
            return float(emitter.conductance_w_per_k)
        assert emitter.rated_output_w is not None and emitter.exponent is not None
        top = 1.5 * self.emitter_excess_for_output_k(max(self.heater_w, self.cooler_w or 0.0))
        return float(
            emitter.exponent
            * emitter.rated_output_w
            / 50.0
            * (top / 50.0) ** (emitter.exponent - 1.0)
        )

    def node_time_constants_s(self) -> dict[tuple[str, ...], float]:
        """Each node's time constant (capacity / sum of its conductances), keyed by the path
        of the capacity that sets it; the sensor's lag under its own key when it has one."""
        ke = self.emitter_slope_w_per_k()
        km = self.mass.conductance_w_per_k if self.mass is not None else 0.0
        out: dict[tuple[str, ...], float] = {}
        if self.emitter is not None:
            out[("emitter", "capacity_j_per_k")] = self.emitter.capacity_j_per_k / ke
        out[("room", "capacity_j_per_k")] = self.room.capacity_j_per_k / (
            ke + km + self.room.loss_w_per_k
        )
        if self.mass is not None:
            out[("mass", "capacity_j_per_k")] = self.mass.capacity_j_per_k / km
        if self.sensor.time_constant_s > 0:
            out[("sensor", "time_constant_s")] = self.sensor.time_constant_s
        return out

    def time_constant_problems(self) -> list[tuple[tuple[str, ...], str]]:
        """Nodes faster than physics allows, as (key path, message); empty when all is well.

        The loader turns these into ``FILE:LINE: key.path: message`` problems.
        """
        problems: list[tuple[tuple[str, ...], str]] = []
        for path, tau in self.node_time_constants_s().items():
            if path[0] == "sensor":
                if tau < MIN_SENSOR_TIME_CONSTANT_S:
                    problems.append(
                        (
                            path,
                            f"a sensor lag of {tau:.3g} s is not physical: give 0 (no lag) "
                            f"or at least {MIN_SENSOR_TIME_CONSTANT_S:g} s",
                        )
                    )
            elif tau < MIN_NODE_TIME_CONSTANT_S:
                node = path[0]
                problems.append(
                    (
                        path,
                        f"the {node} node's time constant (capacity / sum of its "
                        f"conductances) is {tau:.3g} s, below the physical bound of "
                        f"{MIN_NODE_TIME_CONSTANT_S:g} s: check the {node}'s capacity and "
                        "conductances (J/K and W/K) for a unit slip",
                    )
                )
        return problems

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

    @property
    def can_cool(self) -> bool:
        """The plant has a cooler (``cooler_w``)."""
        return self.cooler_w is not None

    def cooling_gains_for_load_w(self, load: float, room_c: float, outdoor_c: float) -> float:
        """The solar and internal gains, beyond ``internal_gains_w``, at which the cooler must
        remove ``load`` of its capacity to hold ``room_c`` with ``outdoor_c`` outdoors.

        Steady state of the room node: ``0 = gains + internal - L (room - outdoor) - load x
        cooler_w`` (the mass at the room's temperature exchanges nothing).
        """
        if self.cooler_w is None:
            raise ValueError(f"plant {self.name!r} has no cooler_w: it cannot cool")
        fabric = self.room.loss_w_per_k * (outdoor_c - room_c)
        return load * self.cooler_w - self.internal_gains_w - fabric


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
