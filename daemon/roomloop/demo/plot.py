"""A picture of a demo run, one panel per zone (matplotlib, imported only here, only if asked)."""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

from roomloop.plant.plot import PlotUnavailable

if TYPE_CHECKING:
    from roomloop.demo.runner import DemoResult

__all__ = ["PlotUnavailable", "matplotlib_available", "write_demo_plot"]


def matplotlib_available() -> bool:
    """Whether ``--plot`` can work, asked before a minute of demo rather than after it."""
    import importlib.util

    return importlib.util.find_spec("matplotlib") is not None


def write_demo_plot(result: DemoResult, path: str | os.PathLike[str]) -> None:
    """Room air (true), sensor, set point, relay, fail-safe and the silent-sensor span per zone.

    Raises :class:`PlotUnavailable` without matplotlib, ``OSError`` if the file is unwritable.
    """
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError as exc:
        raise PlotUnavailable(str(exc)) from None

    timeline = result.timeline
    zones = list(result.traces)
    fig, axes = plt.subplots(len(zones), 1, figsize=(12, 3.2 * len(zones)), sharex=True)
    if len(zones) == 1:
        axes = [axes]

    def hours(at: float) -> float:
        return (at - timeline.start) / 3600.0

    for ax, name in zip(axes, zones, strict=True):
        trace = result.traces[name]
        record = result.records[name]
        t = [hours(result.started_at + s) for s in trace.time_s]
        relay_ax = ax.twinx()
        relay_ax.fill_between(
            t,
            [1.0 if on else 0.0 for on in trace.relay],
            step="post",
            color="tab:orange",
            alpha=0.25,
            lw=0,
            label="relay on",
        )
        relay_ax.set_ylim(0, 4)
        relay_ax.set_yticks([])
        ax.plot(t, trace.sensor_c, color="tab:gray", lw=0.6, label="sensor reading")
        ax.plot(t, trace.room_c, color="tab:red", lw=1.0, label="room air (true)")
        ht = [hours(at) for at, _, _, _ in record.history]
        ax.plot(
            ht,
            [sp for _, sp, _, _ in record.history],
            color="black",
            lw=1.0,
            ls="--",
            drawstyle="steps-post",
            label="set point",
        )
        in_fs = False
        fs_from = 0.0
        for at, _, fail_safe, _ in record.history:
            if fail_safe and not in_fs:
                in_fs, fs_from = True, hours(at)
            elif in_fs and not fail_safe:
                in_fs = False
                ax.axvspan(fs_from, hours(at), color="tab:red", alpha=0.10)
        if in_fs and record.history:
            ax.axvspan(fs_from, hours(record.history[-1][0]), color="tab:red", alpha=0.10)
        ax.axvline(hours(timeline.switch_at), color="tab:blue", lw=0.8, ls=":")
        ax.set_ylabel("C")
        heating = next(s.heating for s in result.summaries if s.zone == name)
        ax.set_title(f"{name} ({heating})", fontsize=10, loc="left")
        handles, labels = ax.get_legend_handles_labels()
        relay_handles, relay_labels = relay_ax.get_legend_handles_labels()
        ax.legend(handles + relay_handles, labels + relay_labels, loc="lower right", fontsize=8)
    axes[-1].set_xlabel("simulated hours (dotted: program switch; red: fail-safe)")
    fig.suptitle(f"roomloop demo: {result.site.name}", fontsize=11)
    fig.tight_layout()
    try:
        fig.savefig(os.fspath(path), dpi=100)
    finally:
        plt.close(fig)
