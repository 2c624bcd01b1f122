"""The journal's heat-source events: a line per transition, none for a tick changing nothing."""

from __future__ import annotations

from dataclasses import replace

from roomloop.core.source import SourceOutputs
from roomloop.service.events import source_events

IDLE = SourceOutputs(enable=False, pump=False, reason="idle", pump_reason="off")


def names(previous: SourceOutputs | None, outputs: SourceOutputs) -> list[str]:
    return [e.event for e in source_events("boiler", previous=previous, outputs=outputs)]


def test_start_stop_lockout_and_stale_are_each_logged_once() -> None:
    assert names(None, IDLE) == ["source.resumed"]
    assert names(IDLE, IDLE) == []
    waiting = replace(IDLE, calling=("office",), reason="min-off", lockout="min-off",
                      lockout_until=100.0)
    assert names(IDLE, waiting) == ["source.lockout"]
    assert names(waiting, waiting) == []  # the same lockout goes on: no new line
    firing = replace(IDLE, enable=True, pump=True, reason="firing", calling=("office",),
                     starts_1h=1)
    (started,) = source_events("boiler", previous=waiting, outputs=firing)
    assert (started.event, started.fields["calling"]) == ("source.started", ["office"])
    held = replace(firing, reason="min-on", lockout="min-on", calling=())
    assert names(firing, held) == ["source.lockout"]
    assert names(held, replace(IDLE, pump=True, pump_reason="overrun")) == ["source.stopped"]
    stale = replace(IDLE, stale=("north/hall",), stale_policy="ignore")
    (line,) = source_events("boiler", previous=IDLE, outputs=stale)
    assert (line.event, line.level, line.fields["zones"]) == (
        "source.remote_stale", "warning", ["north/hall"]
    )
    assert names(stale, IDLE) == ["source.remote_fresh"]


def test_the_most_starts_per_hour_is_a_warning() -> None:
    held = replace(IDLE, calling=("office",), reason="max-starts", lockout="max-starts")
    (line,) = source_events("boiler", previous=IDLE, outputs=held)
    assert (line.event, line.level, line.fields["lockout"]) == (
        "source.lockout", "warning", "max-starts"
    )
