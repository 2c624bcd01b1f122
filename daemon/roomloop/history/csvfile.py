"""A zone's history as CSV: written by ``roomloop history --csv``, read by ``--history FILE``.

Columns (DESIGN.md glossary, "history"): ``time,temperature,relay`` required,
``setpoint``, ``outdoor`` and ``fail_safe`` optional, in any order. ``time`` is
ISO 8601 (with an offset, or without one in the site's time zone) or POSIX
seconds. A local time without an offset is read as the site's zone has it; across a
clock change (:func:`parse_time`), the hour the clocks go back over occurs twice and is
read as its first pass unless that would go back from the row before (then as its
second), and a time in the hour the clocks go forward over does not exist and is refused.
Temperatures are in the site's units (``C`` or ``F``), finite and within
:data:`~roomloop.core.state.PLAUSIBLE_C` (-100 to 200 C, -148 to 392 F: the bounds the
service holds every saved temperature to: nothing a room, pipe or the outdoor air reads
is beyond them, so a value outside is a broken file, not a reading); ``relay`` and
``fail_safe`` are ``0`` or ``1``. An empty ``temperature`` is a tick without a
reliable temperature. Rows must go forward in time: each row's time, as read, later
than the row before (the export writes times to the millisecond, so ticks less than a
second apart keep their order).

Every mistake is one line ``FILE:LINE: message`` (:class:`CsvError`, exit 2).
"""

from __future__ import annotations

import csv
import datetime as dt
import math
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import TextIO
from zoneinfo import ZoneInfo

from roomloop.core.state import PLAUSIBLE_C
from roomloop.errors import ConfigError, ConfigProblem
from roomloop.history.store import ZoneHistory
from roomloop.units import from_celsius, to_celsius

REQUIRED = ("time", "temperature", "relay")
OPTIONAL = ("setpoint", "outdoor", "fail_safe")
EXPORTED = ("time", "temperature", "relay", "setpoint", "fail_safe")


class CsvError(ConfigError):
    """A history CSV the tools cannot read: every problem as ``FILE:LINE: message``."""


def _to_site(value_c: float, units: str) -> float:
    return from_celsius(value_c, units)


def _from_site(value: float, units: str) -> float:
    return to_celsius(value, units)


def write_csv(history: ZoneHistory, out: TextIO, *, tz: ZoneInfo, units: str) -> int:
    """Write ``history`` as CSV (times in ``tz`` with their offset, to the millisecond); rows
    written. An ``outdoor`` column follows when the history has the outdoor temperature.

    A command wakes a zone for an extra step, so two ticks may fall in one second: times are
    written to the millisecond (what the history file keeps, :func:`~roomloop.history.store.
    pack_chunk`) and ticks of one millisecond once, as the later (the state that then held),
    so every row's time is later than the one before and the file reads back.
    """
    writer = csv.writer(out, lineterminator="\n")
    outdoor = history.outdoor
    writer.writerow(EXPORTED + (("outdoor",) if outdoor is not None else ()))
    stamps = [round(at * 1000.0) for at in history.time]
    rows = 0
    for k, ms in enumerate(stamps):
        if k + 1 < len(stamps) and stamps[k + 1] == ms:
            continue  # the next tick has the same time: it is written instead
        when = dt.datetime.fromtimestamp(ms / 1000.0, tz).isoformat(timespec="milliseconds")
        temp = history.temperature[k]
        setpoint = history.setpoint[k]
        row: tuple[object, ...] = (
            when,
            "" if temp is None else f"{_to_site(temp, units):.3f}",
            1 if history.relay[k] else 0,
            "" if setpoint is None else f"{_to_site(setpoint, units):.3f}",
            1 if history.fail_safe[k] else 0,
        )
        if outdoor is not None:
            value = outdoor[k]
            row += ("" if value is None else f"{_to_site(value, units):.3f}",)
        writer.writerow(row)
        rows += 1
    return rows


class LocalTimeGap(ValueError):
    """A local time the clocks went forward over: it never happened in the zone."""


def parse_time(text: str, tz: ZoneInfo, *, after: float | None = None) -> float:
    """ISO 8601 (with an offset, or in ``tz``) or POSIX seconds, to POSIX seconds.

    A local time (no offset) is read in ``tz``. When the clocks go back, the repeated
    local times stand for two instants: the first (``fold=0``) is taken, unless it is not
    later than ``after`` (the row before) while the second (``fold=1``) is, so rows that go
    on through the repeated hour read forward. When the clocks go forward, the skipped
    local times never happened: :class:`LocalTimeGap` (a ValueError), rather than a guess
    at which instant was meant.
    """
    text = text.strip()
    try:
        value = float(text)
    except ValueError:
        pass
    else:
        if not math.isfinite(value):
            raise ValueError(f"{text!r} is not a time")
        return value
    try:
        when = dt.datetime.fromisoformat(text)
    except ValueError:
        raise ValueError(
            f"{text!r} is not a time (ISO 8601 such as 2026-01-05T07:00:00+01:00, "
            "or POSIX seconds)"
        ) from None
    if when.tzinfo is not None:
        return when.timestamp()
    return _local_time(when, tz, text, after)


def _local_time(naive: dt.datetime, tz: ZoneInfo, text: str, after: float | None) -> float:
    """The POSIX time of a local time in ``tz`` (see :func:`parse_time`)."""
    first = naive.replace(tzinfo=tz, fold=0)
    second = naive.replace(tzinfo=tz, fold=1)
    # exact arithmetic (no float): a local time the zone never shows does not come back
    back = first.astimezone(dt.UTC).astimezone(tz).replace(tzinfo=None)
    if back != naive:
        raise LocalTimeGap(
            f"{text!r} does not exist in {tz.key} (the clocks go forward over it): "
            "give the time with its offset"
        )
    early, late = first.timestamp(), second.timestamp()
    if after is not None and early <= after < late:
        return late
    return early


def _flag(text: str, column: str) -> bool:
    value = text.strip()
    if value in ("0", "1"):
        return value == "1"
    raise ValueError(f"{column} must be 0 or 1, not {text!r}")


def _number(text: str, column: str, *, empty_ok: bool) -> float | None:
    value = text.strip()
    if not value:
        if empty_ok:
            return None
        raise ValueError(f"{column} is empty")
    try:
        number = float(value)
    except ValueError:
        raise ValueError(f"{column} {text!r} is not a number") from None
    if not math.isfinite(number):
        raise ValueError(f"{column} {text!r} is not a finite number")
    return number


def read_csv(path: str | Path, *, zone: str, tz: ZoneInfo, units: str) -> ZoneHistory:
    """Read a history CSV into a :class:`ZoneHistory` (Celsius inside); :class:`CsvError`."""
    name = str(path)
    try:
        # utf-8-sig: a byte-order mark (spreadsheets write one) is not part of the header
        with open(path, newline="", encoding="utf-8-sig") as handle:
            return _read(handle, name, zone=zone, tz=tz, units=units)
    except OSError as exc:
        raise CsvError(
            [ConfigProblem(name, None, "", f"cannot read: {exc.strerror or exc}")]
        ) from None
    except UnicodeDecodeError:
        raise CsvError(
            [ConfigProblem(name, None, "", "not a text file (UTF-8 CSV expected)")]
        ) from None


def _problem(file: str, line: int, message: str) -> ConfigProblem:
    return ConfigProblem(file, line, "", message)


def _read(handle: Iterable[str], file: str, *, zone: str, tz: ZoneInfo, units: str) -> ZoneHistory:
    reader = csv.reader(handle)
    index = _header(reader, file)
    out = ZoneHistory(zone)
    if "outdoor" in index:
        out.outdoor = []
    problems: list[ConfigProblem] = []
    last: float | None = None
    try:
        for row in reader:
            line = reader.line_num
            if not row or all(not cell.strip() for cell in row):
                continue
            if len(row) != len(index):
                problems.append(
                    _problem(file, line, f"{len(row)} fields, the header has {len(index)}")
                )
                continue
            try:
                parsed = _parse_row(row, index, tz, last, units)
            except ValueError as exc:
                problems.append(_problem(file, line, str(exc)))
                continue
            if last is not None and parsed.time <= last:
                problems.append(
                    _problem(file, line, "time does not go forward (rows must be in time order)")
                )
                continue
            last = parsed.time
            _append(out, parsed, units)
            if len(problems) >= 20:
                break
    except csv.Error as exc:
        problems.append(_problem(file, reader.line_num, str(exc)))
    if problems:
        raise CsvError(problems)
    return out


def _header(reader: Iterator[list[str]], file: str) -> dict[str, int]:
    """The header's columns by name and index, or :class:`CsvError` naming what is wrong."""
    try:
        header = next(reader)
    except StopIteration:
        raise CsvError(
            [_problem(file, 1, "empty file: the header time,temperature,relay is missing")]
        ) from None
    except csv.Error as exc:
        raise CsvError([_problem(file, 1, str(exc))]) from None
    columns = [h.strip().lower() for h in header]
    problems: list[ConfigProblem] = []
    missing = [c for c in REQUIRED if c not in columns]
    unknown = [c for c in columns if c not in REQUIRED + OPTIONAL]
    if missing:
        problems.append(
            _problem(file, 1, f"missing column(s) {', '.join(missing)} (header: "
                     "time,temperature,relay[,setpoint][,outdoor][,fail_safe])")
        )
    if unknown:
        problems.append(
            _problem(file, 1, f"unknown column(s) {', '.join(unknown)} (known: "
                     + ", ".join(REQUIRED + OPTIONAL) + ")")
        )
    if len(set(columns)) != len(columns):
        problems.append(_problem(file, 1, "a column is named twice"))
    if problems:
        raise CsvError(problems)
    return {c: columns.index(c) for c in columns}


@dataclass(frozen=True, slots=True)
class _Row:
    """One data row, in the file's units; None where a cell is empty."""

    time: float
    temperature: float | None
    relay: bool
    setpoint: float | None
    outdoor: float | None
    fail_safe: bool


def _parse_row(
    row: list[str], index: dict[str, int], tz: ZoneInfo, after: float | None, units: str
) -> _Row:
    """The row's values (``after``: the time of the row before); ValueError with the
    message for the row's line."""
    low, high = (_to_site(bound, units) for bound in PLAUSIBLE_C)

    def number(column: str) -> float | None:
        if column not in index:
            return None
        value = _number(row[index[column]], column, empty_ok=True)
        if value is not None and not low <= value <= high:
            raise ValueError(
                f"{column} {row[index[column]].strip()!r} is outside {low:.0f} to {high:.0f} "
                f"{units} (no room, pipe or outdoor air reads beyond that)"
            )
        return value

    at = parse_time(row[index["time"]], tz, after=after)
    temperature = number("temperature")
    relay = _flag(row[index["relay"]], "relay")
    setpoint = number("setpoint")
    outdoor = number("outdoor")
    fail_safe = _flag(row[index["fail_safe"]], "fail_safe") if "fail_safe" in index else False
    return _Row(at, temperature, relay, setpoint, outdoor, fail_safe)


def _append(out: ZoneHistory, row: _Row, units: str) -> None:
    """Add one row to the history, in Celsius (a CSV carries no level, mode or terms)."""

    def celsius(value: float | None) -> float | None:
        return None if value is None else _from_site(value, units)

    out.time.append(row.time)
    out.temperature.append(celsius(row.temperature))
    out.relay.append(row.relay)
    out.setpoint.append(celsius(row.setpoint))
    if out.outdoor is not None:
        out.outdoor.append(celsius(row.outdoor))
    out.fail_safe.append(row.fail_safe)
    out.level.append("")
    out.mode.append("")
    out.anticipator_k.append(0.0)
    out.droop_k.append(0.0)
    out.reason.append("")
