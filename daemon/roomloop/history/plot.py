"""A picture of recorded zone histories (matplotlib, imported only here and only when asked for).

Per zone: temperature and set point (fail-safe shaded red, point faults shaded
yellow), the relay, and the anticipator and droop terms, against local time.
"""

from __future__ import annotations

import datetime as dt
import os
from collections.abc import Sequence
from zoneinfo import ZoneInfo

from roomloop.history.store import ZoneHistory
from roomloop.units import delta_from_kelvin, from_celsius


class PlotUnavailable(Exception):
    """matplotlib is not installed (the optional ``plot`` extra)."""


def _spans(
    times: Sequence[dt.datetime], flags: Sequence[bool]
) -> list[tuple[dt.datetime, dt.datetime]]:
    out = []
    start = None
    for k, flag in enumerate(flags):
        if flag and start is None:
            start = k
        if not flag and start is not None:
            out.append((times[start], times[k]))
            start = None
    if start is not None:
        out.append((times[start], times[-1]))
    return out


def write_history_plot(
    histories: Sequence[tuple[str, ZoneHistory]],
    path: str | os.PathLike[str],
    *,
    tz: ZoneInfo,
    units: str,
) -> None:
    """One group of three panels per zone. :class:`PlotUnavailable` without matplotlib."""
    try:
        import matplotlib

        matplotlib.use("Agg")
        import matplotlib.dates as mdates
        import matplotlib.pyplot as plt
    except ImportError as exc:
        raise PlotUnavailable(str(exc)) from None

    def site_t(value: float | None) -> float:
        if value is None:
            return float("nan")
        return from_celsius(value, units)

    delta = delta_from_kelvin(1.0, units)
    rows = len(histories)
    fig, axes = plt.subplots(
        3 * rows,
        1,
        figsize=(12, 6.5 * rows),
        sharex=True,
        gridspec_kw={"height_ratios": [3, 1, 1.5] * rows},
        squeeze=False,
    )
    for i, (title, h) in enumerate(histories):
        ax_t, ax_r, ax_a = axes[3 * i][0], axes[3 * i + 1][0], axes[3 * i + 2][0]
        times = [dt.datetime.fromtimestamp(t, tz) for t in h.time]
        faults = [False] * len(times)
        for column in h.points.values():
            for k, (_, verdict) in enumerate(column):
                if verdict not in ("ok", "absent"):
                    faults[k] = True
        for a, b in _spans(times, faults):
            ax_t.axvspan(a, b, color="gold", alpha=0.3, lw=0)
        for a, b in _spans(times, h.fail_safe):
            for ax in (ax_t, ax_r, ax_a):
                ax.axvspan(a, b, color="tab:red", alpha=0.15, lw=0)
        ax_t.plot(
            times, [site_t(v) for v in h.temperature], color="tab:red", lw=0.8, label="temperature"
        )
        ax_t.plot(
            times,
            [site_t(v) for v in h.setpoint],
            color="black",
            lw=1.0,
            ls="--",
            label="set point",
        )
        if h.outdoor is not None:
            ax_o = ax_t.twinx()
            ax_o.plot(times, [site_t(v) for v in h.outdoor], color="tab:cyan", lw=0.8)
            ax_o.set_ylabel(f"outdoor {units}", color="tab:cyan")
        ax_t.set_ylabel(units)
        ax_t.set_title(f"{title}  (red: fail-safe, yellow: a point not ok)", fontsize=10)
        ax_t.legend(loc="lower left", fontsize=8)
        ax_r.fill_between(
            times, [1.0 if r else 0.0 for r in h.relay], step="post", color="tab:orange", lw=0
        )
        ax_r.set_ylabel("relay")
        ax_r.set_yticks([0, 1], ["off", "on"])
        ax_a.plot(
            times,
            [a * delta for a in h.anticipator_k],
            color="tab:blue",
            lw=0.8,
            label="anticipator a",
        )
        ax_a.plot(
            times, [b * delta for b in h.droop_k], color="tab:purple", lw=1.0, label="droop term b"
        )
        ax_a.set_ylabel("F" if units == "F" else "K")
        ax_a.legend(loc="upper left", fontsize=8)
    axes[-1][0].xaxis.set_major_formatter(
        mdates.DateFormatter("%m-%d %H:%M", tz=tz)  # type: ignore[no-untyped-call]
    )
    fig.autofmt_xdate()
    fig.tight_layout()
    try:
        fig.savefig(os.fspath(path), dpi=90)
    finally:
        plt.close(fig)
