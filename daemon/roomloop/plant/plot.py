"""A picture of one protocol run (matplotlib, imported only here and only when asked for)."""

from __future__ import annotations

import os
from typing import TYPE_CHECKING

from roomloop.plant.protocol import SCHEDULE, ProtocolResult

if TYPE_CHECKING:
    from matplotlib.figure import Figure


class PlotUnavailable(Exception):
    """matplotlib is not installed (the optional ``plot`` extra)."""


def agg_figure(figsize: tuple[float, float]) -> Figure:
    """A figure on matplotlib's non-interactive Agg canvas, outside pyplot (nothing to close,
    no process-wide backend switch). Raises :class:`PlotUnavailable` without matplotlib."""
    try:
        from matplotlib.backends.backend_agg import FigureCanvasAgg
        from matplotlib.figure import Figure
    except ImportError as exc:
        raise PlotUnavailable(str(exc)) from None
    fig = Figure(figsize=figsize)
    FigureCanvasAgg(fig)
    return fig


def write_plot(result: ProtocolResult, path: str | os.PathLike[str]) -> None:
    """The run's :func:`protocol_figure` as a PNG. Raises :class:`PlotUnavailable` without
    matplotlib, ``OSError`` if unwritable."""
    protocol_figure(result).savefig(os.fspath(path), dpi=100)


def protocol_figure(result: ProtocolResult) -> Figure:
    """Temperature and set point, relay, anticipator and droop terms, outdoor temperature and
    load (on a second y axis of the outdoor panel), against hours since the start; phases
    shaded; figures in the title.

    An :func:`agg_figure`. Raises :class:`PlotUnavailable` without matplotlib."""
    fig = agg_figure((12, 9.5))
    trace = result.trace
    hours = [t / 3600.0 for t in trace.time_s]
    ax_t, ax_r, ax_a, ax_o = fig.subplots(
        4, 1, sharex=True, gridspec_kw={"height_ratios": [3, 1, 1.5, 1.5]}
    )
    for segment in SCHEDULE:
        if segment.scored:
            for ax in (ax_t, ax_r, ax_a, ax_o):
                ax.axvspan(
                    segment.start_s / 3600, segment.end_s / 3600, color="tab:green", alpha=0.08
                )
            ax_t.text(
                (segment.start_s + segment.end_s) / 7200,
                1.01,
                segment.name,
                transform=ax_t.get_xaxis_transform(),
                ha="center",
                va="bottom",
                fontsize=8,
            )
    ax_t.plot(hours, trace.sensor_c, color="tab:gray", lw=0.6, label="sensor reading")
    ax_t.plot(hours, trace.room_c, color="tab:red", lw=1.0, label="room air (true)")
    ax_t.plot(hours, trace.setpoint_c, color="black", lw=1.0, ls="--", label="set point")
    ax_t.set_ylabel("C")
    ax_t.legend(loc="lower left", fontsize=8)
    ax_r.fill_between(
        hours, [1.0 if d else 0.0 for d in trace.demand], step="post", color="tab:orange"
    )
    ax_r.set_ylabel("relay")
    ax_r.set_yticks([0, 1], ["off", "on"])
    ax_a.plot(hours, trace.anticipator_k, color="tab:blue", lw=0.8, label="anticipator a")
    ax_a.plot(hours, trace.droop_k, color="tab:purple", lw=1.0, label="droop term b")
    ax_a.set_ylabel("K")
    ax_a.legend(loc="upper left", fontsize=8)
    ax_o.plot(hours, trace.outdoor_c, color="tab:cyan", lw=1.0, label="outdoor temperature")
    ax_o.set_ylabel("outdoor C")
    ax_o.set_xlabel("hours")
    ax_load = ax_o.twinx()
    ax_load.plot(
        hours, [100.0 * x for x in trace.load], color="tab:brown", lw=1.0, ls=":",
        label="load (% of cooler)" if result.mode == "cool" else "load (% of heater)",
    )
    ax_load.set_ylabel("load %")
    ax_load.set_ylim(0, 100)
    handles = ax_o.get_legend_handles_labels()[0] + ax_load.get_legend_handles_labels()[0]
    ax_o.legend(handles=handles, loc="upper left", fontsize=8)
    o = result.overall
    fig.suptitle(
        f"{result.controller} on {result.plant} (seed {result.seed}): control accuracy "
        f"{o.control_accuracy_k:.2f} K, recovery overshoot {o.overshoot_k:+.2f} K, "
        f"{o.cycles_per_hour:.1f} cycles/h, {o.energy_kwh:.1f} kWh",
        fontsize=10,
    )
    fig.tight_layout()
    return fig
