"""A history CSV in local time (no offsets) across the clock changes of Europe/London.

In 2026 the clocks go forward on Sunday 29 March (01:00 GMT becomes 02:00 BST: local
01:00-01:59 never happens) and back on Sunday 25 October (02:00 BST becomes 01:00 GMT:
local 01:00-01:59 happens twice). The reference for every instant is zoneinfo's own
conversion: the rows are written from POSIX times by ``datetime.fromtimestamp(t, zone)``
and must read back as those times.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from history_site import SITE, write_site

from roomloop.cli import main
from roomloop.history.csvfile import read_csv

LONDON = ZoneInfo("Europe/London")
STEP_S = 300


def _site(tmp_path: Path) -> Path:
    return write_site(tmp_path, template=SITE.replace("Europe/Vienna", "Europe/London"))


def _local_day(day: dt.date) -> list[float]:
    """The POSIX times of ``day`` in London every 5 min, from zoneinfo's midnights."""
    start, end = (
        int(dt.datetime.combine(d, dt.time(0), tzinfo=LONDON).timestamp())
        for d in (day, day + dt.timedelta(days=1))
    )
    return [float(t) for t in range(start, end, STEP_S)]


def _write(path: Path, times: list[float]) -> list[str]:
    """A CSV of ``times`` as local times without an offset; the time texts written."""
    texts = [dt.datetime.fromtimestamp(t, LONDON).replace(tzinfo=None).isoformat() for t in times]
    rows = ["time,temperature,relay,setpoint"]
    for k, text in enumerate(texts):
        rows.append(f"{text},{20.0 + 0.1 * (k % 6):.1f},{(k // 6) % 2},20.0")
    path.write_text("\n".join(rows) + "\n")
    return texts


def _report_hours(capsys: pytest.CaptureFixture[str], day: dt.date) -> str:
    text = capsys.readouterr().out
    row = next(line for line in text.splitlines() if line.startswith(day.isoformat()))
    return row.split()[1]


def test_the_repeated_hour_in_october_reads_forward(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """The whole of 25 October: 25 h, the hour from 01:00 twice. Each repeated local time
    is read as its first pass while the rows are in the first pass, and as its second once
    the first would go back (it was refused as "time does not go forward")."""
    day = dt.date(2026, 10, 25)
    times = _local_day(day)
    assert len(times) == 25 * 3600 // STEP_S
    path = tmp_path / "dst.csv"
    texts = _write(path, times)
    assert texts.count("2026-10-25T01:30:00") == 2  # the case is in the file
    back = read_csv(path, zone="den", tz=LONDON, units="C")
    assert back.time == times
    # the two passes of 01:30, as zoneinfo has them: BST (fold 0) then GMT (fold 1)
    first, second = (k for k, text in enumerate(texts) if text == "2026-10-25T01:30:00")
    assert back.time[first] == dt.datetime(2026, 10, 25, 1, 30, tzinfo=LONDON).timestamp()
    assert back.time[second] == dt.datetime(2026, 10, 25, 1, 30, fold=1, tzinfo=LONDON).timestamp()
    assert back.time[second] - back.time[first] == 3600.0
    site = _site(tmp_path)
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(path)]) == 0
    assert _report_hours(capsys, day) == "25.0"


def test_the_skipped_hour_in_march_is_refused_and_the_day_reads(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """29 March has 23 h and no local 01:00-01:59: written from zoneinfo, the day reads
    back at its instants; a row at 01:30 (a time that never happened there) is one
    FILE:LINE line and exit 2, not a guess at which instant was meant."""
    day = dt.date(2026, 3, 29)
    times = _local_day(day)
    assert len(times) == 23 * 3600 // STEP_S
    path = tmp_path / "spring.csv"
    texts = _write(path, times)
    assert "2026-03-29T00:55:00" in texts and "2026-03-29T02:00:00" in texts
    assert not any(text.startswith("2026-03-29T01:") for text in texts)
    back = read_csv(path, zone="den", tz=LONDON, units="C")
    assert back.time == times
    site = _site(tmp_path)
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(path)]) == 0
    assert _report_hours(capsys, day) == "23.0"

    gap = tmp_path / "gap.csv"
    gap.write_text(
        "time,temperature,relay\n"
        "2026-03-29T00:55:00,20.0,0\n"
        "2026-03-29T01:30:00,20.0,0\n"
        "2026-03-29T02:05:00,20.0,0\n"
    )
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(gap)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err == [
        f"{gap}:3: '2026-03-29T01:30:00' does not exist in Europe/London (the clocks go "
        "forward over it): give the time with its offset"
    ]

    # the same time as --since is refused in the same words (it was read as 02:30 BST)
    code = main(
        ["report", "-c", str(site), "--zone", "den", "--history", str(path),
         "--since", "2026-03-29T01:30"]
    )
    assert code == 2
    assert capsys.readouterr().err.splitlines() == [
        "roomloop report: --since '2026-03-29T01:30' does not exist in Europe/London (the "
        "clocks go forward over it): give the time with its offset"
    ]
