"""A temporary override: a set point or level until the program's next change, said in the state.

Real parts: mosquitto, a pymodbus server playing the room, the service in-process on the
virtual clock, started at a fixed instant so the program's switch times are known.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, Watcher, running, site_yaml, until

from roomloop.clock import VirtualClock
from roomloop.config.loader import load_site
from roomloop.service.app import Service

PREFIX = "roomloop/test-annex"
START = dt.datetime(2027, 1, 15, 6, 40, tzinfo=dt.UTC)
PROGRAM = [
    {"days": "all", "at": "07:00", "level": "comfort"},
    {"days": "all", "at": "22:00", "level": "economy"},
]


@pytest.mark.needs_mosquitto
async def test_a_set_point_until_the_next_change_ends_when_the_program_switches(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    clock = VirtualClock(start=START.timestamp())
    server = await modbus_tcp_server()
    path = tmp_path / "site.yaml"
    data = site_yaml(modbus_port=server.port, broker_port=mosquitto.port, program=PROGRAM)
    path.write_text(yaml.safe_dump(data))
    service = Service(load_site(path), clock=clock, state_dir=tmp_path / "state")
    async with (
        RoomPlant(server, [17.0], clock),
        Watcher(mosquitto.host, mosquitto.port, PREFIX, clock=clock) as w,
        running(service),
    ):
        await w.wait_for(lambda: w.state() is not None, 15)
        state = w.state()
        assert state is not None
        assert (state["level"], state["program_level"], state["override"]) == (
            "economy", "economy", None
        )
        # Just started: the hour's figures cover the seconds since the start, not an hour.
        assert 0 <= state["window_1h_s"] <= 60, state["window_1h_s"]

        n = len(w.results)
        await w.command("room0", "setpoint", '{"value": 23, "until": "next-change"}')
        answer = await w.answer(n)
        assert answer == {
            "field": "setpoint", "ok": True, "value": 23.0, "ends": "next-change",
            "until": "2027-01-15T07:00:00+00:00",
        }
        await w.wait_for(lambda: (w.state() or {}).get("mode") == "hold", 10)
        state = w.state()
        assert state is not None
        assert state["override"] == {
            "kind": "setpoint", "ends": "next-change", "until": "2027-01-15T07:00:00+00:00"
        }
        # The set point is the hold's number: no level's, and the state says so.
        assert (state["setpoint"], state["level"], state["program_level"]) == (
            23.0, None, "economy"
        )
        await w.wait_for(lambda: w.text("zone/room0/level") == "", 10)

        # At 07:00 the program switches to comfort: the hold is over.
        await until(clock, lambda: clock.now() > START.timestamp() + 21 * 60, 30 * 60)
        await w.wait_for(lambda: (w.state() or {}).get("mode") == "auto", 10)
        state = w.state()
        assert state is not None
        assert (state["setpoint"], state["level"], state["override"]) == (20.0, "comfort", None)
        assert 20 * 60 <= state["window_1h_s"] < 3600
        await w.wait_for(lambda: w.text("zone/room0/level") == "comfort", 10)

        # A bare level in auto lasts until the program's next change too, and says so.
        n = len(w.results)
        await w.command("room0", "level", "standby")
        assert (await w.answer(n))["ok"] is True
        await w.wait_for(lambda: (w.state() or {}).get("level") == "standby", 10)
        state = w.state()
        assert state is not None and state["mode"] == "auto"
        assert state["override"] == {
            "kind": "level", "ends": "next-change", "until": "2027-01-15T22:00:00+00:00"
        }
