"""A history CSV with temperatures no room, pipe or outdoor air reads: refused at import.

The bounds are the service's own for every saved temperature (core/state.py PLAUSIBLE_C,
-100 to 200 C), in the site's units. Before, +-1e308 went through: ``report`` summed
them to inf - inf (a traceback), and ``tune`` handed them to the fit (a traceback from a
temperature of 1e308; with an outdoor -1e308 too, a fit of "+- nan %" and exit 0).
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from history_site import T0, write_site

from roomloop.cli import main


def _rows(n: int, bad: dict[int, tuple[str, str]]) -> str:
    """``n`` ticks 10 s apart (temperature a slow wave, relay on while it is low, set point
    20, outdoor 5); ``bad`` replaces a row's (temperature, outdoor) cells."""
    rows = ["time,temperature,relay,setpoint,outdoor"]
    for k in range(n):
        wave = math.sin(k / 100)
        temperature, outdoor = bad.get(k, (f"{20 + wave:.3f}", "5.0"))
        rows.append(f"{T0 + 10 * k:.0f},{temperature},{int(wave < 0)},20.0,{outdoor}")
    return "\n".join(rows) + "\n"


def test_report_refuses_absurd_temperatures_by_file_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """Three hours with +-1e308 in the settled part (line = row + 2: header, then 1-based)."""
    site = write_site(tmp_path)
    path = tmp_path / "absurd.csv"
    path.write_text(_rows(1080, {500: ("1e308", "5.0"), 501: ("-1e308", "5.0"),
                                 700: ("20.0", "-200")}))
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(path)]) == 2
    captured = capsys.readouterr()
    assert captured.out == ""
    assert captured.err.splitlines() == [
        f"{path}:502: temperature '1e308' is outside -100 to 200 C (no room, pipe or "
        "outdoor air reads beyond that)",
        f"{path}:503: temperature '-1e308' is outside -100 to 200 C (no room, pipe or "
        "outdoor air reads beyond that)",
        f"{path}:702: outdoor '-200' is outside -100 to 200 C (no room, pipe or "
        "outdoor air reads beyond that)",
    ]


def test_the_bounds_are_in_the_sites_units(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """On an F site the same bounds read -148 to 392 F: 390 F is within, 400 F is not."""
    site = write_site(tmp_path, units="F")
    path = tmp_path / "f.csv"
    path.write_text(
        "time,temperature,relay,setpoint\n"
        f"{T0:.0f},68.0,0,390\n"
        f"{T0 + 10:.0f},400,0,68\n"
        f"{T0 + 20:.0f},68.0,0,-150\n"
    )
    assert main(["report", "-c", str(site), "--zone", "den", "--history", str(path)]) == 2
    assert capsys.readouterr().err.splitlines() == [
        f"{path}:3: temperature '400' is outside -148 to 392 F (no room, pipe or outdoor "
        "air reads beyond that)",
        f"{path}:4: setpoint '-150' is outside -148 to 392 F (no room, pipe or outdoor "
        "air reads beyond that)",
    ]


def test_tune_refuses_absurd_temperatures_by_file_and_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """25 h of history, enough for the fit to start, with one 1e308 and one outdoor -1e308."""
    site = write_site(tmp_path)
    path = tmp_path / "absurd.csv"
    path.write_text(_rows(9000, {4000: ("1e308", "5.0"), 4001: ("20.0", "-1e308")}))
    code = main(
        ["tune", "-c", str(site), "--zone", "den", "--history", str(path), "--no-recommend"]
    )
    assert code == 2
    assert capsys.readouterr().err.splitlines() == [
        f"{path}:4002: temperature '1e308' is outside -100 to 200 C (no room, pipe or "
        "outdoor air reads beyond that)",
        f"{path}:4003: outdoor '-1e308' is outside -100 to 200 C (no room, pipe or "
        "outdoor air reads beyond that)",
    ]
