"""The service in-process: the zone loop takes the early level from optimum start, with the
site's outdoor point read like any input.

Real parts: a pymodbus TCP server playing the room (tests/service/service_rooms.RoomPlant) and
the outdoor sensor's register; the clock is simulated (600 times real time).
"""

from __future__ import annotations

import datetime as dt
import json
import sys
from pathlib import Path
from typing import Any

import pytest
import yaml

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "service"))
import service_rooms
from service_rooms import RoomPlant, running, site_yaml, until

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.core.optimum_start import WarmUpModel
from roomloop.service.app import Service, TickReport

SPEED = 600.0
UTC = dt.UTC


async def test_zone_takes_the_warmer_level_at_the_early_start(
    tmp_path: Path, modbus_tcp_server: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """An electric room at 16 C before a 07:00 switch to comfort 20 C: its lead (initial rate
    3 K/h) is over an hour, so with ``earliest_s: 3600`` the early start begins at 06:00.
    The warm-up it learns reaches the state file while it runs, and a restarted service on
    the same state directory plans with it."""
    # a room of a building (time constant 6 h, about 3 K/h on full heat), not the e2e tests'
    # 20 min room whose 50 K/h the planner would refuse to learn as implausible
    monkeypatch.setattr(service_rooms, "TAU_S", 6 * 3600.0)
    server = await modbus_tcp_server()
    data = site_yaml(
        modbus_port=server.port,
        broker_port=1,
        program=[
            {"days": "all", "at": "22:00", "level": "economy"},
            {"days": "all", "at": "07:00", "level": "comfort"},
        ],
        extra_zone={"optimum_start": {"enabled": True, "earliest_s": 3600}},
    )
    del data["broker"]
    data["site"]["outdoor_point"] = "yard"
    data["points"].append(
        {"name": "yard", "type": "modbus-input", "link": "rooms", "address": 5, "scale": 0.1}
    )
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    site = load_site(path)
    switch = dt.datetime(2026, 1, 5, 7, 0, tzinfo=UTC).timestamp()
    ticks: list[TickReport] = []
    clock = VirtualClock(start=switch - 5400.0)  # 05:30
    service = Service(
        site,
        clock=clock,
        state_dir=tmp_path / "state",
        on_tick=ticks.append,
    )
    await server.set_registers("input", 5, [(-30) & 0xFFFF])  # -3.0 C outdoors
    async with RoomPlant(server, [16.0], clock), running(service):
        await until(clock, lambda: any(t.outputs.level == "comfort" for t in ticks), 6000.0)
        program = service.zones["room0"].program
        first = next(t for t in ticks if t.outputs.level == "comfort")
        decision = program.decision
        assert decision is not None and decision.early and decision.switch_at == switch
        assert decision.since is not None and decision.since >= switch - 3600.0
        assert "capped at the earliest start" in decision.reason
        assert switch - 3600.0 <= first.at < switch
        # the published state says when the early start began and why
        from roomloop.service.publisher import state_payload

        view = next(v for v in service.publisher.views() if v.zone == "room0")
        early = state_payload(view, units="C", tz=service.tz)["early_start"]
        assert early is not None and early["active"] is True and early["reason"], early
        assert all(t.outputs.level == "economy" for t in ticks if t.at < switch - 3600.0)
        assert any(t.at < switch - 3600.0 for t in ticks)
        # the warm-up it learns from goes into the band of the site's outdoor point (-5..0 C)
        await until(clock, lambda: program.model.bands, 20000.0)
        assert {b.index for b in program.model.bands} == {None, -1}
        learned = program.model
        # saved soon after it learned (not only at the stop): a crash keeps it too
        state_file = tmp_path / "state" / f"{site.name}.state.json"
        await until(
            clock,
            lambda: state_file.exists()
            and "room0" in json.loads(state_file.read_text()).get("warm_up", {}),
            60.0,
        )
        saved = json.loads(state_file.read_text())["warm_up"]["room0"]
        assert saved == learned.to_dict()  # the saved form rounds the rates to 1e-6 K/h
    # a restart: a new service (a new process's objects) on the same state directory
    again_ticks: list[TickReport] = []
    clock2 = VirtualClock(start=clock.now() + 600.0)
    again = Service(site, clock=clock2, state_dir=tmp_path / "state", on_tick=again_ticks.append)
    async with RoomPlant(server, [20.0], clock2), running(again):
        await until(clock2, lambda: again_ticks, 120.0)
        restored = again.zones["room0"].program
        assert restored.model.to_dict() == learned.to_dict()
        assert restored.model.rate_at(-3.0, 3.0)[1].startswith("learned from")
    fresh = Service(site, clock=VirtualClock(), state_dir=tmp_path / "other")
    async with RoomPlant(server, [20.0], fresh.clock), running(fresh):
        await until(fresh.clock, lambda: "room0" in fresh.zones, 120.0)
        assert fresh.zones["room0"].program.model == WarmUpModel()  # nothing learned there
