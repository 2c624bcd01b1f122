"""End to end: ``roomloop run`` as a subprocess, a Modbus TCP server playing rooms, mosquitto.

The service runs on a simulated clock ``SPEED`` times faster than real time
(the ``ROOMLOOP_CLOCK_SPEED`` test hook of ``roomloop run``); the rooms step on
the same speed in this process. Every wait is bounded.
"""

from __future__ import annotations

import asyncio
import contextlib
import datetime as dt
import json
import os
import signal
import socket
import subprocess
import sys
import time
from collections.abc import AsyncIterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import RoomPlant, ServiceProcess, Watcher, site_yaml

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]

SPEED = 120.0
PREFIX = "roomloop/test-annex"


@dataclass
class Rig:
    server: Any
    plant: RoomPlant
    broker: Any
    watcher: Watcher
    service: ServiceProcess
    tmp: Path

    def room(self, i: int = 0) -> Any:
        return self.plant.rooms[i]

    async def restart_service(self) -> None:
        old = self.service
        self.service = ServiceProcess(
            old.config, old.state_dir, old.speed, old.log_path, old.origin
        )
        self.watcher.guard = self.service.died
        await self.service.start()


@contextlib.asynccontextmanager
async def _rig(
    tmp_path: Path,
    mosquitto: Any,
    modbus_tcp_server: Any,
    temperatures: list[float],
    speed: float = SPEED,
    **site: Any,
) -> AsyncIterator[Rig]:
    server = await modbus_tcp_server(units=(1,))
    config = tmp_path / "site.yaml"
    config.write_text(
        yaml.safe_dump(
            site_yaml(
                modbus_port=server.port,
                broker_port=mosquitto.port,
                zones=len(temperatures),
                **site,
            )
        )
    )
    service = ServiceProcess(
        config, tmp_path / "state", speed, tmp_path / "service.log", origin=time.time()
    )
    async with (
        RoomPlant(server, temperatures, speed) as plant,
        Watcher(mosquitto.host, mosquitto.port, PREFIX) as watcher,
    ):
        rig = Rig(server, plant, mosquitto, watcher, service, tmp_path)
        watcher.guard = service.died
        try:
            yield rig
        finally:
            await rig.service.stop()


@pytest.fixture
async def rig(tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any) -> AsyncIterator[Rig]:
    async with _rig(tmp_path, mosquitto, modbus_tcp_server, [17.0]) as value:
        yield value


async def test_demand_reaches_the_coil_commands_are_answered_and_checked(rig: Rig) -> None:
    w = rig.watcher
    # A stale retained command must not reprogram the zone at start.
    await w.command("room0", "setpoint", "25", retain=True)
    await w.wait_for(lambda: f"{PREFIX}/zone/room0/cmd/setpoint" in w.latest, 5)
    await rig.service.start()

    # Demand reaches the coil and the room warms.
    await w.wait_for(lambda: rig.room().coil, 15)
    await w.wait_for(lambda: w.text("status") == "online", 10)
    await w.wait_for(lambda: (w.state() or {}).get("demand") is True, 10)
    first = w.state()
    assert first is not None and first["setpoint"] == 20.0 and first["mode"] == "auto"
    await w.wait_for(lambda: (w.state() or {}).get("temperature", 0) >= 18.5, 20)
    assert w.retained.get(f"{PREFIX}/zone/room0/state") is not None
    await w.wait_for(lambda: w.text("zone/room0/setpoint") == "20.00", 5)
    await w.wait_for(lambda: w.text("zone/room0/demand") == "true", 5)
    # The retained command was refused (and answered), not acted on.
    assert [r["ok"] for r in w.results] == [False], w.results
    assert "retained" in w.results[0]["reason"]

    # A set point below the room's temperature stops the heat, and is answered.
    n = len(w.results)
    await w.command("room0", "setpoint", "10")
    answer = await w.answer(n)
    assert answer == {"field": "setpoint", "ok": True, "value": 10.0}
    await w.wait_for(lambda: not rig.room().coil, 15)
    state = w.state()
    await w.wait_for(lambda: (w.state() or {}).get("setpoint") == 10.0, 5)
    state = w.state()
    assert state is not None and state["mode"] == "hold" and state["demand"] is False

    # Malformed, out of limits, unknown: refused with a reason, nothing changes.
    for field, payload, words in [
        ("setpoint", "warm", "number"),
        ("setpoint", "40", "limits"),
        ("mode", '{"value": "party"}', "auto, hold, off"),
        ("colour", "blue", "unknown field"),
        ("hold_until", "yesterday", "hold_until"),
    ]:
        n = len(w.results)
        await w.command("room0", field, payload)
        answer = await w.answer(n)
        assert answer["ok"] is False and answer["field"] == field
        assert words in answer["reason"], answer
    await asyncio.sleep(0.5)
    state = w.state()
    assert state is not None
    assert (state["setpoint"], state["mode"], state["demand"]) == (10.0, "hold", False)
    assert not rig.room().coil

    # A JSON command works as well as a plain one.
    n = len(w.results)
    await w.command("room0", "mode", '"auto"')
    assert (await w.answer(n))["value"] == "auto"
    await w.wait_for(lambda: (w.state() or {}).get("setpoint") == 20.0, 10)


@pytest.mark.parametrize("signum", [signal.SIGTERM, signal.SIGINT])  # SIGHUP reloads
async def test_a_stop_signal_leaves_the_coil_off_and_status_offline(
    rig: Rig, signum: signal.Signals
) -> None:
    w = rig.watcher
    # systemd's side of Type=notify: a datagram socket named in NOTIFY_SOCKET.
    notify_path = str(rig.tmp / "notify.sock")
    with socket.socket(socket.AF_UNIX, socket.SOCK_DGRAM) as notify_sock:
        notify_sock.bind(notify_path)
        notify_sock.setblocking(False)
        await rig.service.start({"NOTIFY_SOCKET": notify_path})
        await w.wait_for(lambda: rig.room().coil, 15)
        await w.wait_for(lambda: w.text("status") == "online", 10)
        started = time.monotonic()
        code = await rig.service.signal(signum)
        assert code == 0
        assert time.monotonic() - started < 5.0
        notes: list[str] = []
        with contextlib.suppress(BlockingIOError):
            while True:
                notes.extend(notify_sock.recv(4096).decode().split("\n"))
    assert notes.index("READY=1") < notes.index("STOPPING=1")
    assert (await rig.server.get_coils(0, 1)) == [False]
    await w.wait_for(lambda: w.text("status") == "offline", 5)
    saved = json.loads((rig.tmp / "state" / "test-annex.state.json").read_text())
    assert set(saved["zones"]) == {"room0"}


async def test_kill_and_restart_restores_the_hold_and_short_cycle_timing(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    # A 300 s minimum off time (5 s real at half SPEED) leaves room for a slow restart on a
    # busy machine (300 s is the most the electric preset's cycle rate allows).
    zone = {"tuning": {"min_off_s": 300}}
    async with _rig(
        tmp_path, mosquitto, modbus_tcp_server, [17.0], speed=SPEED / 2, extra_zone=zone
    ) as rig:
        await _kill_and_restart(rig)


async def _kill_and_restart(rig: Rig) -> None:
    w = rig.watcher
    await rig.service.start()
    await w.wait_for(lambda: w.text("status") == "online", 15)
    n = len(w.results)
    await w.command("room0", "setpoint", "24.5")
    assert (await w.answer(n))["ok"] is True
    await w.wait_for(lambda: rig.room().coil, 15)
    state_file = rig.tmp / "state" / "test-annex.state.json"

    def saved() -> dict[str, Any]:
        if not state_file.exists():
            return {}
        return dict(json.loads(state_file.read_text())["zones"]["room0"])

    await w.wait_for(lambda: saved().get("mode") == "hold" and saved().get("relay_on") is True, 10)
    await rig.service.stop()  # kill -9: no safe state, no offline, no save
    assert rig.room().coil is True
    await w.wait_for(lambda: w.text("status") == "offline", 20)  # the broker's last will

    w.latest.pop(f"{PREFIX}/zone/room0/state", None)
    changes = len(rig.room().coil_changes)
    await rig.restart_service()
    await w.wait_for(lambda: w.state() is not None, 15)
    state = w.state()
    assert state is not None
    # The hold survived the crash ...
    assert (state["mode"], state["setpoint"]) == ("hold", 24.5)
    # ... and so did the relay: read back on at the restart, it was kept on (no forced
    # off and on again, no start-up pulse), and the last hour's cycle is counted.
    assert state["demand"] is True, state
    assert state["cycles_1h"] >= 1
    assert rig.room().coil_changes[changes:] == [], "the relay was switched at the restart"


async def test_broker_restart_control_goes_on_and_state_is_republished(rig: Rig) -> None:
    w = rig.watcher
    await rig.service.start()
    await w.wait_for(lambda: w.state() is not None and w.text("status") == "online", 15)
    rig.broker.stop()
    w.latest.clear()
    changes_before = len(rig.room().coil_changes)
    # The room keeps being controlled without the broker: the coil keeps cycling.
    await w.wait_for(lambda: len(rig.room().coil_changes) >= changes_before + 2, 20)
    rig.broker.start()
    await w.wait_for(lambda: w.text("status") == "online", 20)
    await w.wait_for(lambda: w.state() is not None, 10)
    fields = ("temperature", "setpoint", "demand", "mode", "level")
    await w.wait_for(lambda: all(w.text(f"zone/room0/{f}") is not None for f in fields), 5)


async def test_sensor_server_stopped_engages_fail_safe_visibly(rig: Rig) -> None:
    w = rig.watcher
    await rig.service.start()
    await w.wait_for(lambda: (w.state() or {}).get("reliability", {}).get("t0") == "ok", 15)
    # The configured policy is published before it runs, so a dashboard can show it.
    before = w.state()
    assert before is not None and before["fail_safe"] is False
    assert before["fail_safe_policy"] == "fixed-duty" and before["fail_safe_reason"] is None
    rig.plant.frozen = True
    await rig.server.stop()
    stopped = time.monotonic()
    await w.wait_for(lambda: (w.state() or {}).get("fail_safe") is True, 20)
    state = w.state()
    assert state is not None
    assert state["fail_safe_policy"] == "fixed-duty"
    assert state["reliability"]["t0"] == "comm-failure"
    # sensor_timeout_s is 300 simulated seconds: 2.5 s real at SPEED, plus polling and a tick.
    assert time.monotonic() - stopped < 300 / SPEED + 5
    # The journal says so too (issue 16): the point first, then the fail-safe, with the reason.
    events = [e for e in rig.service.log_events() if e.get("zone") == "room0"]
    names = [e["event"] for e in events]
    assert "zone.point_unreliable" in names and "zone.fail_safe_engaged" in names
    assert names.index("zone.point_unreliable") < names.index("zone.fail_safe_engaged")
    engaged = events[names.index("zone.fail_safe_engaged")]
    assert engaged["level"] == "warning" and engaged["policy"] == "fixed-duty"
    assert "no reliable temperature" in engaged["reason"]


async def test_program_entry_switches_the_level_at_its_time(
    tmp_path: Path, mosquitto: Any, modbus_tcp_server: Any
) -> None:
    now = dt.datetime.now(dt.UTC)
    # 10 to 11 simulated minutes ahead: 5 to 5.5 s at SPEED, time enough for a start under load.
    switch = (now + dt.timedelta(minutes=11)).replace(second=0, microsecond=0)
    program = [
        {"days": "all", "at": (now - dt.timedelta(hours=2)).strftime("%H:%M"), "level": "comfort"},
        {"days": "all", "at": switch.strftime("%H:%M"), "level": "economy"},
    ]
    async with _rig(tmp_path, mosquitto, modbus_tcp_server, [19.0], program=program) as rig:
        w = rig.watcher
        await rig.service.start()
        await w.wait_for(lambda: (w.state() or {}).get("level") == "comfort", 15)
        state = w.state()
        assert state is not None and state["next_change"]["level"] == "economy"
        assert dt.datetime.fromisoformat(state["next_change"]["at"]) == switch
        await w.wait_for(lambda: (w.state() or {}).get("level") == "economy", 20)
        state = w.state()
        assert state is not None and state["setpoint"] == 16.0
        assert dt.datetime.fromisoformat(state["timestamp"]) >= switch
        await w.wait_for(lambda: w.text("zone/room0/level") == "economy", 5)


@pytest.mark.parametrize(
    ("config", "env", "words"),
    [
        ("missing.yaml", {}, "missing.yaml"),
        ("site.yaml", {"ROOMLOOP_CLOCK_SPEED": "fast"}, "ROOMLOOP_CLOCK_SPEED"),
    ],
)
def test_run_refuses_bad_input_with_one_line_and_exit_2(
    tmp_path: Path, config: str, env: dict[str, str], words: str
) -> None:
    (tmp_path / "site.yaml").write_text(
        yaml.safe_dump(site_yaml(modbus_port=1502, broker_port=1883))
    )
    result = subprocess.run(
        [sys.executable, "-m", "roomloop", "run", "-c", str(tmp_path / config)],
        capture_output=True,
        text=True,
        timeout=60,
        env={**os.environ, **env},
        check=False,
    )
    assert result.returncode == 2
    assert words in result.stderr
    assert "Traceback" not in result.stderr + result.stdout


def _run_refused(tmp_path: Path, *extra: str, **broker: Any) -> subprocess.CompletedProcess[str]:
    """``roomloop run`` on the test site (broker section amended); it must refuse at start."""
    data = site_yaml(modbus_port=1502, broker_port=1883)
    data["broker"].update(broker)
    (tmp_path / "site.yaml").write_text(yaml.safe_dump(data))
    env = {k: v for k, v in os.environ.items() if k != "RL_TEST_BROKER_PW"}
    return subprocess.run(
        [sys.executable, "-m", "roomloop", "run", "-c", str(tmp_path / "site.yaml"), *extra],
        capture_output=True,
        text=True,
        timeout=60,
        env=env,
        check=False,
    )


def _one_line(result: subprocess.CompletedProcess[str]) -> str:
    assert "Traceback" not in result.stderr + result.stdout
    lines = [line for line in result.stderr.splitlines() if line.startswith("roomloop run: ")]
    assert len(lines) == 1, result.stderr
    assert "Errno" not in lines[0]
    return lines[0]


def test_run_with_a_missing_broker_file_or_variable_exits_2_at_start(tmp_path: Path) -> None:
    state = tmp_path / "state"
    ca = tmp_path / "broker-ca.pem"
    done = _run_refused(tmp_path, "--state-dir", str(state), tls={"ca_file": str(ca)})
    assert done.returncode == 2
    assert f"broker.tls.ca_file {ca}: no such file" in _one_line(done)
    done = _run_refused(
        tmp_path, "--state-dir", str(state), username="rl", password_env="RL_TEST_BROKER_PW"
    )
    assert done.returncode == 2
    assert "broker.password_env: the environment variable it names is not set" in _one_line(done)
    assert "RL_TEST_BROKER_PW" not in _one_line(done)  # the key only, never its value
    secret = tmp_path / "absent-secret"
    done = _run_refused(
        tmp_path, "--state-dir", str(state), username="rl", password_file=str(secret)
    )
    assert done.returncode == 2
    assert "broker.password_file: no such file" in _one_line(done)
    assert str(secret) not in _one_line(done)
    assert not state.exists()  # refused before anything was set up


def test_run_with_a_state_dir_that_is_a_file_exits_2_naming_it(tmp_path: Path) -> None:
    blocker = tmp_path / "state"
    blocker.write_text("a file\n")
    done = _run_refused(tmp_path, "--state-dir", str(blocker))
    assert done.returncode == 2
    assert _one_line(done) == f"roomloop run: state directory {blocker} is a file, not a directory"
    done = _run_refused(tmp_path, "--state-dir", str(blocker / "inner"))
    assert done.returncode == 2
    assert f"state directory {blocker / 'inner'} cannot be created" in _one_line(done)


