"""What the journal shows of a running service: a failed write is a warning, not 'switched'.

Real parts: a pymodbus TCP server playing a room (``service_rooms.RoomPlant``) that answers
every request with a Modbus exception (code 4, server device failure) while the test says so.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import yaml
from service_rooms import RoomPlant, running, site_yaml, until
from structlog.testing import capture_logs

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.service.app import Service


async def test_a_failed_output_write_is_logged_as_such(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server()
    data = site_yaml(modbus_port=server.port, broker_port=1)
    del data["broker"]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    clock = VirtualClock()
    service = Service(load_site(path), clock=clock, state_dir=tmp_path / "s")
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
