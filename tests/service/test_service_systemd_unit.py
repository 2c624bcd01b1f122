"""The shipped unit file: exposure 2.0 or less, serial adapters still reachable."""

from __future__ import annotations

import re
import shlex
import shutil
import subprocess
from pathlib import Path

import pytest

from roomloop.cli import build_parser

UNIT = Path(__file__).resolve().parents[2] / "systemd" / "roomloop.service"


def _settings() -> dict[str, list[str]]:
    out: dict[str, list[str]] = {}
    for raw in UNIT.read_text().splitlines():
        line = raw.strip()
        if not line or line.startswith(("#", "[")):
            continue
        key, _, value = line.partition("=")
        out.setdefault(key, []).append(value)
    return out


@pytest.mark.skipif(shutil.which("systemd-analyze") is None, reason="no systemd-analyze here")
def test_exposure_score_is_at_most_2() -> None:
    result = subprocess.run(
        ["systemd-analyze", "security", "--offline=true", "--no-pager", str(UNIT)],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    match = re.search(r"Overall exposure level for \S+: (\d+(?:\.\d+)?)", result.stdout)
    assert match is not None, result.stdout + result.stderr
    assert float(match.group(1)) <= 2.0


def test_notify_watchdog_restart_and_directories() -> None:
    settings = _settings()
    assert settings["Type"] == ["notify"]
    assert float(settings["WatchdogSec"][0]) > 0
    assert settings["Restart"] == ["on-failure"]
    assert settings["StateDirectory"] == ["roomloop"]
    assert settings["ConfigurationDirectory"] == ["roomloop"]


def test_reload_sends_sighup_to_the_main_process() -> None:
    # `roomloop run` reloads its site file on SIGHUP (tests/service/test_service_reload.py)
    assert _settings()["ExecReload"] == ["/bin/kill -HUP $MAINPID"]


def test_serial_adapters_stay_reachable() -> None:
    settings = _settings()
    allowed = {value.split()[0] for value in settings["DeviceAllow"]}
    assert {"char-ttyUSB", "char-ttyACM"} <= allowed
    assert "dialout" in settings["SupplementaryGroups"][0].split()
    # PrivateDevices=yes would hide /dev/ttyUSB* whatever DeviceAllow says.
    assert settings.get("PrivateDevices", ["no"]) == ["no"]


def test_host_shared_memory_is_not_writable() -> None:
    """ProtectSystem=strict makes /usr, /boot, /etc read-only but leaves /dev writable when
    PrivateDevices=no (systemd.exec(5), ProtectSystem=): the host's /dev/shm (and POSIX
    message queues in /dev/mqueue) must be hidden explicitly."""
    settings = _settings()
    assert settings["ProtectSystem"] == ["strict"]
    hidden = {
        path.lstrip("-")
        for value in settings.get("InaccessiblePaths", [])
        for path in value.split()
    }
    assert {"/dev/shm", "/dev/mqueue"} <= hidden
    # Still no blanket /dev: the serial adapters live there.
    assert "/dev" not in hidden


def test_exec_start_is_a_valid_run_command_line() -> None:
    argv = shlex.split(_settings()["ExecStart"][0])
    assert argv[0].endswith("/roomloop")
    args = build_parser().parse_args(argv[1:])
    assert args.command == "run"
    assert args.config == "%E/roomloop/site.yaml"  # %E: /etc for a system unit
    # No --state-dir: `roomloop run` takes $STATE_DIRECTORY, which StateDirectory= sets.
    assert args.state_dir is None


def test_run_takes_the_state_directory_systemd_gives(monkeypatch: pytest.MonkeyPatch) -> None:
    from roomloop.cli.run import _state_dir

    args = build_parser().parse_args(["run", "-c", "site.yaml"])
    monkeypatch.setenv("STATE_DIRECTORY", "/var/lib/roomloop")
    assert _state_dir(args, "/elsewhere") == "/var/lib/roomloop"
    monkeypatch.delenv("STATE_DIRECTORY")
    assert _state_dir(args, "/elsewhere") == "/elsewhere"
    explicit = build_parser().parse_args(["run", "-c", "site.yaml", "--state-dir", "/tmp/x"])
    assert _state_dir(explicit, "/elsewhere") == "/tmp/x"


def test_documentation_names_no_file_an_install_step_does_not_create() -> None:
    # No install step copies the README onto the board (README, "Installing on a Pi-class
    # board"), so a file:// Documentation= would point at nothing.
    local = [v for v in _settings().get("Documentation", []) if "file:" in v]
    assert local == []
