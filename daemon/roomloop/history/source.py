"""Where ``history``, ``report`` and ``tune`` get a zone's history: the site's file or a CSV.

``--since`` / ``--until`` take a span back from the end of the history (``24h``,
``7d``, ``90m``), a date or date-time (ISO 8601, in the site's time zone unless it
has an offset) or POSIX seconds. A span counts back from the newest tick, so a
history recorded on the demo's fast clock reads the same way as a real one.
"""

from __future__ import annotations

import os
import re
import sqlite3
from dataclasses import dataclass
from pathlib import Path
from zoneinfo import ZoneInfo

from roomloop.config.models import Site
from roomloop.errors import RoomloopError
from roomloop.history.csvfile import LocalTimeGap, parse_time, read_csv
from roomloop.history.store import HistoryFile, ZoneHistory, history_path, is_damaged

_SPAN = re.compile(r"^\s*(\d+(?:\.\d+)?)\s*([mhdw])\s*$")
_UNIT_S = {"m": 60.0, "h": 3600.0, "d": 86400.0, "w": 604800.0}


class HistoryUnavailable(RoomloopError):
    """No history to read: no file, no such zone in it, or nothing in the window."""


class HistoryUnreadable(HistoryUnavailable):
    """The site's history file is there but cannot be read (damaged, or cannot be opened):
    no zone of it can be read, so a command over all zones stops at the first."""


def _unreadable(path: Path, exc: sqlite3.DatabaseError) -> HistoryUnreadable:
    """One line naming the file, what is wrong and what to do."""
    if is_damaged(exc):
        return HistoryUnreadable(
            f"the history file {path} is damaged ({exc}) and cannot be read: the service "
            "(roomloop run) moves a damaged history file aside, to "
            f"{path.name}.damaged-<time>, and starts a new one when it finds the damage (at "
            "its start, or when a write fails); otherwise stop the service, move the file "
            "aside yourself and start it again"
        )
    return HistoryUnreadable(
        f"cannot read the history file {path}: {exc} (is it readable by this user, "
        "and not locked by another program?)"
    )


@dataclass(frozen=True, slots=True)
class Bound:
    """A window bound: an absolute time, or a span back from the newest tick."""

    at: float | None = None
    back_s: float | None = None

    def resolve(self, newest: float) -> float | None:
        if self.back_s is not None:
            return newest - self.back_s
        return self.at


def parse_bound(text: str | None, tz: ZoneInfo, option: str) -> Bound:
    """``24h``/``7d``/``90m``/``2w``, an ISO date or date-time, or POSIX seconds."""
    if text is None:
        return Bound()
    match = _SPAN.match(text)
    if match:
        return Bound(back_s=float(match.group(1)) * _UNIT_S[match.group(2)])
    try:
        return Bound(at=parse_time(text, tz))
    except LocalTimeGap as exc:
        raise ValueError(f"{option} {exc}") from None
    except ValueError:
        raise ValueError(
            f"{option} {text!r}: give a span back from the end of the history (24h, 7d, 90m), "
            "a date or date-time (2026-01-05, 2026-01-05T07:00), or POSIX seconds"
        ) from None


def site_history_path(site: Site, state_dir: str | None) -> Path:
    """The history file of ``site``: under ``state_dir`` if given, else $STATE_DIRECTORY,
    else the site's own ``state_dir`` (the same order ``run`` uses)."""
    if state_dir:
        directory = state_dir
    elif os.environ.get("STATE_DIRECTORY"):
        directory = os.environ["STATE_DIRECTORY"].split(":")[0]
    else:
        directory = site.site.state_dir
    return history_path(directory, site.name)


def load_history(
    site: Site,
    zone: str,
    *,
    state_dir: str | None = None,
    csv_path: str | None = None,
    since: Bound = Bound(),
    until: Bound = Bound(),
) -> ZoneHistory:
    """The zone's history in the window, from ``csv_path`` or from the site's history file.

    From the file, the site's outdoor point (recorded with each zone's ticks) becomes the
    history's outdoor temperature, which ``tune`` fits with.

    Raises :class:`HistoryUnavailable` (one clear line) when there is nothing to read
    (:class:`HistoryUnreadable` when the file is damaged or cannot be opened), and
    :class:`~roomloop.history.csvfile.CsvError` for a bad CSV.
    """
    tz = ZoneInfo(site.site.timezone)
    if csv_path is not None:
        full = read_csv(csv_path, zone=zone, tz=tz, units=site.site.units)
        where = csv_path
    else:
        path = site_history_path(site, state_dir)
        if not path.exists():
            raise HistoryUnavailable(
                f"no history file {path} (the service keeps one while it runs with "
                "history enabled; or give --state-dir, or --history FILE.csv)"
            )
        full = _read_file(path, zone)
        outdoor = site.site.outdoor_point
        if outdoor is not None and outdoor in full.points and full.outdoor is None:
            full.outdoor = [v if verdict == "ok" else None for v, verdict in full.points[outdoor]]
        where = str(path)
    if not full.time:
        raise HistoryUnavailable(f"{where}: no ticks of zone {zone!r}")
    newest = full.time[-1]
    lo = since.resolve(newest)
    hi = until.resolve(newest)
    if lo is None and hi is None:
        return full
    out = window(full, lo, hi)
    if not out.time:
        raise HistoryUnavailable(f"{where}: no ticks of zone {zone!r} in the window asked for")
    return out


def _read_file(path: Path, zone: str) -> ZoneHistory:
    """The zone's ticks from the history file; :class:`HistoryUnreadable` for a file that
    cannot be read, :class:`HistoryUnavailable` for a zone it does not hold."""
    try:
        db = HistoryFile(path)
        try:
            zones = db.zones()
            if zone not in zones:
                raise HistoryUnavailable(
                    f"no history of zone {zone!r} in {path} (zones there: "
                    + (", ".join(zones) or "none")
                    + ")"
                )
            return db.read(zone)
        finally:
            db.close()
    except sqlite3.DatabaseError as exc:
        raise _unreadable(path, exc) from None


def window(history: ZoneHistory, lo: float | None, hi: float | None) -> ZoneHistory:
    """The ticks with ``lo <= time < hi`` (either bound may be None)."""
    keep = [
        k
        for k, at in enumerate(history.time)
        if (lo is None or at >= lo) and (hi is None or at < hi)
    ]
    out = ZoneHistory(history.zone)
    for name in (
        "time", "temperature", "setpoint", "level", "mode", "relay", "anticipator_k",
        "droop_k", "fail_safe", "reason",
    ):
        column = getattr(history, name)
        setattr(out, name, [column[k] for k in keep])
    out.points = {name: [col[k] for k in keep] for name, col in history.points.items()}
    if history.outdoor is not None:
        out.outdoor = [history.outdoor[k] for k in keep]
    return out
