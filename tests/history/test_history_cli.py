"""``roomloop history`` (CSV export), the CSV import, and ``roomloop report`` on real files."""

from __future__ import annotations

import dataclasses
import re
import subprocess
import sys
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest
from history_site import SITE, T0, write_site

from roomloop.cli import main
from roomloop.history.csvfile import read_csv
from roomloop.history.store import HistoryFile, Tick, history_path


def _site(tmp_path: Path, units: str = "C") -> Path:
    return write_site(tmp_path, units)


def _square_day() -> list[Tick]:
    """One local day at a 10 s tick: relay on 10 min, off 20 min; temperature 19.8 C while
    on and 20.4 C while off; set point 20 C; the point faulty (stale) for 30 min, with the
    zone in fail-safe for the last 10 of them."""
    ticks = []
    for k in range(8640):
        at = T0 + 10 * k
        on = (k % 180) < 60
        stale = 3600 <= k < 3780
        ticks.append(
            Tick(
                at=at,
                temperature=19.8 if on else 20.4,
                setpoint=20.0,
                level="comfort",
                mode="auto",
                relay=on,
                anticipator_k=0.3,
                droop_k=0.1,
                fail_safe=3720 <= k < 3780,
                reason="cut-in" if on else "cut-out",
                points=(("t1", 20.0, "stale" if stale else "ok"),),
            )
        )
    return ticks


def _store(tmp_path: Path, ticks: list[Tick]) -> None:
    (tmp_path / "state").mkdir(exist_ok=True)
    db = HistoryFile(history_path(tmp_path / "state", "test-house"))
    for i in range(0, len(ticks), 360):
        db.write({"den": ticks[i : i + 360]})
    db.close()


def test_export_reads_back_through_the_import(tmp_path: Path) -> None:
    site = _site(tmp_path)
    ticks = _square_day()
    _store(tmp_path, ticks)
    out = tmp_path / "den.csv"
    assert main(["history", "-c", str(site), "--zone", "den", "--csv", str(out)]) == 0
    header = out.read_text().splitlines()[:2]
    assert header[0] == "time,temperature,relay,setpoint,fail_safe"
    assert header[1].startswith("2026-01-02T00:00:00.000+01:00,19.800,1,20.000,0")
    back = read_csv(out, zone="den", tz=ZoneInfo("Europe/Vienna"), units="C")
    assert back.time == [t.at for t in ticks]
    assert back.relay == [t.relay for t in ticks]
    assert back.fail_safe == [t.fail_safe for t in ticks]
    assert max(abs(a - b.temperature) for a, b in zip(back.temperature, ticks, strict=True)) < 1e-3  # type: ignore[operator]


def test_export_window_and_fahrenheit(tmp_path: Path) -> None:
    site = _site(tmp_path, units="F")
    _store(tmp_path, _square_day())
    out = tmp_path / "den.csv"
    code = main(
        ["history", "-c", str(site), "--zone", "den", "--since", "2026-01-02T12:00",
         "--until", "2026-01-02T12:01", "--csv", str(out)]
    )
    assert code == 0
    rows = out.read_text().splitlines()
    assert len(rows) == 1 + 6  # 12:00:00 ... 12:00:50
    assert rows[1].startswith("2026-01-02T12:00:00.000+01:00,")
    temp = float(rows[1].split(",")[1])
    assert temp in (pytest.approx(19.8 * 9 / 5 + 32), pytest.approx(20.4 * 9 / 5 + 32))


def test_report_figures_of_a_day_known_by_construction(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """The day of :func:`_square_day`: CSD = mean(T) - S, with T at 19.8 one third of the
    time and 20.4 two thirds: 20.2 - 20 = +0.20 K; CV = (20.4 - 19.8) / 2 = 0.30 K; CA =
    0.50 K (EN 15500's definition, recalled from memory in REFERENCES.md); 2 cycles per
    hour, on 33 %, runs of 600 s and 1200 s, energy 1.5 kW x 8 h = 12 kWh; 10 min in
    fail-safe, 30 min of point faults. Worked by hand from the construction."""
    site = _site(tmp_path)
    _store(tmp_path, _square_day())
    assert main(["report", "-c", str(site)]) == 0
    text = capsys.readouterr().out
    row = next(line for line in text.splitlines() if line.startswith("2026-01-02"))
    fields = row.split()
    assert fields[1:11] == [
        "24.0", "0.50", "+0.20", "0.30", "2.0", "33", "600", "1200", "12.00", "10",
    ], row
    assert "t1 30" in row
    # the shortest runs are seconds, and the header says so above each (right-aligned) value
    header = next(line for line in text.splitlines() if line.startswith("day "))
    ends = [m.end() for m in re.finditer(r"\S+", row)]
    for label, field in (("on %", 6), ("min on s", 7), ("min off s", 8), ("kWh", 9)):
        assert header.index(label) + len(label) == ends[field], (header, row)
    assert "no heater_w" not in text  # the zone has one
    # without heater_w the energy is '-', and a line says why
    site.write_text(site.read_text().replace(", heater_w: 1500", ""))
    assert main(["report", "-c", str(site)]) == 0
    text = capsys.readouterr().out
    row = next(line for line in text.splitlines() if line.startswith("2026-01-02"))
    assert row.split()[9] == "-", row
    assert "kWh: - where the zone has no heater_w" in text


def test_bad_csv_rows_are_named_by_file_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site = _site(tmp_path)
    bad = tmp_path / "bad.csv"
    bad.write_text(
        "time,temperature,relay\n"
        "2026-01-02T00:00:00,20.0,1\n"
        "2026-01-02T00:00:10,warm,0\n"
        "2026-01-02T00:00:20,20.1,2\n"
        "2026-01-01T23:59:00,20.1,0\n"
        "yesterday,20.1,0\n"
    )
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(bad)]) == 2
    err = capsys.readouterr().err.splitlines()
    assert err[0].startswith(f"{bad}:3: temperature 'warm' is not a number")
    assert err[1].startswith(f"{bad}:4: relay must be 0 or 1")
    assert err[2].startswith(f"{bad}:5: time does not go forward")
    assert err[3].startswith(f"{bad}:6: 'yesterday' is not a time")
    missing = tmp_path / "missing.csv"
    missing.write_text("when,temperature\n1,2\n")
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(missing)]) == 2
    assert f"{missing}:1: missing column(s) time, relay" in capsys.readouterr().err


def test_csv_times_in_posix_seconds_and_with_offsets(tmp_path: Path) -> None:
    path = tmp_path / "h.csv"
    path.write_text(
        "relay,time,temperature,outdoor\n"
        f"0,{T0:.0f},68.0,32\n"
        "1,2026-01-01T23:00:10Z,,\n"
        "1,2026-01-02T00:00:20,68.18,41\n"
    )
    h = read_csv(path, zone="den", tz=ZoneInfo("Europe/Vienna"), units="F")
    assert h.time == [T0, T0 + 10, T0 + 20]
    assert h.temperature[0] == pytest.approx(20.0)
    assert h.temperature[1] is None
    assert h.outdoor == [pytest.approx(0.0), None, pytest.approx(5.0)]
    assert h.setpoint == [None, None, None]


def test_report_plot_and_its_refusal_without_matplotlib(tmp_path: Path) -> None:
    site = _site(tmp_path)
    _store(tmp_path, _square_day()[:2000])
    png = tmp_path / "r.png"
    assert main(["report", "-c", str(site), "--plot", str(png)]) == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    hidden = (
        "import sys; sys.modules['matplotlib'] = None\n"
        "from roomloop.cli import main\n"
        f"sys.exit(main(['report', '-c', {str(site)!r}, '--plot', {str(png)!r}]))\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", hidden], capture_output=True, text=True, timeout=60, check=False
    )
    assert done.returncode == 2
    assert "--plot needs matplotlib" in done.stderr
    assert "Traceback" not in done.stderr


def test_no_history_is_one_clear_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    site = _site(tmp_path)
    assert main(["report", "-c", str(site), "--zone", "den"]) == 1
    assert "no history file" in capsys.readouterr().err
    assert main(["history", "-c", str(site), "--zone", "attic", "--csv", "-"]) == 2
    assert "no zone 'attic'" in capsys.readouterr().err


SITE_OUTDOOR = SITE.replace(
    "units: {units}, state_dir: {state}}}",
    "units: {units}, state_dir: {state}, outdoor_point: outside}}",
).replace(
    "  - {{type: modbus-output, name: r",
    "  - {{type: modbus-input, name: outside, link: io, address: 1}}\n"
    "  - {{type: modbus-output, name: r",
)


def test_the_sites_outdoor_point_is_recorded_and_exported(tmp_path: Path) -> None:
    """The service records the site's outdoor point with each zone tick (``tick_from``'s
    ``outdoor``); ``history`` exports it as the ``outdoor`` column, which the import (and so
    ``tune``) reads back; a tick whose outdoor reading was not good exports it empty."""
    from roomloop.core.controller import ZoneController
    from roomloop.core.settings import ZoneSettings
    from roomloop.core.types import PointSample, ZoneInputs
    from roomloop.history.recorder import tick_from

    settings = ZoneSettings.for_heating_type("hydronic")
    controller = ZoneController(settings)
    state = controller.initial_state(T0)
    samples = tuple(PointSample(p.name, 20.0, T0, "ok") for p in settings.inputs)
    state, outputs = controller.step(state, ZoneInputs(samples=samples), T0)
    good = tick_from(T0, outputs, state, ("outside", 3.5))
    assert good.points[-1] == ("outside", 3.5, "ok")
    bad = tick_from(T0, outputs, state, ("outside", None))
    assert bad.points[-1][0] == "outside" and bad.points[-1][1] is None
    assert bad.points[-1][2] != "ok"
    assert tick_from(T0, outputs, state).points == good.points[:-1]

    site = write_site(tmp_path, template=SITE_OUTDOOR)
    ticks = [
        dataclasses.replace(
            t, points=(*t.points, ("outside", None if k < 10 else -2.0 + k / 8640, "ok"
                                   if k >= 10 else "unreliable-other"))
        )
        for k, t in enumerate(_square_day())
    ]
    _store(tmp_path, ticks)
    out = tmp_path / "den.csv"
    assert main(["history", "-c", str(site), "--zone", "den", "--csv", str(out)]) == 0
    lines = out.read_text().splitlines()
    assert lines[0] == "time,temperature,relay,setpoint,fail_safe,outdoor"
    assert lines[1].endswith(",")  # no good outdoor reading yet
    assert lines[11].endswith(",-1.999")
    back = read_csv(str(out), zone="den", tz=ZoneInfo("Europe/Vienna"), units="C")
    assert back.outdoor is not None
    assert back.outdoor[0] is None
    assert back.outdoor[-1] == pytest.approx(-2.0 + 8639 / 8640, abs=1e-3)


def test_csv_with_a_byte_order_mark_reads(tmp_path: Path) -> None:
    """Spreadsheets (Excel's "CSV UTF-8") start the file with a UTF-8 byte-order mark,
    U+FEFF (the Unicode Standard, section 23.8 "Specials", recalled from memory); read as
    UTF-8 it became part of the first column's name ('\\ufefftime': missing column time)."""
    path = tmp_path / "from-a-spreadsheet.csv"
    path.write_bytes(
        "time,temperature,relay\r\n"
        f"{T0:.0f},20.0,1\r\n"
        f"{T0 + 10:.0f},20.1,0\r\n".encode("utf-8-sig")
    )
    h = read_csv(path, zone="den", tz=ZoneInfo("Europe/Vienna"), units="C")
    assert h.time == [T0, T0 + 10]
    assert h.relay == [True, False]
