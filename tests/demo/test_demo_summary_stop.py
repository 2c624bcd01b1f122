"""The demo's closing table after a run stopped before the silent sensor's window: the
silenced zone has no fail-safe figure (``n/r``, like the other windows not reached), not a
``0`` that reads as "the fail-safe never engaged". In-process, on the virtual clock."""

from __future__ import annotations

import asyncio
import io
from collections.abc import Sequence
from zoneinfo import ZoneInfo

import pytest

from roomloop.cli.demo import _report
from roomloop.clock import Clock, sleep_until
from roomloop.demo.plant_server import STEP_S, PlantTrace
from roomloop.demo.runner import SILENT_ZONE, DemoOptions, demo_site, run_demo
from roomloop.demo.summary import format_summary, summarize_zone
from roomloop.demo.timeline import Timeline


class _Quiet:
    """An observer that keeps the events (the table is what the test reads)."""

    def __init__(self) -> None:
        self.events: list[str] = []

    def event(self, at: float, text: str) -> None:
        self.events.append(text)

    def status(self, at: float, header: str, rows: Sequence[str]) -> None:
        pass


def _rows(text: str) -> dict[str, list[str]]:
    lines = text.splitlines()
    head = next(i for i, line in enumerate(lines) if line.startswith("zone "))
    rows = {}
    for line in lines[head + 1 :]:
        cells = line.split()
        if len(cells) != 8:
            break
        rows[cells[0]] = cells[1:]
    return rows


async def test_a_run_stopped_before_the_silence_has_no_fail_safe_figure_for_that_zone() -> None:
    # A 1 h run: it starts 06:42, the switch is at 07:00, the sensor goes silent at 07:09
    # (45 % of the run in); the run is stopped at the switch, 9 min before the silence.
    tz = ZoneInfo(demo_site(1502, "/tmp/unused").site.timezone)
    timeline = Timeline.for_run(1.0, demo_site(1502, "/tmp/unused").zone(SILENT_ZONE), tz)
    assert timeline.switch_at < timeline.silence_start
    clocks: list[Clock] = []
    stop = asyncio.Event()
    options = DemoOptions(hours=1.0, virtual=True, on_clock=clocks.append)
    observer = _Quiet()

    async def stop_at_the_switch() -> None:
        for _ in range(1000):  # on_clock runs before the demo's first await: bounded
            if clocks:
                break
            await asyncio.sleep(0)
        assert clocks, "the demo never gave its clock"
        await sleep_until(clocks[-1], timeline.switch_at)
        stop.set()

    stopper = asyncio.create_task(stop_at_the_switch())
    result = await run_demo(options, observer, stop)
    await stopper
    assert not result.completed
    assert result.timeline == timeline
    out = io.StringIO()
    _report(result, out)
    text = out.getvalue()
    rows = _rows(text)
    assert set(rows) == {"small-hall", SILENT_ZONE, "kitchen"}, text
    assert rows[SILENT_ZONE][-1] == "n/r", text
    # the other zones ran the whole (stopped) run: their 0 is a figure
    assert rows["small-hall"][-1] == rows["kitchen"][-1] == "0", text
    assert (
        f"fail-safe = minutes in fail-safe over the run as far as it went, 06:42-07:00 "
        f"(18 min); {SILENT_ZONE}'s sensor silent 07:09-07:29: not reached (the run stopped "
        "at 07:00)." in text
    ), text
    assert "n/r = not reached: the run stopped before that window began." in text


def _steady_trace(t: Timeline) -> PlantTrace:
    """The whole run's trace of a room held at 20 C, the relay on half of every minute."""
    steps = int((t.end - t.start) / STEP_S)
    return PlantTrace(
        time_s=[i * STEP_S for i in range(steps)],
        room_c=[20.0] * steps,
        sensor_c=[20.0] * steps,
        relay=[i % 6 < 3 for i in range(steps)],
    )


def test_a_run_stopped_inside_the_silence_gives_its_fail_safe_figure() -> None:
    site = demo_site(1502, "/tmp/unused")
    tz = ZoneInfo(site.site.timezone)
    t = Timeline.for_run(8.0, site.zone(SILENT_ZONE), tz)
    trace = _steady_trace(t)
    stopped = t.silence_start + 1800.0
    row = summarize_zone(
        SILENT_ZONE, "hydronic", trace, started_at=t.start, timeline=t, comfort_c=20.0,
        heater_w=1000.0, fail_safe_s=25 * 60.0, ended_at=stopped, silenced=True,
    )
    text = format_summary([row], t, tz, 20.0, stopped)
    assert _rows(text)[SILENT_ZONE][-1] == "25", text
    assert "sensor silent 08:12-09:24: partial, only 08:12-08:42 ran (30 of 72 min)." in text


@pytest.mark.parametrize("silenced", [False, True])
def test_a_whole_run_shows_the_silence_window_without_a_mark(silenced: bool) -> None:
    site = demo_site(1502, "/tmp/unused")
    tz = ZoneInfo(site.site.timezone)
    t = Timeline.for_run(8.0, site.zone(SILENT_ZONE), tz)
    trace = _steady_trace(t)
    row = summarize_zone(
        SILENT_ZONE, "hydronic", trace, started_at=t.start, timeline=t, comfort_c=20.0,
        heater_w=1000.0, fail_safe_s=70 * 60.0, silenced=silenced,
    )
    text = format_summary([row], t, tz, 20.0)
    assert _rows(text)[SILENT_ZONE][-1] == "70", text
    legend = (
        "fail-safe = minutes in fail-safe over the run; meeting-room's sensor silent "
        "08:12-09:24."
    )
    assert (legend in text) is silenced, text
    assert "n/r" not in text
