"""A picture of a demo run, one panel per zone (matplotlib, imported only here, only if asked)."""

from __future__ import annotations

import datetime as dt
import os
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from roomloop.plant.plot import PlotUnavailable, agg_figure

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from roomloop.demo.runner import DemoResult

__all__ = ["PlotUnavailable", "demo_figure", "matplotlib_available", "write_demo_plot"]


def matplotlib_available() -> bool:
    """Whether ``--plot`` can work, asked before a minute of demo rather than after it."""
    import importlib.util

    return importlib.util.find_spec("matplotlib") is not None


def write_demo_plot(result: DemoResult, path: str | os.PathLike[str]) -> None:
    """The run's :func:`demo_figure` as a PNG.

    Raises :class:`PlotUnavailable` without matplotlib, ``OSError`` if the file is unwritable.
    """
    demo_figure(result).savefig(os.fspath(path), dpi=100)


def demo_figure(result: DemoResult) -> Figure:
    """Room air (true), sensor, set point, the relay on its own strip, and fail-safe, per zone,
    against the site's clock times (the text log's); a strip per heat source below.

    An :func:`~roomloop.plant.plot.agg_figure`. Raises :class:`PlotUnavailable` without
    matplotlib.
    """
    zones = list(result.traces)
    sources = [n for n in result.sources if f"{n}:enable" in result.watched]
    # per zone: temperatures on a tall axis, the relay on its own strip below it; then a
    # strip per heat source (its enable and its pump)
    fig = agg_figure((12, 3.6 * len(zones) + 1.2 * len(sources)))  # first: matplotlib there?

    from zoneinfo import ZoneInfo

    import matplotlib.dates as mdates

    tz = ZoneInfo(result.site.site.timezone)
    axes = fig.subplots(
        2 * len(zones) + len(sources), 1, sharex=True,
        gridspec_kw={"height_ratios": [4, 1] * len(zones) + [1.2] * len(sources)},
    )

    def clock(at: float) -> dt.datetime:
        """The instant as the text log's clock shows it: the site's local time."""
        return dt.datetime.fromtimestamp(at, tz)

    for index, name in enumerate(zones):
        _zone_panels(axes[2 * index], axes[2 * index + 1], result, name, clock)
    first = next(iter(result.traces.values()))
    steps = [clock(result.started_at + s) for s in first.time_s]
    for offset, name in enumerate(sources):
        _source_panel(axes[2 * len(zones) + offset], result, name, steps, clock)
    axes[-1].xaxis.set_major_formatter(mdates.DateFormatter("%H:%M", tz=tz))  # type: ignore[no-untyped-call]
    axes[-1].set_xlabel(
        f"site time ({tz.key}), as in the text log (dotted: program switch; red: fail-safe)"
    )
    fig.suptitle(f"roomloop demo: {result.site.name}", fontsize=11)
    fig.tight_layout()
    return fig


def _zone_panels(
    ax: Any, relay_ax: Any, result: DemoResult, name: str, clock: Callable[[float], dt.datetime]
) -> None:
    """One zone: temperatures and set point above, its relay below, fail-safe shaded."""
    timeline = result.timeline
    trace = result.traces[name]
    record = result.records[name]
    t = [clock(result.started_at + s) for s in trace.time_s]
    relay_ax.fill_between(
        t, [1.0 if on else 0.0 for on in trace.relay], step="post", color="tab:orange", lw=0
    )
    relay_ax.set_ylim(0, 1)
    relay_ax.set_yticks([0, 1], ["off", "on"])
    relay_ax.set_ylabel("relay")
    ax.plot(t, trace.sensor_c, color="tab:gray", lw=0.6, label="sensor reading")
    ax.plot(t, trace.room_c, color="tab:red", lw=1.0, label="room air (true)")
    ax.plot(
        [clock(at) for at, _, _, _ in record.history],
        [sp for _, sp, _, _ in record.history],
        color="black",
        lw=1.0,
        ls="--",
        drawstyle="steps-post",
        label="set point",
    )
    in_fs = False
    fs_from = clock(timeline.start)
    for at, _, fail_safe, _ in record.history:
        if fail_safe and not in_fs:
            in_fs, fs_from = True, clock(at)
        elif in_fs and not fail_safe:
            in_fs = False
            for each in (ax, relay_ax):
                each.axvspan(fs_from, clock(at), color="tab:red", alpha=0.10)
    if in_fs and record.history:
        for each in (ax, relay_ax):
            each.axvspan(fs_from, clock(record.history[-1][0]), color="tab:red", alpha=0.10)
    for each in (ax, relay_ax):
        each.axvline(clock(timeline.switch_at), color="tab:blue", lw=0.8, ls=":")
    ax.set_ylabel("C")
    heating = next(s.heating for s in result.summaries if s.zone == name)
    ax.set_title(f"{name} ({heating})", fontsize=10, loc="left")
    ax.legend(loc="lower right", fontsize=8)


def _source_panel(
    ax: Any,
    result: DemoResult,
    name: str,
    steps: list[dt.datetime],
    clock: Callable[[float], dt.datetime],
) -> None:
    """One heat source: when it fires, and its pump with the overrun after each stop."""
    enable = result.watched[f"{name}:enable"][: len(steps)]
    pump = result.watched.get(f"{name}:pump", [])[: len(steps)]
    ax.fill_between(
        steps[: len(enable)], [1.0 if on else 0.0 for on in enable], step="post",
        color="tab:orange", lw=0, label=f"{name} firing",
    )
    if pump:
        ax.plot(
            steps[: len(pump)], [0.5 if on else 0.0 for on in pump], drawstyle="steps-post",
            color="tab:blue", lw=1.0, label="pump (overrun after each stop)",
        )
    ax.set_ylim(0, 1.05)
    ax.set_yticks([])
    ax.set_ylabel(name)
    ax.legend(loc="upper right", fontsize=8)
    ax.axvline(clock(result.timeline.switch_at), color="tab:blue", lw=0.8, ls=":")
