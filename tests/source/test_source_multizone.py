"""The multi-zone plant: rooms sharing one heat source on the standard protocol."""

from __future__ import annotations

import dataclasses
from typing import Any

import pytest

from roomloop.core.settings import ZoneSettings
from roomloop.core.source import SourceSettings
from roomloop.plant.controllers import make_controller
from roomloop.plant.loader import load_plant
from roomloop.plant.multizone import Estate, Room, builtin_estate, run_estate
from roomloop.plant.protocol import TICK_S, protocol_settings, run_protocol

TRANSPARENT: dict[str, Any] = dict(
    valve_opening_s=0.0, pump_pre_run_s=0.0, pump_overrun_s=0.0, min_on_s=0.0, min_off_s=0.0,
    max_starts_per_hour=60,
)
"""A source with no delay and no limit of its own."""


def _room(heating: str, actuator_s: float = 0.0, name: str | None = None) -> Room:
    settings = protocol_settings(ZoneSettings.for_heating_type(heating, name=name or heating))
    return Room(settings, load_plant(heating), actuator_s=actuator_s)


def test_one_zone_and_a_transparent_source_is_the_single_zone_protocol_run() -> None:
    """Check against the single-zone protocol (plant/protocol.py, itself checked against
    scipy's solve_ivp in tests/plant): with no valve delay and no source timing the shared
    source must change nothing, tick for tick."""
    room = _room("hydronic")
    estate = Estate("one", (room,), SourceSettings(name="s", zones=("hydronic",), **TRANSPARENT))
    result = run_estate(estate, seed=3)
    (mine,) = result.rooms
    alone = run_protocol(make_controller("anticipator", room.settings), room.plant, seed=3,
                         sensor_names=["temperature"])
    assert mine.trace.room_c == alone.trace.room_c
    assert mine.trace.demand == alone.trace.demand == mine.trace.heat
    assert mine.phases == alone.phases
    assert mine.waiting_s == 0


def test_a_slow_actuator_delays_the_heat_and_the_source_stops_with_the_call() -> None:
    """[derived from the model's rules] One room, a transparent source: the source fires
    exactly while the relay is on, the valve follows the relay one actuator time later, so
    heat flows at tick k exactly when relay[k] and relay[k - lag]."""
    room = _room("hydronic", 150.0)
    source = SourceSettings(name="s", zones=("hydronic",), **TRANSPARENT)
    result = run_estate(Estate("one", (room,), source), seed=1)
    (mine,) = result.rooms
    relay, lag = mine.trace.demand, 15
    assert result.source_enable == relay
    assert mine.trace.heat == [on and k >= lag and relay[k - lag] for k, on in enumerate(relay)]
    assert mine.waiting_s == 0  # the valve is never open while the source is off


def test_valve_opening_time_shortens_every_heat_run_by_exactly_that_much() -> None:
    """[derived from the source's rules] One room, no actuator delay, a source that waits
    ``V`` after each call and has no other timing: heat flows for max(0, run - V) of each
    relay on-run, starting ``V`` after it, and nothing else."""
    v = 240.0
    room = _room("hydronic")
    source = SourceSettings(name="s", zones=("hydronic",), **{**TRANSPARENT, "valve_opening_s": v})
    (mine,) = run_estate(Estate("one", (room,), source), seed=2).rooms
    relay, heat = mine.trace.demand, mine.trace.heat
    wait = round(v / TICK_S)
    expected = [False] * len(relay)
    k = 0
    while k < len(relay):
        if relay[k]:
            end = k
            while end < len(relay) and relay[end]:
                end += 1
            for j in range(k + wait, end):
                expected[j] = True
            k = end
        else:
            k += 1
    assert heat == expected
    assert sum(heat) < sum(relay)


@pytest.mark.parametrize("name", ["two-zone", "three-zone"])
def test_builtin_estates_show_what_the_source_costs_each_zone(name: str) -> None:
    estate = builtin_estate(name)
    result = run_estate(estate, seed=1)
    s = estate.source
    assert len(result.rooms) == (2 if name == "two-zone" else 3)
    assert result.source.most_starts_in_an_hour <= s.max_starts_per_hour
    assert result.source.shortest_on_s is not None and result.source.shortest_on_s >= s.min_on_s
    assert result.source.shortest_off_s is not None
    assert result.source.shortest_off_s >= s.min_off_s
    assert result.source.pump_fraction >= result.source.on_fraction
    for room in result.rooms:
        actuator = next(r.actuator_s for r in estate.rooms if r.name == room.name)
        if actuator < s.valve_opening_s:
            # the source waits for the slowest actuator: a faster room pays the difference
            assert room.waiting_s > 0 and room.cost()["mean_wait_per_call_s"] > 0
        assert room.overall.control_accuracy_k >= room.alone.overall.control_accuracy_k - 0.05
        # the heat reaches a room only while its valve is open and the source fires
        for k, heat in enumerate(room.trace.heat):
            assert heat == (room.trace.valve[k] and result.source_enable[k])
    document = result.to_dict()
    assert set(document["rooms"]) == {r.name for r in estate.rooms}
    assert document["source"]["starts"] == result.source.starts


def test_unknown_builtin_estate() -> None:
    with pytest.raises(KeyError):
        builtin_estate("ten-zone")


def test_min_off_time_costs_more_than_none() -> None:
    """A longer minimum off time of the source can only delay heat: the rooms wait longer."""
    estate = builtin_estate("two-zone")
    longer = dataclasses.replace(estate, source=dataclasses.replace(estate.source, min_off_s=900))
    short = run_estate(estate, seed=1)
    long = run_estate(longer, seed=1)
    assert long.source.reasons_s.get("min-off", 0) > 0
    assert sum(r.waiting_s for r in long.rooms) > sum(r.waiting_s for r in short.rooms)
