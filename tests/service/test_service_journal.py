"""What the journal shows of a running service: a failed write is a warning, not 'switched'.

Real parts: a pymodbus TCP server playing a room (``service_rooms.RoomPlant``) that answers
every request with a Modbus exception (code 4, server device failure) while the test says so.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
import service_rooms
import yaml
from service_rooms import RoomPlant, running, site_yaml, until
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.service.app import Service


def _one_room_service(tmp_path: Path, modbus_port: int, clock: VirtualClock) -> Service:
    """The test site's one room on the Modbus test server, without a broker."""
    data = site_yaml(modbus_port=modbus_port, broker_port=1)
    del data["broker"]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return Service(load_site(path), clock=clock, state_dir=tmp_path / "s")


async def test_a_failed_output_write_is_logged_as_such(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server()
    clock = VirtualClock()
    service = _one_room_service(tmp_path, server.port, clock)
    with capture_logs() as events:
        async with RoomPlant(server, [17.0], clock), running(service):
            server.exception_code = 4  # from now on the device refuses everything
            await until(clock, lambda: any(e["event"] == "output.write_failed" for e in events))
    failed = [e for e in events if e["event"] == "output.write_failed"]
    assert failed[0]["log_level"] == "warning" and failed[0]["point"] == "relay0"
    assert failed[0]["detail"]
    switched = [e for e in events if e["event"] == "output.switched"]
    # nothing was switched while the device refused: every 'switched' names a confirmed write
    assert all(e["verdict"] != "comm-failure" for e in switched)


async def test_a_relay_that_reads_back_off_as_commanded_raises_no_output_alarm(
    tmp_path: Path, modbus_tcp_server: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    # A warm room: the relay is off and reads back off, as commanded. That is agreement,
    # not an output that "disagrees" (the read-back's value is not its verdict). The room
    # stays warm with the heat off (it settles at 24 C, not the test room's 5 C), so the
    # relay stays off however the controller starts.
    monkeypatch.setattr(service_rooms, "T_OFF_C", 24.0)
    server = await modbus_tcp_server()
    clock = VirtualClock()
    service = _one_room_service(tmp_path, server.port, clock)
    with capture_logs() as events:
        async with RoomPlant(server, [24.0], clock) as plant, running(service):
            start = clock.monotonic()
            await until(clock, lambda: clock.monotonic() - start > 900.0, 1200.0)
            assert not plant.rooms[0].coil
    raised = [e for e in events if e["event"] == "alarm.raised"]
    assert not [e for e in raised if e["kind"] == "output-unconfirmed"], raised
    assert service.alarms.confirmed["room0"] is True  # the BMS register reads "agrees"
