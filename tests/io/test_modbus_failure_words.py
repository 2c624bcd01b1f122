"""A device that never answers is described in our words: no pymodbus retry count beside ours."""

from __future__ import annotations

from typing import Any

import pytest

from roomloop.config.models import ModbusInput, ModbusTcpLink
from roomloop.errors import DeviceError
from roomloop.io.modbus import ModbusLink


@pytest.mark.parametrize(("retries", "attempts"), [(0, "(1 attempt)"), (1, "(2 attempts)")])
async def test_a_silent_device_reads_no_answer_with_our_attempt_count(
    modbus_tcp_server: Any, retries: int, attempts: str
) -> None:
    server = await modbus_tcp_server()
    server.delay_s = 2.0  # longer than the link's timeout: pymodbus gives up first
    link = ModbusTcpLink(
        type="modbus-tcp", name="bench", host=server.host, port=server.port,
        timeout_s=0.3, retries=retries,
    )
    point = ModbusInput(type="modbus-input", name="t", link="bench", address=1)
    async with ModbusLink(link, [point]) as modbus:
        with pytest.raises(DeviceError) as caught:
            await modbus.read_point("t")
    text = str(caught.value)
    assert "retries" not in text and "attempt(s)" not in text, text
    assert "Modbus Error" not in text and "continue with next request" not in text, text
    assert "no answer" in text and attempts in text, text
