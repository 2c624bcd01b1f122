"""SourceRuntime: the per-tick calls the service makes, end to end without a broker."""

from __future__ import annotations

import json

from source_helpers import T0

from roomloop.core.source import SourceSettings
from roomloop.core.source_runtime import SourceRuntime

SETTINGS = SourceSettings(name="boiler", zones=("office", "north/hall"), valve_opening_s=60,
                          min_on_s=0, min_off_s=0, pump_overrun_s=30, stale_policy="ignore")


def _runtime() -> SourceRuntime:
    return SourceRuntime(SETTINGS, prefix="roomloop/here", now=T0 - 3600,
                         remote_prefixes={"north": "estate/north"}, publish_interval_s=60)


def test_subscriptions_and_foreign_topics() -> None:
    runtime = _runtime()
    assert runtime.subscriptions == (
        "estate/north/status",
        "estate/north/zone/hall/demand",
        "estate/north/zone/hall/state",
    )
    assert not runtime.heard("roomloop/here/zone/office/demand", "true", T0)
    assert runtime.heard("estate/north/status", "online", T0)


def test_local_and_remote_calls_fire_the_source_and_publish_on_change() -> None:
    runtime = _runtime()
    runtime.heard("estate/north/status", "online", T0)
    runtime.heard("estate/north/zone/hall/demand", "true", T0)
    out = runtime.tick({"office": (False, "cut-out")}, T0)
    assert out.calling == ("north/hall",) and out.reason == "valve-opening"
    ((topic, payload),) = runtime.due(T0)
    assert topic == "roomloop/here/source/boiler/state"
    assert json.loads(payload)["waiting_for_valve"]["zone"] == "north/hall"
    runtime.sent(payload, T0)
    runtime.tick({"office": (True, "cut-in")}, T0 + 10)
    # the office now calls too, a change that matters: due again
    ((_, payload),) = runtime.due(T0 + 10)
    assert json.loads(payload)["calling"] == ["office", "north/hall"]
    runtime.sent(payload, T0 + 10)
    runtime.tick({"office": (True, "cut-in")}, T0 + 20)
    assert runtime.due(T0 + 20) == []  # nothing new, interval not over
    out = runtime.tick({"office": (True, "cut-in")}, T0 + 60)
    assert out.enable and out.pump
    assert runtime.due(T0 + 60)  # it fired
    runtime.sent(runtime.due(T0 + 60)[0][1], T0 + 60)
    runtime.tick({"office": (True, "cut-in")}, T0 + 70)
    assert runtime.due(T0 + 70) == []
    assert runtime.due(T0 + 121)  # the interval: at least every 60 s
    runtime.reconnected()
    assert runtime.due(T0 + 71)  # after a reconnection everything again


def test_remote_site_offline_by_its_will_is_reported() -> None:
    runtime = _runtime()
    runtime.heard("estate/north/status", "online", T0)
    runtime.heard("estate/north/zone/hall/demand", "true", T0)
    runtime.heard("estate/north/status", "offline", T0 + 5)
    out = runtime.tick({}, T0 + 10)
    assert out.stale == ("north/hall",) and out.calling == ()  # policy ignore
    payload = json.loads(runtime.due(T0 + 10)[0][1])
    assert payload["stale"] == ["north/hall"] and payload["stale_policy"] == "ignore"


def test_a_restart_goes_on_from_the_outputs_as_found() -> None:
    settings = SourceSettings(name="boiler", zones=("office",), valve_opening_s=60,
                              min_on_s=120, min_off_s=300, pump_overrun_s=30)
    # found firing: it goes on firing (no stop, no new start), its minimum on time counts
    runtime = SourceRuntime(settings, prefix="roomloop/here", now=T0)
    runtime.resume(True, True, T0)
    out = runtime.tick({"office": (True, "cut-in")}, T0 + 1)
    assert (out.enable, out.pump, out.reason, out.starts_1h) == (True, True, "firing", 1)
    out = runtime.tick({"office": (False, "cut-out")}, T0 + 10)
    assert (out.enable, out.lockout) == (True, "min-on")
    # found off (or not known): start-up counts as a stop, the minimum off time holds
    for found in (False, None):
        runtime = SourceRuntime(settings, prefix="roomloop/here", now=T0)
        runtime.resume(found, found, T0)
        runtime.tick({"office": (True, "cut-in")}, T0 + 1)
        out = runtime.tick({"office": (True, "cut-in")}, T0 + 100)
        assert (out.enable, out.lockout) == (False, "min-off")
