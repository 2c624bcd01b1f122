"""The real ``roomloop run`` with a state directory that cannot be written: it controls anyway.

A pymodbus TCP server plays the room (service_rooms.RoomPlant), mosquitto carries the
state; the state directory is read-only (state_dirs.read_only_dir: a read-only tmpfs
for root, as a read-only SD card).
"""

from __future__ import annotations

import json
import time
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, ServiceProcess, Watcher, site_yaml
from state_dirs import read_only_dir

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]

SPEED = 60.0
PREFIX = "roomloop/test-annex"


async def test_a_read_only_state_dir_at_start_still_controls_and_says_persistence_failed(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    server = await modbus_tcp_server(units=(1,))
    config = tmp_path / "site.yaml"
    config.write_text(
        yaml.safe_dump(site_yaml(modbus_port=server.port, broker_port=mosquitto.port))
    )
    saved_hold = {
        "format": "roomloop-state", "version": 1, "site": "test-annex", "saved_at": 1.0,
        "zones": {"room0": {"mode": "hold"}},  # what was there before the card failed
    }
    files = {"test-annex.state.json": json.dumps(saved_hold).encode()}
    with read_only_dir(tmp_path / "state", files) as state_dir:
        service = ServiceProcess(
            config, state_dir, SPEED, tmp_path / "service.log", origin=time.time()
        )
        async with (
            RoomPlant(server, [15.0], SPEED) as plant,
            Watcher(mosquitto.host, mosquitto.port, PREFIX) as watcher,
        ):
            watcher.guard = service.died
            await service.start()
            try:
                # A cold room gets its heat: the zone is controlled ...
                await watcher.wait_for(lambda: plant.rooms[0].coil, 20)
                await watcher.wait_for(lambda: watcher.state() is not None, 15)
                state = watcher.state()
                assert state is not None
                # ... from a fresh start, and the state says the persistence failed.
                assert state["mode"] == "auto" and state["demand"] is True
                assert state["persistence"].startswith("failed: "), state
                # the check at start ("not writable") or, once the first switch was to be
                # journalled, that write's own failure ("cannot write ...: Read-only ...")
                reason = state["persistence"]
                assert "not writable" in reason or "cannot write" in reason, reason
                # A command is applied, and its answer says it cannot be made durable now.
                before = len(watcher.results)
                await watcher.command("room0", "setpoint", "21.5")
                answer = await watcher.answer(before)
                assert answer["ok"] is True and answer["durable"] is False, answer
                assert "holds until a restart" in answer["warning"], answer
                events = [e["event"] for e in service.log_events()]
                assert "persist.failed_at_start" in events
                assert "service.ready" in events or "service.starting" in events
            finally:
                await service.stop()
    assert service.process is not None and service.process.returncode is not None


async def test_a_switch_the_device_saw_survives_a_sigkill_right_after_it(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    """Each switch is made durable before the coil is written (persist.py's switch journal)."""
    from roomloop.core.state import ZoneState
    from roomloop.service.persist import StateStore

    server = await modbus_tcp_server(units=(1,))
    config = tmp_path / "site.yaml"
    config.write_text(
        yaml.safe_dump(site_yaml(modbus_port=server.port, broker_port=mosquitto.port))
    )
    state_dir = tmp_path / "state"
    service = ServiceProcess(config, state_dir, SPEED, tmp_path / "service.log", time.time())
    async with (
        RoomPlant(server, [15.0], SPEED) as plant,
        Watcher(mosquitto.host, mosquitto.port, PREFIX) as watcher,
    ):
        watcher.guard = service.died
        await service.start()
        try:
            await watcher.wait_for(lambda: plant.rooms[0].coil, 20)
        finally:
            await service.stop()  # SIGKILL within a few tens of ms of the coil's write
    zones = StateStore(state_dir, "test-annex").load()
    saved = ZoneState.from_json(json.dumps(zones["room0"]))
    assert saved.relay_on is True and saved.switched_at is not None
    assert saved.switches and saved.switches[-1] == (saved.switched_at, True)
