"""``roomloop tune`` as the user runs it, on CSV histories it must refuse or qualify.

- The plant file it writes is one ``simulate --plant`` reads (a simulated history, round
  trip through both commands); a fit ``simulate`` would refuse (a temperature that follows
  the relay within seconds gives a room node of milliseconds) is refused with no plant file
  and no recommendation.
- Covered time, not the span: two three-hour stretches a week apart are 6 h of history
  (as ``roomloop report`` counts it), too little, whatever the span.
- Without heater_w no energy figure; without numpy or scipy one line, exit 2.
"""

from __future__ import annotations

import dataclasses
import math
import random
import subprocess
import sys
from pathlib import Path
from zoneinfo import ZoneInfo

import pytest

from roomloop.cli import main
from roomloop.cli.tune import SCIPY_MISSING
from roomloop.history.csvfile import write_csv
from roomloop.history.store import ZoneHistory
from roomloop.plant.loader import load_plant

sys.path.insert(0, str(Path(__file__).parent))
from simulated_history import DAY, EPOCH, one_zone_site, simulate


def _site(
    tmp_path: Path, heating: str = "hydronic", heater_w: float | None = None, zone: str = "den"
) -> Path:
    path = tmp_path / "site.yaml"
    path.write_text(
        one_zone_site(tmp_path / "state", heating=heating, heater_w=heater_w, zone=zone)
    )
    return path


def _csv(history: ZoneHistory, path: Path) -> Path:
    with open(path, "w", encoding="utf-8", newline="") as out:
        write_csv(history, out, tz=ZoneInfo("UTC"), units="C")
    return path


def _instant_history(hours: float = 48.0, tau_s: float = 1.0) -> ZoneHistory:
    """Relay 10 min on, 10 min off at a 10 s tick; the reading follows it with a lag of
    ``tau_s`` between 19 and 21 C (seeded noise, 0.1 K steps): no room heats that fast."""
    rng = random.Random(3)
    h = ZoneHistory("den")
    temp = 19.0
    for k in range(int(hours * 360)):
        t = k * 10.0
        on = (t // 600.0) % 2 == 0
        h.time.append(EPOCH + t)
        h.temperature.append(round(temp + rng.gauss(0.0, 0.05), 1))
        h.relay.append(on)
        h.setpoint.append(20.0)
        h.fail_safe.append(False)
        for column in (h.level, h.mode, h.reason):
            column.append("")
        h.anticipator_k.append(0.0)
        h.droop_k.append(0.0)
        target = 21.0 if on else 19.0
        temp = target + (temp - target) * math.exp(-10.0 / tau_s)
    h.outdoor = [5.0] * len(h.time)
    return h


@pytest.mark.parametrize("zone", ["den", "x" * 64])
def test_the_plant_file_tune_writes_is_one_simulate_reads(tmp_path: Path, zone: str) -> None:
    """Also for a zone with the longest name a site allows (the plant file's name is the
    zone's with '-identified': it once went past the plant name's 64 characters)."""
    site = _site(tmp_path, heater_w=1500, zone=zone)
    history = simulate(load_plant("hydronic"), days=2).history
    csv_path = _csv(history, tmp_path / "two-days.csv")
    plant = tmp_path / "den.yaml"
    argv = ["tune", "-c", str(site), "--zone", zone, "--history", str(csv_path)]
    assert main([*argv, "--no-recommend", "--write-plant", str(plant)]) == 0
    assert plant.exists()
    assert main(["simulate", "-c", str(site), "--zone", zone, "--plant", str(plant)]) == 0


def test_a_fit_simulate_would_refuse_writes_no_plant_file(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    site = _site(tmp_path, heating="electric")
    csv_path = _csv(_instant_history(), tmp_path / "instant.csv")
    plant = tmp_path / "den.yaml"
    argv = ["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)]
    assert main([*argv, "--write-plant", str(plant)]) == 1
    out, err = capsys.readouterr()
    assert not plant.exists()
    assert "no plant file and no recommendation from an unphysical fit" in err
    assert "the room node's time constant" in err and "below the physical bound of 10 s" in err
    assert "Traceback" not in err
    assert "site-file lines to paste" not in out


def _joined(first: ZoneHistory, second: ZoneHistory) -> ZoneHistory:
    """``second`` after ``first``, column by column (a gap between them)."""
    joined = ZoneHistory(first.zone)
    for f in dataclasses.fields(ZoneHistory):
        a, b = getattr(first, f.name), getattr(second, f.name)
        if isinstance(a, list):
            setattr(joined, f.name, a + b)
    return joined


def test_a_gap_is_not_history(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """3 h, a week without a tick, 3 h: 6 h covered, refused as too little data (once read
    as 171 h of history and fitted, with site-file lines to paste)."""
    site = _site(tmp_path, heater_w=1500)
    plant = load_plant("hydronic")
    before = simulate(plant, days=0.125).history
    after = simulate(plant, days=0.125, start_s=EPOCH + 7 * DAY, seed=2).history
    history = _joined(before, after)
    assert history.time[-1] - history.time[0] > 7 * DAY
    csv_path = _csv(history, tmp_path / "gap.csv")
    argv = ["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)]
    assert main(argv) == 1
    out, err = capsys.readouterr()
    assert "refused: too little data: 6.0 h of history (over a span of 171.0 h" in err, err
    assert "at least 24 h needed" in err
    assert "site-file lines to paste" not in out


def test_the_hours_of_history_are_those_covered(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """25 h, 6 h without a tick, 2 h: the fit's first line says 27 h, and the span."""
    site = _site(tmp_path, heater_w=1500)
    plant = load_plant("hydronic")
    before = simulate(plant, days=25 / 24).history
    after = simulate(plant, days=2 / 24, start_s=EPOCH + 31 * 3600.0, seed=2).history
    csv_path = _csv(_joined(before, after), tmp_path / "gap.csv")
    argv = ["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)]
    main([*argv, "--no-recommend"])
    out, _ = capsys.readouterr()
    assert "zone den (hydronic): 27.0 h of history (over a span of 33.0 h: " in out, out


@pytest.mark.parametrize("heater_w", [None, 1500.0])
def test_no_energy_figure_without_the_heaters_power(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], heater_w: float | None
) -> None:
    """Without heater_w the fit's heat is on a nominal 1000 W scale: its kWh are not the
    zone's, so the energy row shows '-' and says why; with heater_w it shows the kWh."""
    site = _site(tmp_path, heater_w=heater_w)
    history = simulate(load_plant("hydronic"), days=2).history
    csv_path = _csv(history, tmp_path / "two-days.csv")
    assert main(["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)]) == 0
    out, _ = capsys.readouterr()
    energy = next(line for line in out.splitlines() if line.startswith("energy kWh"))
    if heater_w is None:
        assert energy.split()[2:] == ["-", "-"], energy
        assert "no energy figure: the zone has no heater_w" in out
    else:
        today, best = (float(cell) for cell in energy.split()[2:])
        assert today > 0 and best > 0
        assert "no energy figure" not in out


@pytest.mark.parametrize("hidden", ["numpy", "scipy"])
def test_without_numpy_or_scipy_one_line_and_exit_2(tmp_path: Path, hidden: str) -> None:
    """The real CLI in a child whose ``import numpy`` (or scipy) fails as if it were not
    installed (None in sys.modules: importlib finds no such module), on a history it could
    otherwise fit."""
    site = _site(tmp_path, heater_w=1500)
    csv_path = _csv(simulate(load_plant("hydronic"), days=1.1).history, tmp_path / "day.csv")
    argv = ["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)]
    code = (
        f"import sys; sys.modules[{hidden!r}] = None\n"
        "from roomloop.cli import main\n"
        f"sys.exit(main({argv!r}))\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=120, check=False
    )
    assert done.returncode == 2, done.stdout + done.stderr
    assert done.stderr == f"roomloop tune: {SCIPY_MISSING}\n"
    assert done.stdout == ""
