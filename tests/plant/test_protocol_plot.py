"""The simulate plot (``roomloop simulate --plot``) read back from its real figure (issue 16
item 5): its bottom panel draws the run's own outdoor temperature and load.

Each test runs the real 49 h protocol (a fraction of a second) and reads the figure
:func:`~roomloop.plant.plot.protocol_figure` draws from it on matplotlib's Agg canvas.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

pytest.importorskip("matplotlib")

import matplotlib.image as mimage
from matplotlib.figure import Figure

from roomloop.core.settings import ZoneSettings
from roomloop.plant.controllers import cooling_zone_settings, make_controller
from roomloop.plant.loader import load_plant
from roomloop.plant.plot import protocol_figure, write_plot
from roomloop.plant.protocol import Mode, ProtocolResult, protocol_settings, run_protocol

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"


def _run(mode: Mode) -> ProtocolResult:
    """The protocol as ``simulate --heating electric`` or ``--cooling direct-expansion`` runs it."""
    if mode == "cool":
        zone, plant = cooling_zone_settings("direct-expansion"), "direct-expansion"
    else:
        zone, plant = ZoneSettings.for_heating_type("electric"), "electric"
    settings = protocol_settings(zone, mode=mode)
    controller = make_controller("anticipator", settings, mode)
    return run_protocol(controller, load_plant(plant), mode=mode)


def _line(fig: Figure, label: str) -> Any:
    """The one line of the figure with this legend label."""
    (line,) = [line for ax in fig.axes for line in ax.get_lines() if line.get_label() == label]
    return line


@pytest.mark.parametrize(("mode", "of"), [("heat", "heater"), ("cool", "cooler")])
def test_the_outdoor_panel_draws_the_runs_outdoor_temperature_and_load(
    mode: Mode, of: str
) -> None:
    result = _run(mode)
    trace = result.trace
    fig = protocol_figure(result)
    fig.canvas.draw()
    hours = [t / 3600.0 for t in trace.time_s]
    outdoor = _line(fig, "outdoor temperature")
    load = _line(fig, f"load (% of {of})")
    # the run's own series, tick by tick, against the hours of the other panels
    assert list(outdoor.get_xdata()) == hours and list(load.get_xdata()) == hours
    assert list(outdoor.get_ydata()) == trace.outdoor_c
    assert list(load.get_ydata()) == [100.0 * x for x in trace.load]
    # the schedule's loads, 30 % and 60 %: a panel drawing anything else fails here
    assert (min(load.get_ydata()), max(load.get_ydata())) == pytest.approx((30.0, 60.0))
    if mode == "heat":  # the outdoor temperature falls for the high load
        assert max(trace.outdoor_c) - min(trace.outdoor_c) > 5.0
    else:  # a warm day all through; the gains carry the load
        assert min(trace.outdoor_c) == max(trace.outdoor_c) > result.comfort_c
    # one panel of its own: the outdoor axes (the bottom one, sharing the hours) with the load
    # on its second y axis, the same place on the figure; both named in its legend
    ax, load_ax = outdoor.axes, load.axes
    assert ax is fig.axes[3] and ax.get_xlabel() == "hours"
    assert ax.get_shared_x_axes().joined(ax, fig.axes[0])
    assert load_ax is not ax and load_ax.get_position().bounds == ax.get_position().bounds
    assert ax.get_ylabel() == "outdoor C" and load_ax.get_ylabel() == "load %"
    assert load_ax.get_ylim() == (0.0, 100.0)
    legend = ax.get_legend()
    assert legend is not None
    named = [t.get_text() for t in legend.get_texts()]
    assert named == ["outdoor temperature", f"load (% of {of})"]
    # and nothing else drawn on it: the room's temperatures are on the top panel
    assert [line.get_label() for line in ax.get_lines()] == ["outdoor temperature"]
    assert _line(fig, "room air (true)").axes is fig.axes[0]


def test_write_plot_writes_the_figure_as_a_png(tmp_path: Path) -> None:
    result = _run("heat")
    png = tmp_path / "run.png"
    write_plot(result, png)
    assert png.read_bytes()[:8] == PNG_SIGNATURE
    width, height = protocol_figure(result).get_size_inches() * 100  # at 100 dpi
    assert mimage.imread(png).shape[:2] == (round(height), round(width))
