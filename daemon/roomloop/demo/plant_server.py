"""Simulated plants behind a real Modbus TCP server on loopback: the demo's field devices.

Each zone of the demo site gets the built-in plant of its heating type. The
plants advance on the demo's simulated clock in fixed steps of
:data:`STEP_S`, each step with the relay as the zone's coil reads at its start
(the coil is what the service wrote over Modbus). After each step the sensor
reading goes into the zone's input register, encoded exactly as the site's
point describes it (int16, tenths of a degree). The server is pymodbus's
``ModbusTcpServer`` with ``SimDevice`` blocks, one device per Modbus unit id the
site uses (LIBRARY-NOTES.md).

:meth:`PlantServer.silence` makes one unit stop answering the way a gateway
reports a dead device behind it: every request gets Modbus exception 11
("gateway target device failed to respond"), so the service sees
``comm-failure`` on that unit's points while the others carry on.

Every step is recorded (:class:`PlantTrace`): the true room-air temperature
(the figures are computed from it, never from the sensor), the sensor value and
the relay state held over the step.
"""

from __future__ import annotations

import logging
import socket
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

from roomloop.clock import Clock, wait_for
from roomloop.config.models import ModbusInput, ModbusOutput, Site, Zone
from roomloop.io.codec import encode_point
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

STEP_S = 10.0
"""Simulated seconds per plant step (and per recorded sample)."""
LOOPBACK = "127.0.0.1"
START_TIMEOUT_S = 10.0
FC_COILS = 1
FC_INPUT_REGISTERS = 4
REGISTERS_PER_UNIT = 64
COILS_PER_UNIT = 64


class DemoSetupError(RuntimeError):
    """The demo site does not fit the plant server (a zone without a Modbus sensor or coil)."""


@dataclass
class PlantTrace:
    """One zone's plant, step by step: time, true room air, sensor reading, relay held."""

    time_s: list[float] = field(default_factory=list)
    room_c: list[float] = field(default_factory=list)
    sensor_c: list[float] = field(default_factory=list)
    relay: list[bool] = field(default_factory=list)


@dataclass
class SimulatedZone:
    """A zone's plant and where its sensor and relay sit on the server."""

    zone: Zone
    spec: PlantSpec
    plant: PlantSimulation
    sensor: ModbusInput
    relay: ModbusOutput
    trace: PlantTrace = field(default_factory=PlantTrace)
    sensor_c: float = 0.0

    @property
    def name(self) -> str:
        return self.zone.name


def free_port() -> int:
    """A loopback TCP port nobody listens on right now."""
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind((LOOPBACK, 0))
        return int(sock.getsockname()[1])


def zone_points(site: Site, zone: Zone) -> tuple[ModbusInput, ModbusOutput]:
    """The zone's first input and its output, which the server must serve over Modbus."""
    sensor = site.point(zone.inputs[0])
    if zone.output is None:
        raise DemoSetupError(f"zone {zone.name}: the demo needs a heating output")
    relay = site.point(zone.output)
    if not isinstance(sensor, ModbusInput) or not isinstance(relay, ModbusOutput):
        raise DemoSetupError(f"zone {zone.name}: the demo needs a Modbus sensor and a Modbus relay")
    if relay.table != "coil":
        raise DemoSetupError(f"zone {zone.name}: the demo's relays are coils")
    return sensor, relay


class PlantServer:
    """The plants and the Modbus TCP server that exposes them; see the module docstring.

    Use::

        server = PlantServer(site, plants, clock, outdoor_c=2.0, start_room_c=18.0)
        await server.start()            # listening on 127.0.0.1:server.port
        task = asyncio.create_task(server.run())   # steps the plants on the clock
        ...
        await server.stop()
    """

    def __init__(
        self,
        site: Site,
        plants: dict[str, PlantSpec],
        clock: Clock,
        *,
        outdoor_c: float,
        start_room_c: float,
        seed: int = 1,
        port: int | None = None,
    ) -> None:
        self.site = site
        self.clock = clock
        self.port = port if port is not None else free_port()
        self.zones: list[SimulatedZone] = []
        for index, zone in enumerate(site.zones):
            spec = plants[zone.name]
            sensor, relay = zone_points(site, zone)
            load = (start_room_c - outdoor_c) * spec.room.loss_w_per_k / spec.heater_w
            plant = PlantSimulation.at_steady_state(
                spec, load=load, room_c=start_room_c, seed=seed + index
            )
            simulated = SimulatedZone(zone, spec, plant, sensor, relay)
            simulated.sensor_c = plant.read_sensor()
            self.zones.append(simulated)
        self.units = sorted(
            {z.sensor.unit_id for z in self.zones} | {z.relay.unit_id for z in self.zones}
        )
        self.silent_units: set[int] = set()
        self.started_at: float | None = None
        """Simulated time of the first step (POSIX seconds); traces count from it."""
        self._time = 0.0
        self._server: Any = None
        self._local = 0

    # ------------------------------------------------------------------ server

    def _devices(self) -> list[Any]:
        from pymodbus.simulator import DataType, SimData, SimDevice

        return [
            SimDevice(
                id=unit,
                simdata=(
                    [SimData(0, values=[False] * COILS_PER_UNIT, datatype=DataType.BITS)],
                    [SimData(0, values=[False] * 16, datatype=DataType.BITS)],
                    [SimData(0, values=[0] * REGISTERS_PER_UNIT, datatype=DataType.REGISTERS)],
                    [SimData(0, values=[0] * REGISTERS_PER_UNIT, datatype=DataType.REGISTERS)],
                ),
                action=self._answering(unit),
            )
            for unit in self.units
        ]

    def _answering(self, unit: int) -> Any:
        """The action of one unit: silent units answer with gateway exception 11."""

        async def action(
            _function_code: int,
            _start: int,
            _address: int,
            _count: int,
            _registers: Any,
            _values: Any,
        ) -> Any:
            if self._local or unit not in self.silent_units:
                return None
            from pymodbus.constants import ExcCodes

            return ExcCodes.GATEWAY_NO_RESPONSE

        return action

    async def start(self) -> None:
        """Listen on 127.0.0.1:``port``; write the first sensor readings before anyone asks."""
        from pymodbus.server import ModbusTcpServer

        logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
        self._server = ModbusTcpServer(self._devices(), address=(LOOPBACK, self.port))
        await wait_for(
            self.clock.io, self._server.serve_forever(background=True), START_TIMEOUT_S
        )
        self.started_at = self.clock.now()
        self._time = self.started_at
        await self._publish_sensors()

    async def stop(self) -> None:
        server, self._server = self._server, None
        if server is not None:
            await wait_for(self.clock.io, server.shutdown(), START_TIMEOUT_S)

    async def _get(self, unit: int, function_code: int, address: int, count: int) -> list[Any]:
        if self._server is None:
            raise RuntimeError("the plant server is not running")
        self._local += 1
        try:
            return list(await self._server.async_getValues(unit, function_code, address, count))
        finally:
            self._local -= 1

    async def _set(self, unit: int, function_code: int, address: int, values: list[Any]) -> None:
        if self._server is None:
            raise RuntimeError("the plant server is not running")
        self._local += 1
        try:
            await self._server.async_setValues(unit, function_code, address, values)
        finally:
            self._local -= 1

    # ------------------------------------------------------------------ plants

    async def relays(self) -> dict[str, bool]:
        """Each zone's coil as the server holds it now (what the plant heats with)."""
        out: dict[str, bool] = {}
        for z in self.zones:
            bits = await self._get(z.relay.unit_id, FC_COILS, z.relay.address, 1)
            out[z.name] = bool(bits[0]) == (z.relay.on_value == 1)
        return out

    async def _publish_sensors(self) -> None:
        for z in self.zones:
            registers = encode_point(z.sensor, z.sensor_c)
            await self._set(z.sensor.unit_id, FC_INPUT_REGISTERS, z.sensor.address, registers)

    async def catch_up(self) -> None:
        """Advance every plant in whole steps up to the clock's now, then update the sensors."""
        now = self.clock.now()
        if now < self._time + STEP_S:
            return
        relays = await self.relays()
        assert self.started_at is not None
        while self._time + STEP_S <= now:
            for z in self.zones:
                on = relays[z.name]
                trace = z.trace
                trace.time_s.append(self._time - self.started_at)
                trace.room_c.append(z.plant.room_c)
                trace.sensor_c.append(z.sensor_c)
                trace.relay.append(on)
                z.plant.advance(STEP_S, on)
                z.sensor_c = z.plant.read_sensor()
            self._time += STEP_S
        await self._publish_sensors()

    async def run(self) -> None:
        """Step the plants on the clock until cancelled."""
        while True:
            await self.catch_up()
            await self.clock.sleep(STEP_S / 2)

    def silence(self, unit: int) -> None:
        """From now on unit ``unit`` answers every request with gateway exception 11."""
        self.silent_units.add(unit)

    def restore(self, unit: int) -> None:
        self.silent_units.discard(unit)

    def zone(self, name: str) -> SimulatedZone:
        for z in self.zones:
            if z.name == name:
                return z
        raise KeyError(name)

    def room_temperatures(self) -> dict[str, float]:
        return {z.name: z.plant.room_c for z in self.zones}


def step_count(traces: Sequence[PlantTrace]) -> int:
    """Steps recorded (the same for every zone)."""
    return min((len(t.time_s) for t in traces), default=0)
