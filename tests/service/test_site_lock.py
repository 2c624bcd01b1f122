"""One ``roomloop run`` per site and state directory: a second one exits 1 naming the first."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
import yaml
from service_rooms import site_yaml
from state_dirs import read_only_dir

from roomloop.service.lock import LockHeld, acquire_site_lock


def _config(tmp_path: Path) -> Path:
    data = site_yaml(modbus_port=1, broker_port=1)  # no device answers; no broker
    del data["broker"]
    config = tmp_path / "site.yaml"
    config.write_text(yaml.safe_dump(data))
    return config


class Run:
    """A real ``roomloop run`` process with its output in a file."""

    def __init__(self, config: Path, state_dir: Path, log: Path) -> None:
        self.log = log
        with log.open("wb") as sink:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "roomloop", "run", "-c", str(config), "--state-dir",
                 str(state_dir)],
                stdout=sink, stderr=subprocess.STDOUT,
                env={k: v for k, v in os.environ.items() if k != "NOTIFY_SOCKET"},
            )

    def text(self) -> str:
        return self.log.read_text(errors="replace")

    def wait_started(self, timeout_s: float = 20.0) -> None:
        deadline = time.monotonic() + timeout_s
        while "service.starting" not in self.text():
            assert self.process.poll() is None, self.text()
            assert time.monotonic() < deadline, self.text()
            time.sleep(0.05)

    def wait_exit(self, timeout_s: float = 20.0) -> int:
        return self.process.wait(timeout=timeout_s)

    def stop(self, signum: int = signal.SIGTERM) -> None:
        if self.process.poll() is None:
            self.process.send_signal(signum)
            try:
                self.process.wait(timeout=10)
            except subprocess.TimeoutExpired:
                self.process.kill()
                self.process.wait(timeout=5)


@pytest.fixture
def runs() -> Iterator[list[Run]]:
    started: list[Run] = []
    try:
        yield started
    finally:
        for run in started:
            run.stop()


def _second_is_refused(first: Run, second: Run) -> None:
    assert second.wait_exit() == 1
    text = second.text()
    assert f"is already run by process {first.process.pid}" in text, text
    # the way out is to stop the first, never a second controller beside it
    assert "stop that one first" in text and "another state directory" not in text, text
    assert "Traceback" not in text
    assert first.process.poll() is None  # the first one runs on


def test_a_second_run_of_the_same_site_and_state_dir_exits_1_naming_the_first(
    tmp_path: Path, runs: list[Run]
) -> None:
    config = _config(tmp_path)
    state = tmp_path / "state"
    first = Run(config, state, tmp_path / "first.log")
    runs.append(first)
    first.wait_started()
    second = Run(config, state, tmp_path / "second.log")
    runs.append(second)
    _second_is_refused(first, second)
    assert "site 'test-annex'" in second.text() and str(state / "test-annex.lock") in second.text()
    # Another state directory is another installation: allowed.
    other = Run(config, tmp_path / "other-state", tmp_path / "other.log")
    runs.append(other)
    other.wait_started()


def test_a_killed_holder_leaves_no_stale_lock(tmp_path: Path, runs: list[Run]) -> None:
    config = _config(tmp_path)
    state = tmp_path / "state"
    first = Run(config, state, tmp_path / "first.log")
    runs.append(first)
    first.wait_started()
    first.stop(signal.SIGKILL)
    again = Run(config, state, tmp_path / "again.log")
    runs.append(again)
    again.wait_started()


def test_the_lock_works_with_a_read_only_state_dir(tmp_path: Path, runs: list[Run]) -> None:
    config = _config(tmp_path)
    with read_only_dir(tmp_path / "state") as state:
        first = Run(config, state, tmp_path / "first.log")
        runs.append(first)
        first.wait_started()
        second = Run(config, state, tmp_path / "second.log")
        runs.append(second)
        _second_is_refused(first, second)
        first.stop()


def test_an_existing_lock_file_in_a_read_only_dir_is_locked_read_only(tmp_path: Path) -> None:
    with read_only_dir(tmp_path / "state", {"s.lock": b"12345\n"}) as state:
        lock = acquire_site_lock("s", state)
        try:
            assert state / "s.lock" in lock.paths
            with pytest.raises(LockHeld) as caught:
                acquire_site_lock("s", state)
            # the read-only lock file's old pid is not trusted: the fallback names us
            assert caught.value.pid == os.getpid()
        finally:
            lock.release()
        acquire_site_lock("s", state).release()  # free again
