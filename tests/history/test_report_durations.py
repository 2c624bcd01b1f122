"""``report``'s durations come from the real time between samples, not from a tick count.

A recorded history is not evenly spaced: a command wakes a zone for an extra step (two
samples within a second), a zone's tick may change, the daemon may stop for a while. The
history below is all three on one day whose true durations are known by construction;
the figures must not depend on how many samples there are, and the same day must read
the same from the history file and from its exported CSV.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest
from history_site import T0, VIENNA, write_site

from roomloop.cli import main
from roomloop.history.csvfile import read_csv
from roomloop.history.report import MAX_COVER_TICKS, DayFigures, day_figures
from roomloop.history.store import HistoryFile, Tick, ZoneHistory, history_path

H = 3600.0


def _offsets() -> list[float]:
    """Seconds after midnight of each sample: a 10 s tick; none from 12:00 to 14:00 (the
    daemon stopped); a 15 s tick from 18:00 to 20:00; an extra step 0.3 s after each
    switch-on (a command); ten extra steps in 03:10:00-03:10:10."""
    out: list[float] = []
    for k in range(8640):
        s = 10.0 * k
        if 12 * H <= s < 14 * H or 18 * H <= s < 20 * H:
            continue
        out.append(s)
        if s % 1800 == 0:
            out.append(s + 0.3)
    out += [18 * H + 15.0 * k for k in range(480)]
    out += [3 * H + 600 + 0.5 + k for k in range(10)]
    for s in list(out):
        if 18 * H <= s < 20 * H and s % 1800 == 0:
            out.append(s + 0.3)
    return sorted(out)


def _tick(s: float) -> Tick:
    """The state at ``s`` seconds after midnight: relay on the first 10 min of every half
    hour, T 19.8 C while on and 20.4 C while off, set point 20 C; fail-safe in 03:10-03:20;
    the point stale in 03:00-03:20."""
    on = s % 1800 < 600
    return Tick(
        at=T0 + s, temperature=19.8 if on else 20.4, setpoint=20.0, level="comfort",
        mode="auto", relay=on, anticipator_k=0.0, droop_k=0.0,
        fail_safe=3 * H + 600 <= s < 3 * H + 1200, reason="cut-in" if on else "cut-out",
        points=(("t1", 20.0, "stale" if 3 * H <= s < 3 * H + 1200 else "ok"),),
    )


def _history(ticks: list[Tick]) -> ZoneHistory:
    history = ZoneHistory("den")
    for t in ticks:
        history.time.append(t.at)
        history.temperature.append(t.temperature)
        history.setpoint.append(t.setpoint)
        history.level.append(t.level)
        history.mode.append(t.mode)
        history.relay.append(t.relay)
        history.anticipator_k.append(t.anticipator_k)
        history.droop_k.append(t.droop_k)
        history.fail_safe.append(t.fail_safe)
        history.reason.append(t.reason)
    history.points["t1"] = [(t.points[0][1], t.points[0][2]) for t in ticks]
    return history


def test_figures_of_an_irregular_day_are_its_true_durations() -> None:
    """Worked by hand from the construction. The tick (median spacing) is 10 s, so a sample
    covers the time to the next but at most MAX_COVER_TICKS x 10 s: the last sample before
    the stop (11:59:50, relay off) covers 30 s. Covered: 22 h + 20 s. On: 44 half hours
    of 10 min each outside the stop = 26 400 s, 11.0 kWh at 1.5 kW. Switch-ons: 43 (the run
    at midnight starts the history, no switch). Complete runs: on 600 s; off 1200 s (the
    one across the stop, 11:40-14:00, covers 1190 + 30 = 1220 s). Fail-safe 10 min, the
    point stale 20 min, whatever the extra steps in them. EN 15500's CA (definition as
    REFERENCES.md recalls it, from memory) over the settled part (from 01:00) without the
    fail-safe: time-weighted mean of 25 200 s at 19.8 and 49 820 s at 20.4."""
    assert MAX_COVER_TICKS == 3
    [day] = day_figures(_history([_tick(s) for s in _offsets()]), VIENNA, heater_w=1500.0)
    covered = 22 * H + 20.0
    assert day.hours == pytest.approx(covered / H, abs=1e-9)
    assert day.on_fraction == pytest.approx(26400.0 / covered, abs=1e-9)
    assert day.energy_kwh == pytest.approx(11.0, abs=1e-9)
    assert day.cycles_per_hour == pytest.approx(43 / (covered / H), abs=1e-9)
    assert day.shortest_on_s == pytest.approx(600.0, abs=1e-6)
    assert day.shortest_off_s == pytest.approx(1200.0, abs=1e-6)
    assert day.fail_safe_min == pytest.approx(10.0, abs=1e-9)
    assert day.fault_min == {"t1": pytest.approx(20.0, abs=1e-9)}
    scored_on, scored_off = 25200.0, 49820.0
    mean = (scored_on * 19.8 + scored_off * 20.4) / (scored_on + scored_off)
    assert day.scored_hours == pytest.approx((scored_on + scored_off) / H, abs=1e-9)
    assert day.setpoint_deviation_k == pytest.approx(mean - 20.0, abs=1e-9)
    assert day.control_variation_k == pytest.approx(0.3, abs=1e-9)
    assert day.control_accuracy_k == pytest.approx(abs(mean - 20.0) + 0.3, abs=1e-9)


def test_days_split_at_midnight_whatever_the_tick() -> None:
    """A 7 s tick does not divide a day (86 400 / 7 = 12 342.9): the sample before midnight
    holds into the next day, and a whole day covers 24.0 h exactly (a count of ticks gave
    12 343 x 7 s = 24.0003 h). The point is stale from its first sample at or after 03:00
    (03:00:01) until the first after 03:20 (03:20:05): 1204 s."""
    ticks = [_tick(7.0 * k) for k in range(math.ceil(2 * 86400 / 7))]
    days = day_figures(_history(ticks), VIENNA, heater_w=None)
    assert [d.day.isoformat() for d in days] == ["2026-01-02", "2026-01-03"]
    assert days[0].hours == pytest.approx(24.0, abs=1e-9)
    assert days[1].hours == pytest.approx(24.0, abs=1e-9)
    assert days[0].fault_min == {"t1": pytest.approx(1204.0 / 60.0, abs=1e-9)}


def _figures(day: DayFigures) -> tuple[float, ...]:
    return (
        day.hours, day.on_fraction, day.cycles_per_hour, day.shortest_on_s or math.nan,
        day.shortest_off_s or math.nan, day.energy_kwh or math.nan, day.fail_safe_min,
        day.control_accuracy_k or math.nan, day.scored_hours,
    )


def test_the_history_file_and_its_csv_read_the_same(tmp_path: Path) -> None:
    """The audit's case: one day read 23.7 h from the history file and 24.5 h from its
    exported CSV (real 24.0 h), since each reading multiplied its own tick count by its own
    median spacing. Read through ``history --csv``, the same day gives the same figures."""
    site = write_site(tmp_path)
    state = tmp_path / "state"
    state.mkdir()
    ticks = [_tick(s) for s in _offsets()]
    db = HistoryFile(history_path(state, "test-house"))
    for i in range(0, len(ticks), 360):
        db.write({"den": ticks[i : i + 360]})
    recorded = db.read("den")
    db.close()
    out = tmp_path / "den.csv"
    assert main(["history", "-c", str(site), "--zone", "den", "--csv", str(out)]) == 0
    [from_csv] = day_figures(read_csv(out, zone="den", tz=VIENNA, units="C"), VIENNA,
                             heater_w=1500.0)
    [from_file] = day_figures(recorded, VIENNA, heater_w=1500.0)
    assert _figures(from_csv) == pytest.approx(_figures(from_file), rel=1e-6)
    assert from_csv.hours == pytest.approx((22 * H + 20.0) / H, abs=1e-6)
