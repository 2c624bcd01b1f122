"""The demo's plot (``roomloop demo --plot``) read back from its real figure (issue 16 item 8).

One real 1 h demo runs in-process on the virtual clock (the real service, plants and
Modbus TCP on loopback) with the plain view's text log captured; the figure is drawn
from that run on matplotlib's Agg canvas and read: the time axis shows the text log's
clock times (HH:MM at the trace's own instants, in the site's time zone) and each zone's
relay is its own strip of off and on, below its temperatures.
"""

from __future__ import annotations

import asyncio
import dataclasses
import datetime as dt
import io
import re
from pathlib import Path
from typing import Any
from zoneinfo import ZoneInfo

import pytest

pytest.importorskip("matplotlib")

import matplotlib.dates as mdates
import matplotlib.image as mimage
import numpy as np
from matplotlib.figure import Figure

from roomloop.cli.demo import PlainView
from roomloop.clock import AutojumpLoop
from roomloop.demo.plant_server import STEP_S
from roomloop.demo.plot import demo_figure, write_demo_plot
from roomloop.demo.runner import DemoOptions, DemoResult, run_demo
from roomloop.demo.summary import clock_text

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"
CLOCK = re.compile(r"\d\d:\d\d")
LOG_STAMP = re.compile(r"^\[(\d\d:\d\d)\] ", re.M)
"""A text log line's clock time: ``[06:50] kitchen  17.91 ...``."""


@dataclasses.dataclass(frozen=True)
class Run:
    result: DemoResult
    log: str
    """The text log as the demo prints it to a pipe (events and the zones' status rows)."""


@pytest.fixture(scope="module")
def run() -> Run:
    """One real 1 h demo on the virtual clock (a few seconds), shared by this module."""
    log = io.StringIO()
    with asyncio.Runner(loop_factory=AutojumpLoop) as runner:
        result = runner.run(
            run_demo(DemoOptions(hours=1.0, virtual=True), PlainView(log, 300.0), asyncio.Event())
        )
    assert result.completed
    return Run(result, log.getvalue())


def _minutes(hh_mm: str) -> int:
    hours, minutes = hh_mm.split(":")
    return 60 * int(hours) + int(minutes)


def _posix(day_numbers: Any) -> list[float]:
    """matplotlib's date numbers (days) as POSIX seconds."""
    return [mdates.num2date(x).timestamp() for x in day_numbers]  # type: ignore[no-untyped-call]


def _day_number(posix: float) -> float:
    """A POSIX instant as matplotlib's date number (days), where the plot draws it."""
    return float(mdates.date2num(dt.datetime.fromtimestamp(posix, dt.UTC)))  # type: ignore[no-untyped-call]


def _shown_ticks(fig: Figure) -> list[tuple[float, str]]:
    """The bottom axes' major ticks inside its view, (POSIX seconds, label text), once drawn."""
    fig.canvas.draw()
    axis = fig.axes[-1].xaxis
    locations, labels = axis.get_majorticklocs(), axis.get_majorticklabels()
    assert len(locations) == len(labels)
    low, high = axis.get_view_interval()
    return [
        (_posix([day])[0], label.get_text())
        for day, label in zip(locations, labels, strict=True)
        if low <= day <= high
    ]


def _zone_axes(fig: Figure, zone: str) -> tuple[Any, Any]:
    """The zone's temperature axes (titled with its name) and the axes right after it."""
    index = next(i for i, ax in enumerate(fig.axes) if ax.get_title("left").startswith(zone))
    return fig.axes[index], fig.axes[index + 1]


def _check_clock_axis(result: DemoResult, tz: ZoneInfo) -> tuple[Figure, list[str]]:
    """The checks shared by the demo's own site and the same run in another time zone;
    returns the figure and its tick labels."""
    fig = demo_figure(result)
    ticks = _shown_ticks(fig)
    labels = [label for _, label in ticks]
    assert len(labels) >= 3, labels
    for at, label in ticks:
        # HH:MM (not seconds or hours since the start), the site's clock at the tick
        assert CLOCK.fullmatch(label), labels
        assert label == clock_text(at, tz), (label, dt.datetime.fromtimestamp(at, tz))
    # every zone's traces sit at the trace's own instants on that axis
    first = last = result.started_at
    for zone, trace in result.traces.items():
        ax, relay_ax = _zone_axes(fig, zone)
        instants = [result.started_at + s for s in trace.time_s]
        for line in ax.get_lines():
            if line.get_label() in ("sensor reading", "room air (true)"):
                assert np.allclose(_posix(line.get_xdata(orig=False)), instants, rtol=0, atol=1e-3)
        (relay,) = relay_ax.collections
        xs = [x for path in relay.get_paths() for x, _ in path.vertices]
        assert _posix([min(xs), max(xs)]) == pytest.approx([instants[0], instants[-1]], abs=1e-3)
        last = max(last, instants[-1])
    # the ticks lie between the trace's first and last clock times (and the axes' margin of
    # a few minutes either side)
    span = [_minutes(clock_text(first, tz)) - 5, _minutes(clock_text(last, tz)) + 5]
    assert all(span[0] <= _minutes(label) <= span[1] for label in labels), (labels, span)
    return fig, labels


def test_the_time_axis_shows_the_text_logs_clock_times(run: Run) -> None:
    result = run.result
    tz = ZoneInfo(result.site.site.timezone)
    fig, labels = _check_clock_axis(result, tz)
    stamps = LOG_STAMP.findall(run.log)
    assert stamps, run.log
    # the plot's clock and the text log's: the same times, the ticks within the log's
    assert stamps[0] == clock_text(result.started_at, tz)
    assert all(_minutes(stamps[0]) - 5 <= _minutes(x) <= _minutes(stamps[-1]) + 5 for x in labels)
    # the log's 07:00 program switch is drawn at the plot's 07:00
    switch = re.search(r"^\[(\d\d:\d\d)\] kitchen: program switches", run.log, re.M)
    assert switch is not None, run.log
    ax, _ = _zone_axes(fig, "kitchen")
    (mark,) = [line for line in ax.get_lines() if line.get_linestyle() == ":"]  # the switch
    assert clock_text(_posix(mark.get_xdata(orig=False)[:1])[0], tz) == switch.group(1) == "07:00"


def test_the_time_axis_follows_the_sites_time_zone(run: Run) -> None:
    # The demo's site keeps Europe/London time and runs in January, when that is UTC: a plot
    # drawn in UTC would look right there. The same run on a site in New York (UTC-5 in
    # January) must show New York's clock, 01:42 to 02:42.
    site = run.result.site
    elsewhere = site.model_copy(
        update={"site": site.site.model_copy(update={"timezone": "America/New_York"})}
    )
    result = dataclasses.replace(run.result, site=elsewhere)
    _, labels = _check_clock_axis(result, ZoneInfo("America/New_York"))
    assert all(_minutes("01:37") <= _minutes(x) <= _minutes("02:47") for x in labels), labels


def test_each_zones_relay_is_its_own_strip_of_off_and_on(run: Run) -> None:
    result = run.result
    fig = demo_figure(result)
    fig.canvas.draw()
    for zone, trace in result.traces.items():
        ax, relay_ax = _zone_axes(fig, zone)
        # its own axes, right below the temperatures and sharing their time axis
        assert relay_ax is not ax and relay_ax.get_ylabel() == "relay"
        assert relay_ax.get_position().y1 < ax.get_position().y0
        assert relay_ax.get_shared_x_axes().joined(ax, relay_ax)
        assert relay_ax.get_ylim() == (0.0, 1.0)
        assert [t.get_text() for t in relay_ax.get_yticklabels()] == ["off", "on"]
        # the temperatures' axes hold no strip, the strip's axes no temperature
        assert len(ax.collections) == 0
        assert not [line for line in relay_ax.get_lines() if not line.get_label().startswith("_")]
        labels = ax.get_legend_handles_labels()[1]
        assert labels == ["sensor reading", "room air (true)", "set point"]
        # a step of 0 and 1: filled up to 1 over each plant step the relay was on, and not
        # at all over a step it was off
        (strip,) = relay_ax.collections
        paths = strip.get_paths()
        assert {float(y) for path in paths for _, y in path.vertices} == {0.0, 1.0}
        assert 0 < sum(trace.relay) < len(trace.relay), zone  # both states occur
        steps = trace.time_s[:-1]
        middles = [(_day_number(result.started_at + s + STEP_S / 2), 0.5) for s in steps]
        filled = np.zeros(len(middles), dtype=bool)
        for path in paths:
            filled |= path.contains_points(middles)
        assert filled.tolist() == list(trace.relay[:-1]), zone


def test_write_demo_plot_writes_the_figure_as_a_png(run: Run, tmp_path: Path) -> None:
    png = tmp_path / "demo.png"
    write_demo_plot(run.result, png)
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    width, height = demo_figure(run.result).get_size_inches() * 100  # at 100 dpi
    assert mimage.imread(png).shape[:2] == (round(height), round(width))
