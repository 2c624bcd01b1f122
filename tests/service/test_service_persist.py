"""The state file: atomic saves, and bad files moved aside without blocking the start."""

from __future__ import annotations

import json
import os
from pathlib import Path
from typing import Any

import pytest
from structlog.testing import capture_logs

from roomloop.service.persist import StateDirError, StateStore, prepare_state_dir


def test_round_trip_and_no_temporary_files_left(tmp_path: Path) -> None:
    store = StateStore(tmp_path / "state", "villa-invented")
    zones = {"living": {"mode": "hold", "hold_setpoint": 22.5}, "bath": {"mode": "auto"}}
    assert store.save(zones, now=1000.0) is True
    assert sorted(p.name for p in (tmp_path / "state").iterdir()) == ["villa-invented.state.json"]
    again = StateStore(tmp_path / "state", "villa-invented")
    assert again.load() == zones


def test_unchanged_states_are_not_written_again(tmp_path: Path) -> None:
    store = StateStore(tmp_path, "s")
    assert store.save({"z": {"a": 1}}, now=1.0) is True
    assert store.save({"z": {"a": 1}}, now=2.0) is False
    assert store.save({"z": {"a": 2}}, now=3.0) is True
    assert json.loads(store.path.read_text())["zones"] == {"z": {"a": 2}}
    # After a restart, the loaded content counts as written.
    fresh = StateStore(tmp_path, "s")
    fresh.load()
    assert fresh.save({"z": {"a": 2}}, now=4.0) is False


def test_missing_file_is_a_fresh_start(tmp_path: Path) -> None:
    assert StateStore(tmp_path, "s").load() == {}


@pytest.mark.parametrize(
    ("content", "reason_part"),
    [
        (b'{"format": "roomloop-state", "ver', "not JSON"),
        (b"\xff\xfe garbage", "not UTF-8"),
        (b"[1, 2, 3]", "not a roomloop state file"),
        (b'{"some": "other program"}', "not a roomloop state file"),
        (b'{"format": "roomloop-state", "version": 99, "site": "s", "zones": {}}', "version 99"),
        (
            b'{"format": "roomloop-state", "version": 1, "site": "other", "zones": {}}',
            "site 'other'",
        ),
        (b'{"format": "roomloop-state", "version": 1, "site": "s", "zones": []}', "no zone states"),
        (b"", "not JSON"),
    ],
)
def test_bad_file_is_moved_aside_with_a_log_event(
    tmp_path: Path, content: bytes, reason_part: str
) -> None:
    store = StateStore(tmp_path, "s")
    store.path.write_bytes(content)
    with capture_logs() as events:
        assert store.load() == {}
    moved = [e for e in events if e["event"] == "persist.moved_aside"]
    assert len(moved) == 1 and reason_part in moved[0]["reason"]
    assert not store.path.exists()
    aside = list(tmp_path.glob("s.state.json.bad-*"))
    assert len(aside) == 1 and aside[0].read_bytes() == content
    # The next save works and a second bad file does not overwrite the first one aside.
    assert store.save({"z": {}}, now=1.0)
    store.path.write_bytes(b"junk")
    StateStore(tmp_path, "s").load()
    assert len(list(tmp_path.glob("s.state.json.bad-*"))) == 2


def test_a_failed_write_leaves_the_old_file_intact(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    store = StateStore(tmp_path, "s")
    store.save({"z": {"v": 1}}, now=1.0)

    def disk_fails(src: str, dst: str) -> None:
        raise OSError(28, "No space left on device")

    # A failing disk cannot be had on loopback; make the rename fail instead.
    monkeypatch.setattr("roomloop.service.persist.os.replace", disk_fails)
    with pytest.raises(OSError):
        store.save({"z": {"v": 2}}, now=2.0)
    monkeypatch.undo()
    assert StateStore(tmp_path, "s").load() == {"z": {"v": 1}}
    assert [p.name for p in tmp_path.iterdir()] == ["s.state.json"]


def test_state_dir_is_created_when_missing(tmp_path: Path) -> None:
    target = tmp_path / "a" / "b"
    assert prepare_state_dir(target) == target
    assert target.is_dir()


def test_state_dir_that_is_a_file_is_a_usage_error_naming_it(tmp_path: Path) -> None:
    blocker = tmp_path / "state"
    blocker.write_text("not a directory\n")
    with pytest.raises(StateDirError) as caught:
        prepare_state_dir(blocker)
    assert caught.value.usage is True
    assert str(caught.value) == f"state directory {blocker} is a file, not a directory"
    with pytest.raises(StateDirError) as below:
        prepare_state_dir(blocker / "inner")
    assert below.value.usage is True
    assert str(below.value) == (
        f"state directory {blocker / 'inner'} cannot be created ({blocker} is a file)"
    )
    assert "Errno" not in str(below.value)


def test_unwritable_state_dir_is_a_runtime_error_naming_it(tmp_path: Path) -> None:
    if os.geteuid() == 0:
        pytest.skip("root may write into any directory")
    locked = tmp_path / "locked"
    locked.mkdir(mode=0o500)
    with pytest.raises(StateDirError) as caught:
        prepare_state_dir(locked)
    assert caught.value.usage is False
    assert f"state directory {locked} is not writable" in str(caught.value)
    with pytest.raises(StateDirError, match="cannot be created: permission denied"):
        prepare_state_dir(locked / "inner")


def test_warm_up_models_round_trip_and_a_bad_one_is_dropped(tmp_path: Path) -> None:
    from roomloop.core.optimum_start import WarmUpModel
    from roomloop.service.persistence import restored_warm_up

    model = WarmUpModel().learned(2.5, -3.0, 900.0)
    store = StateStore(tmp_path, "s")
    store.save({"z": {"a": 1}}, now=1.0, warm_up={"z": model.to_dict(), "y": {"version": 99}})
    again = StateStore(tmp_path, "s")
    assert again.load() == {"z": {"a": 1}}
    restored = restored_warm_up(again, "z")
    assert restored is not None and restored.to_dict() == model.to_dict()
    with capture_logs() as events:
        assert restored_warm_up(again, "y") is None  # not a model: learn again from scratch
    assert [e["event"] for e in events] == ["persist.warm_up_discarded"]
    assert restored_warm_up(again, "x") is None
    # a site without learned models keeps the old document (no warm_up key)
    StateStore(tmp_path, "t").save({"z": {}}, now=1.0)
    assert "warm_up" not in json.loads((tmp_path / "t.state.json").read_text())


def _site_with_sources(tmp_path: Path) -> Any:
    import yaml
    from service_rooms import site_yaml

    from roomloop.config.loader import load_site

    data = site_yaml(modbus_port=1502, broker_port=1883, zones=1)
    data["points"] += [
        {"name": f"enable-{n}", "type": "modbus-output", "link": "rooms", "address": 10 + k}
        for k, n in enumerate(("a", "b", "c"))
    ]
    data["heat_sources"] = [
        {"name": "a", "kind": "boiler", "output": "enable-a", "zones": ["room0"]},
        {"name": "b", "kind": "heat-pump", "output": "enable-b", "zones": ["north/x"]},
        {"name": "c", "kind": "boiler", "output": "enable-c", "zones": ["north/y"]},
    ]
    path = tmp_path / "site.yaml"
    path.write_text(yaml.safe_dump(data))
    return load_site(path)


def test_sources_histories_round_trip_and_bad_ones_are_refused(tmp_path: Path) -> None:
    """Each source's saved history is read back checked: one saved for another kind, one with
    a start after the restart and one that is not an object are refused with a log event
    (that source resumes as without a saved state); the rest of the file loads."""
    from roomloop.core.source import SourceMemory
    from roomloop.service.persistence import restored_sources

    site = _site_with_sources(tmp_path)
    good = SourceMemory("boiler", True, 900.0, 500.0, (100.0, 900.0))
    store = StateStore(tmp_path / "state", site.name)
    store.save({"room0": {"a": 1}}, now=1000.0, sources={
        "a": good.to_dict(),
        "b": {**good.to_dict(), "kind": "heat-pump", "starts": [100.0, 5000.0]},  # future
        "c": {**good.to_dict(), "kind": "heat-pump"},  # saved for another kind
        "gone": good.to_dict(),  # a source the file no longer has: ignored
    })
    again = StateStore(tmp_path / "state", site.name)
    assert again.load() == {"room0": {"a": 1}}
    with capture_logs() as events:
        restored = restored_sources(site, again, now=1000.0)
    assert restored == {"a": good}
    rejected = {e["source"]: e["reason"] for e in events
                if e["event"] == "persist.source_state_rejected"}
    assert set(rejected) == {"b", "c"}
    assert "after the restart" in rejected["b"] and "kind 'heat-pump'" in rejected["c"]
    # an old file (no sources key) loads as before, with nothing to restore
    StateStore(tmp_path / "old", site.name).save({"room0": {"a": 1}}, now=1.0)
    assert "sources" not in json.loads((tmp_path / "old" / "test-annex.state.json").read_text())
    old = StateStore(tmp_path / "old", site.name)
    assert old.load() == {"room0": {"a": 1}} and restored_sources(site, old, now=2.0) == {}
    # sources that are not an object: refused with an event, the zones still load
    path = tmp_path / "state" / "test-annex.state.json"
    document = json.loads(path.read_text())
    path.write_text(json.dumps({**document, "sources": ["a", 1]}))
    with capture_logs() as events:
        broken = StateStore(tmp_path / "state", site.name)
        assert broken.load() == {"room0": {"a": 1}}
        assert restored_sources(site, broken, now=1000.0) == {}
    assert "persist.source_states_rejected" in [e["event"] for e in events]
    assert path.is_file()  # not moved aside: only the sources' part is refused
