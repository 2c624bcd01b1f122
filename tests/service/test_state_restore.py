"""Loading the state at start: bad values refused, unreadable files moved aside, switches kept,
a read-only state directory no reason to stop."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
from dataclasses import replace
from pathlib import Path
from typing import Any

import pytest
import yaml
from service_rooms import site_yaml
from state_dirs import make_writable, read_only_dir
from structlog.testing import capture_logs

from roomloop.core import ZoneController, ZoneSettings
from roomloop.core.state import StateFormatError, ZoneState, check_for_zone
from roomloop.service.persist import StateStore
from roomloop.service.restart import restore_zone

SETTINGS = replace(ZoneSettings.for_heating_type("hydronic"), limit_min_c=5.0, limit_max_c=26.0)


def _saved(**changes: Any) -> dict[str, Any]:
    state = ZoneController(SETTINGS).initial_state(1000.0)
    data: dict[str, Any] = json.loads(state.to_json())
    data.update(changes)
    return data


def _document(zones: dict[str, Any], site: str = "s") -> str:
    return json.dumps({"format": "roomloop-state", "version": 1, "site": site,
                       "saved_at": 1.0, "zones": zones})


# ------------------------------------------------------------------ out-of-range values


@pytest.mark.parametrize("hold", [1e300, -50.0, 26.01, 4.99])
def test_a_hold_set_point_outside_the_zone_limits_is_refused_with_a_log_event(
    hold: float,
) -> None:
    controller = ZoneController(SETTINGS)
    raw = _saved(mode="hold", hold_setpoint=hold, hold_level="comfort")
    with capture_logs() as events:
        state = restore_zone(controller, raw, 2000.0, zone="z", relay_on=False, safe_on=False)
    rejected = [e for e in events if e["event"] == "persist.zone_state_rejected"]
    assert len(rejected) == 1 and "hold_setpoint" in rejected[0]["reason"]
    assert state.mode == SETTINGS.initial_mode and state.hold_setpoint is None  # fresh


@pytest.mark.parametrize("hold", [5.0, 21.5, 26.0])
def test_a_hold_set_point_within_the_limits_is_restored(hold: float) -> None:
    raw = _saved(mode="hold", hold_setpoint=hold, hold_level="comfort")
    with capture_logs() as events:
        state = restore_zone(ZoneController(SETTINGS), raw, 2000.0, zone="z", relay_on=False,
                             safe_on=False)
    assert state.mode == "hold" and state.hold_setpoint == hold
    assert [e["event"] for e in events] == ["persist.zone_restored"]


@pytest.mark.parametrize(
    ("changes", "words"),
    [
        ({"temperature": 1e300}, "temperature"),
        ({"smoothed_c": -500.0}, "smoothed_c"),
        ({"last_setpoint": 1e30}, "last_setpoint"),
        ({"fail_safe_duty": 5.0}, "fail_safe_duty"),
        ({"droop_k": -1.0}, "droop_k"),
        ({"anticipator_k": -0.5}, "anticipator_k"),
        ({"duty_current": [0.0, 900.0, 10.0]}, "duty_current"),
        ({"duty_buckets": [[0.0, -5.0, 10.0]]}, "duty_buckets"),
    ],
)
def test_any_other_out_of_range_saved_value_is_refused(
    changes: dict[str, Any], words: str
) -> None:
    with pytest.raises(StateFormatError, match=words):
        ZoneState.from_json(json.dumps(_saved(**changes)))


def test_a_point_reading_out_of_range_is_refused() -> None:
    raw = _saved()
    raw["points"] = [dict(raw["points"][0], value=1e300)]
    with pytest.raises(StateFormatError, match=r"points\[0\]\.value"):
        ZoneState.from_json(json.dumps(raw))


def test_a_hold_ending_more_than_366_days_after_the_restart_is_refused() -> None:
    controller = ZoneController(SETTINGS)
    year = 366 * 86400.0
    for until, kept in ((2000.0 + year, True), (2000.0 + year + 1.0, False), (1e11, False)):
        raw = _saved(mode="hold", hold_setpoint=21.0, hold_level="comfort", hold_until=until)
        state = restore_zone(controller, raw, 2000.0, zone="z", relay_on=False, safe_on=False)
        assert (state.hold_until == until) is kept


def test_check_for_zone_names_the_limits() -> None:
    state = ZoneState.from_json(json.dumps(_saved(mode="hold", hold_setpoint=27.0)))
    with pytest.raises(StateFormatError, match=r"27 C is outside the zone's limits 5\.\.26 C"):
        check_for_zone(state, SETTINGS)


# ------------------------------------------------------------------ unreadable files


def test_a_state_file_of_1000_nested_brackets_is_moved_aside(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    store.path.write_text("[" * 1000)
    with capture_logs() as events:
        assert store.load() == {}
    moved = [e for e in events if e["event"] == "persist.moved_aside"]
    assert len(moved) == 1 and "nested too deeply" in moved[0]["reason"]
    assert not store.path.exists()
    assert [p.read_text() for p in tmp_path.glob("s.state.json.bad-*")] == ["[" * 1000]


def test_a_zone_nested_too_deeply_is_refused_and_starts_fresh(tmp_path: Path) -> None:
    deep = "[" * 900 + "]" * 900  # parses as a whole file; not as a zone state
    store = StateStore(tmp_path, "s")
    store.path.write_text(_document({"z": json.loads(deep)}))
    zones = store.load()
    with capture_logs() as events:
        state = restore_zone(ZoneController(SETTINGS), zones["z"], 2000.0, zone="z",
                             relay_on=None, safe_on=False)
    assert [e["event"] for e in events] == ["persist.zone_state_rejected"]
    assert state.started_at == 2000.0


def test_a_directory_in_place_of_the_state_file_is_moved_aside(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    store.path.mkdir()
    with capture_logs() as events:
        assert store.load() == {}
    moved = [e for e in events if e["event"] == "persist.moved_aside"]
    assert len(moved) == 1 and "unreadable" in moved[0]["reason"]
    assert store.save({"z": {}}, now=1.0) and store.path.is_file()


def test_a_run_process_with_a_nested_state_file_starts(tmp_path: Path) -> None:
    """The real ``roomloop run``: no RecursionError traceback, the file moved aside."""
    data = site_yaml(modbus_port=1, broker_port=1)
    del data["broker"]
    config = tmp_path / "site.yaml"
    config.write_text(yaml.safe_dump(data))
    state = tmp_path / "state"
    state.mkdir()
    (state / "test-annex.state.json").write_text("[" * 1000)
    log = tmp_path / "run.log"
    with log.open("wb") as sink:
        process = subprocess.Popen(
            [sys.executable, "-m", "roomloop", "run", "-c", str(config), "--state-dir",
             str(state)],
            stdout=sink, stderr=subprocess.STDOUT,
            env={k: v for k, v in os.environ.items() if k != "NOTIFY_SOCKET"},
        )
    try:
        deadline = time.monotonic() + 20.0
        while "service.starting" not in log.read_text() and process.poll() is None:
            assert time.monotonic() < deadline, log.read_text()
            time.sleep(0.05)
        process.terminate()
        process.wait(timeout=10)
    finally:
        if process.poll() is None:
            process.kill()
            process.wait(timeout=5)
    out = log.read_text()
    assert "Traceback" not in out and "RecursionError" not in out
    assert "persist.moved_aside" in out and "nested too deeply" in out
    assert process.returncode == 0
    assert len(list(state.glob("test-annex.state.json.bad-*"))) == 1


# ------------------------------------------------------------------ switch journal


def _state_with_switch(at: float, on: bool) -> ZoneState:
    state = ZoneController(SETTINGS).initial_state(0.0)
    return replace(state, relay_on=on, switched_at=at, switches=(*state.switches, (at, on)))


def test_a_switch_recorded_but_not_saved_is_applied_at_the_next_load(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    base = ZoneController(SETTINGS).initial_state(0.0)
    assert store.save({"z": json.loads(base.to_json())}, now=1.0)
    assert store.record_switch("z", _state_with_switch(100.0, True))
    assert store.record_switch("z", _state_with_switch(100.0, True))  # the same: not again
    assert len(store.journal_path.read_text().splitlines()) == 1
    # SIGKILL here: no full save. The next start sees the switch.
    zones = StateStore(tmp_path, "s").load()
    loaded = ZoneState.from_json(json.dumps(zones["z"]))
    assert loaded.relay_on and loaded.switched_at == 100.0 and loaded.switches == ((100.0, True),)


def test_a_switch_before_the_first_full_save_is_kept(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    assert store.load() == {}
    assert store.record_switch("z", _state_with_switch(100.0, True))
    zones = StateStore(tmp_path, "s").load()  # SIGKILL before any state file existed
    assert ZoneState.from_json(json.dumps(zones["z"])) == _state_with_switch(100.0, True)


def test_a_full_save_that_covers_the_journal_empties_it(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    switched = _state_with_switch(100.0, True)
    store.record_switch("z", switched)
    older = ZoneController(SETTINGS).initial_state(0.0)
    store.save({"z": json.loads(older.to_json())}, now=50.0)  # taken before the switch
    assert store.journal_path.read_text() != ""  # not covered: kept
    store.save({"z": json.loads(switched.to_json())}, now=101.0)
    assert store.journal_path.read_text() == ""
    zones = StateStore(tmp_path, "s").load()
    assert ZoneState.from_json(json.dumps(zones["z"])) == switched


def test_a_torn_or_foreign_journal_line_is_ignored(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    base = ZoneController(SETTINGS).initial_state(0.0)
    store.save({"z": json.loads(base.to_json())}, now=1.0)
    def line(zone: str, at: Any, on: Any, state: ZoneState) -> str:
        return json.dumps({"zone": zone, "at": at, "on": on,
                           "state": json.loads(state.to_json())}) + "\n"

    on_at_100 = _state_with_switch(100.0, True)
    store.journal_path.write_text(
        line("z", 100.0, True, on_at_100)
        + line("z", "soon", False, _state_with_switch(110.0, False))
        + line("z", 115.0, False, on_at_100)  # the state does not match the switch
        + line("other", 120.0, False, _state_with_switch(120.0, False))
        + "[" * 2000 + "\n"
        + line("z", 130.0, False, _state_with_switch(130.0, False))[:-40]  # torn by the crash
    )
    zones = StateStore(tmp_path, "s").load()
    assert ZoneState.from_json(json.dumps(zones["z"])) == on_at_100
    assert zones["other"]["switched_at"] == 120.0  # a zone with no saved state yet


# ------------------------------------------------------------------ read-only directory


def test_a_read_only_state_dir_marks_persistence_failed_and_starts_fresh(tmp_path: Path) -> None:
    saved = _document({"z": _saved(mode="hold", hold_setpoint=22.0)})
    with read_only_dir(tmp_path / "state", {"s.state.json": saved.encode()}) as directory:
        store = StateStore(directory, "s")
        assert store.status == "ok"
        with capture_logs() as events:
            assert store.load() == {}
        assert store.status.startswith("failed: ") and "not writable" in store.status
        assert any(e["event"] == "persist.failed_at_start" for e in events)
        with pytest.raises(OSError):
            store.save({"z": _saved()}, now=5.0)
        assert store.status.startswith("failed: cannot write")
        assert not store.record_switch("z", _state_with_switch(100.0, True))  # never raises
        make_writable(directory)
        with capture_logs() as events:
            assert store.save({"z": _saved()}, now=6.0)
        assert store.status == "ok"
        closing = [e["event"] for e in events if "recovered" in e["event"]]
        assert closing == ["persist.save_recovered"]  # the failed save's story, once
