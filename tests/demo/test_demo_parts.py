"""The demo's pieces on their own: its timeline, the relay check, broker parsing, the site."""

from __future__ import annotations

import asyncio
from zoneinfo import ZoneInfo

import pytest

from roomloop.cli.demo import parse_broker
from roomloop.clock import VirtualClock
from roomloop.demo.plant_server import STEP_S, PlantServer, PlantTrace
from roomloop.demo.runner import demo_site, disagreement_s
from roomloop.demo.sources import wire_sources
from roomloop.demo.timeline import SILENCE_MIN_S, Timeline
from roomloop.io.modbus import ModbusLink
from roomloop.plant.loader import load_plant


def test_timeline_places_switch_and_silence_inside_the_run() -> None:
    site = demo_site(1502, "/tmp/unused")
    tz = ZoneInfo(site.site.timezone)
    for hours in (1.0, 8.0, 30.0):
        t = Timeline.for_run(hours, site.zone("meeting-room"), tz)
        assert t.end - t.start == pytest.approx(hours * 3600)
        assert t.start < t.switch_at < t.silence_start < t.silence_end < t.end
        assert t.silence_end - t.silence_start >= SILENCE_MIN_S
        assert t.switch_at < t.score_from < t.comfort_end <= t.end
    # 30 h runs past the program's 21:00 switch back to standby: comfort ends there.
    long = Timeline.for_run(30.0, site.zone("meeting-room"), tz)
    assert long.comfort_end < long.end
    with pytest.raises(ValueError, match="simulated hours"):
        Timeline.for_run(0.5, site.zone("meeting-room"), tz)


def test_disagreement_counts_only_stretches_longer_than_the_grace() -> None:
    trace = PlantTrace()
    relay = [False] * 3 + [True] * 2 + [False] * 5 + [True] * 10
    trace.time_s = [k * STEP_S for k in range(len(relay))]
    trace.relay = relay
    trace.room_c = [20.0] * len(relay)
    trace.sensor_c = [20.0] * len(relay)
    # Decided on at 3 steps (the coil follows at once), off at 5; on again never: the last
    # ten steps (100 s) the coil is on against an "off" decision.
    decisions = [(0.0, False), (3 * STEP_S, True), (5 * STEP_S, False)]
    assert disagreement_s(trace, 0.0, decisions) == pytest.approx(10 * STEP_S)
    # A coil one step late is not a disagreement.
    late = [(0.0, False), (2 * STEP_S, True), (4 * STEP_S, False), (9 * STEP_S, True)]
    assert disagreement_s(trace, 0.0, late) == 0.0


@pytest.mark.parametrize(
    ("text", "expected"),
    [("127.0.0.1:1883", ("127.0.0.1", 1883)), ("[::1]:8883", ("::1", 8883))],
)
def test_parse_broker(text: str, expected: tuple[str, int]) -> None:
    assert parse_broker(text) == expected


@pytest.mark.parametrize("text", ["localhost", ":1883", "host:", "host:x", "host:0"])
def test_parse_broker_refuses(text: str) -> None:
    with pytest.raises(ValueError, match="--broker"):
        parse_broker(text)


async def test_plant_server_serves_sensors_and_silences_one_unit() -> None:
    """The service's own Modbus link reads the plants; a silenced unit is comm-failure alone."""
    site = demo_site(1502, "/tmp/unused")
    plants = {z.name: load_plant(z.heating) for z in site.zones}
    clock = VirtualClock()
    server = PlantServer(site, plants, clock, outdoor_c=2.0, start_room_c=18.0)
    await server.start()
    stepping = asyncio.create_task(server.run())
    try:
        link_config = site.links[0].model_copy(update={"port": server.port})
        inputs = [p for p in site.points if p.type == "modbus-input"]
        outputs = [p for p in site.points if p.type == "modbus-output"]
        async with ModbusLink(link_config, inputs, outputs, clock=clock) as link:
            samples = {s.name: s for s in await link.poll()}
            assert all(s.transport == "ok" for s in samples.values())
            assert samples["kitchen-air"].value == pytest.approx(18.0, abs=0.15)
            await link.set_output("kitchen-convector", True)
            assert (await server.relays())["kitchen"] is True
            server.silence(12)
            samples = {s.name: s for s in await link.poll()}
            assert samples["meeting-room-air"].transport == "comm-failure"
            assert samples["kitchen-air"].transport == "ok"
            server.restore(12)
            samples = {s.name: s for s in await link.poll()}
            assert samples["meeting-room-air"].transport == "ok"
        # The convector heats the kitchen plant (relay held over the steps).
        await clock.sleep(32 * STEP_S)  # the plants step every STEP_S
        kitchen = server.zone("kitchen").trace
        assert len(kitchen.relay) >= 31  # one step per STEP_S (the one due as the test wakes aside)
        assert any(kitchen.relay)
    finally:
        stepping.cancel()
        await asyncio.gather(stepping, return_exceptions=True)
        await server.stop()


def test_a_run_stopped_early_has_no_figures_for_the_windows_it_did_not_reach() -> None:
    # A run stopped an hour after the 07:00 switch, with a plant trace that kept going (as if
    # the stop had not cut it): the accuracy window (second half of the comfort stretch) was
    # never reached, so it has no figure; the switch's window covers only what ran.
    from roomloop.demo.summary import format_summary, summarize_zone

    site = demo_site(1502, "/tmp/unused")
    tz = ZoneInfo(site.site.timezone)
    t = Timeline.for_run(8.0, site.zone("meeting-room"), tz)
    steps = int((t.end - t.start) / STEP_S)
    trace = PlantTrace(
        time_s=[i * STEP_S for i in range(steps)],
        room_c=[18.0 + 2.5 * i / steps for i in range(steps)],
        sensor_c=[0.0] * steps,
        relay=[i % 6 < 3 for i in range(steps)],
    )
    stopped = t.switch_at + 3600.0
    row = summarize_zone(
        "meeting-room", "hydronic", trace, started_at=t.start, timeline=t,
        comfort_c=20.0, heater_w=1000.0, fail_safe_s=0.0, ended_at=stopped,
    )
    assert row.control_accuracy_k is None and row.cycles_per_hour is None
    # the room reached 18 + 2.5 * (share of the run that had gone by at the stop)
    ran_share = (stopped - t.start) / (t.end - t.start)
    assert row.overshoot_k == pytest.approx(18.0 + 2.5 * ran_share - 20.0, abs=0.01)
    text = format_summary([row], t, tz, 20.0, stopped)
    assert "n/r" in text.splitlines()[1]
    assert "the comfort stretch: not reached (the run stopped at 08:00)" in text
    partial = "after the 07:00 switch until 12:36: partial, only 07:00-08:00 ran (60 of 336 min)"
    assert partial in text


def test_boiler_record_times_the_valve_wait_and_the_pump_overrun() -> None:
    """The demo's boiler account from coil readings: a start 190 s after the first call, a
    stop 840 s later, the pump off 180 s after that (numbers chosen here, by hand)."""
    site = demo_site(1502, "/tmp/unused")
    plants = {z.name: load_plant(z.heating) for z in site.zones}
    server = PlantServer(site, plants, VirtualClock(), outdoor_c=2.0, start_room_c=18.0)
    boiler = wire_sources(site, server)["boiler"]
    assert set(server.gates) == {"small-hall", "meeting-room"}  # the kitchen is electric
    boiler.zone_decided("meeting-room", True, 100.0)
    assert boiler.coils(False, False, 150.0) == []  # its valve is still opening
    (fired,) = boiler.coils(True, True, 290.0)
    assert "fires for meeting-room, 3.2 min after meeting-room's valve opened" in fired
    boiler.zone_decided("meeting-room", False, 1100.0)
    (stopped,) = boiler.coils(False, True, 1130.0)
    assert "stops, no zone calls any more (it fired 14.0 min)" in stopped
    assert boiler.coils(False, True, 1200.0) == []  # the pump runs on
    (pump,) = boiler.coils(False, False, 1310.0)
    assert "pump stops 3.0 min after the boiler" in pump
    assert (boiler.waits, boiler.overruns, boiler.fired_s) == ([190.0], [180.0], 840.0)
    summary = boiler.summary(1.0)
    assert "1 starts in 1.0 h" in summary
    assert "each start came 3.2 min after the first valve opened" in summary
    assert "ran on 3.0 min after each of its 1 stops" in summary
