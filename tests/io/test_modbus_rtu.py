"""Modbus RTU over a socat pty pair against a real pymodbus serial server."""

from __future__ import annotations

from typing import Any

import pytest

from roomloop.config.models import ModbusInput, ModbusOutput, ModbusRtuLink
from roomloop.errors import DeviceError
from roomloop.io.modbus import ModbusLink


def rtu_link(device: str, **fields: Any) -> ModbusRtuLink:
    values: dict[str, Any] = {"timeout_s": 0.3, "retries": 1, "request_gap_s": 0.005}
    values.update(fields)
    # the server end runs 19200 8N1; a pty ignores the line settings, the client must still set them
    return ModbusRtuLink(
        type="modbus-rtu", name="bus", device=device, baud=19200, parity="N", **values
    )


@pytest.mark.needs_socat
async def test_rtu_poll_and_switch(modbus_rtu_server: Any) -> None:
    server = modbus_rtu_server
    # REFERENCES.md: float32 21.5 = 0x41AC0000, CDAB order 0000 41AC [published; computed]
    await server.set_registers("input", 4, [0x0000, 0x41AC])
    # REFERENCES.md: int16 x 10, -5.5 C -> 0xFFC9 [trade]
    await server.set_registers("holding", 9, [0xFFC9])
    points = [
        ModbusInput(
            type="modbus-input",
            name="air",
            link="bus",
            address=4,
            data_type="float32",
            word_order="little",
        ),
        ModbusInput(
            type="modbus-input", name="loft", link="bus", table="holding", address=9, scale=0.1
        ),
    ]
    relay = ModbusOutput(type="modbus-output", name="relay", link="bus", address=2)
    async with ModbusLink(rtu_link(server.device), points, [relay]) as link:
        samples = {s.name: s for s in await link.poll()}
        assert samples["air"].transport == "ok" and samples["air"].value == 21.5
        assert samples["loft"].transport == "ok" and samples["loft"].value == pytest.approx(-5.5)
        state = await link.set_output("relay", True)
        assert state.verdict == "ok"
        assert await server.get_coils(2, 1) == [True]
        reading = await link.read_point("air")
        assert reading.registers == (0x0000, 0x41AC)


async def test_missing_serial_device_is_a_comm_failure() -> None:
    point = ModbusInput(type="modbus-input", name="air", link="bus", address=0)
    async with ModbusLink(rtu_link("/dev/roomloop-no-such-adapter", retries=0), [point]) as link:
        sample = (await link.poll())[0]
        assert (sample.value, sample.transport) == (None, "comm-failure")
        with pytest.raises(DeviceError, match=r"serial device .*no-such-adapter does not exist"):
            await link.read_point("air")
