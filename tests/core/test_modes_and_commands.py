"""Modes, levels, holds and commands; input combination; protection and the backup point;
settings from a real site file; resuming a saved state."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import replace
from pathlib import Path

import pytest

from roomloop.config.loader import load_site
from roomloop.config.models import Level
from roomloop.core import (
    CommandRejected,
    PointSample,
    SettingsError,
    ZoneController,
    ZoneInputs,
    ZoneOutputs,
    ZoneSettings,
    ZoneState,
    apply_command,
)
from roomloop.core.settings import PointSettings

from .helpers import run, sample, settings, switch_times

EXAMPLE = Path(__file__).resolve().parents[2] / "config" / "example.yaml"


def test_settings_from_the_example_site() -> None:
    site = load_site(EXAMPLE)
    for zone in site.zones:
        s = ZoneSettings.from_site(site, zone.name)
        assert [p.name for p in s.inputs] == list(zone.inputs)
        assert s.anticipator_time_constant_s == zone.effective.anticipator_time_constant_s
        assert s.comfort_c == zone.setpoints.comfort
        assert (s.backup is None) == (zone.fail_safe.backup_point is None)
    with pytest.raises(SettingsError, match="no zone"):
        ZoneSettings.from_site(site, "attic")


def step_at(
    controller: ZoneController, state: ZoneState, now: float, value: float = 20.0,
    level: Level = "comfort",
) -> tuple[ZoneState, ZoneOutputs]:
    inputs = ZoneInputs((PointSample("temperature", value, now),), level)
    return controller.step(state, inputs, now)


def test_auto_follows_the_program_level_and_an_override_lasts_until_it_changes() -> None:
    s = settings()
    c = ZoneController(s)
    st, out = step_at(c, c.initial_state(0.0), 10.0, level="economy")
    assert (out.level, out.setpoint, out.mode) == ("economy", s.economy_c, "auto")
    st = apply_command(s, st, "level", "comfort", 15.0)
    st, out = step_at(c, st, 20.0, level="economy")
    assert (out.level, out.setpoint) == ("comfort", s.comfort_c)
    st, out = step_at(c, st, 30.0, level="standby")  # the program moved on
    assert (out.level, out.setpoint) == ("standby", s.standby_c)
    st, out = step_at(c, st, 40.0, level="economy")
    assert out.level == "economy"


def test_hold_until_returns_to_auto() -> None:
    s = settings()
    c = ZoneController(s)
    st, _ = step_at(c, c.initial_state(0.0), 10.0, level="economy")
    st = apply_command(s, st, "setpoint", 22.5, 10.0)
    st = apply_command(s, st, "hold_until", "3600", 10.0)
    st, out = step_at(c, st, 3590.0, level="economy")
    assert (out.mode, out.setpoint) == ("hold", 22.5)
    st, out = step_at(c, st, 3600.0, level="economy")
    assert (out.mode, out.setpoint, out.level) == ("auto", s.economy_c, "economy")
    with pytest.raises(CommandRejected, match="future"):
        apply_command(s, st, "hold_until", 100.0, 3600.0)
    off = apply_command(s, st, "mode", "off", 3600.0)
    with pytest.raises(CommandRejected, match="off"):
        apply_command(s, off, "hold_until", 9000.0, 3600.0)


def test_mode_and_level_commands() -> None:
    s = settings()
    c = ZoneController(s)
    st, _ = step_at(c, c.initial_state(0.0), 10.0, level="standby")
    held = apply_command(s, st, "mode", '"hold"', 10.0)
    assert held.mode == "hold" and held.hold_setpoint == s.standby_c
    held = apply_command(s, held, "level", "economy", 10.0)
    _, out = step_at(c, held, 20.0, level="comfort")
    assert (out.mode, out.level, out.setpoint) == ("hold", "economy", s.economy_c)
    auto = apply_command(s, held, "mode", "AUTO ", 20.0)
    assert auto.mode == "auto" and auto.hold_level is None and auto.hold_setpoint is None
    for field, value in [("mode", "away"), ("level", "party"), ("setpoint", float("nan")),
                         ("setpoint", True), ("hold_until", "soon"), ("mode", 3)]:
        with pytest.raises(CommandRejected) as caught:
            apply_command(s, st, field, value, 20.0)
        assert caught.value.field == field and caught.value.reason


def test_set_points_are_clamped_to_the_limits() -> None:
    s = settings(comfort_c=30.0, limit_max_c=24.0)
    c = ZoneController(s)
    _, out = step_at(c, c.initial_state(0.0), 10.0)
    assert out.setpoint == 24.0


@pytest.mark.parametrize(
    ("combine", "expected"),
    [("mean", 20.0), ("median", 19.5), ("min", 18.0), ("first-ok", 22.5)],
)
def test_combining_reliable_inputs(combine: str, expected: float) -> None:
    points = tuple(PointSettings(n) for n in ("a", "b", "c", "d"))
    s = settings(inputs=points, combine=combine)
    c = ZoneController(s)
    # d is over its range: it is left out
    values = {"a": 22.5, "b": 18.0, "c": 19.5, "d": 99.0}
    inputs = ZoneInputs(tuple(PointSample(n, v, 10.0) for n, v in values.items()))
    _, out = c.step(c.initial_state(0.0), inputs, 10.0)
    assert out.reliability == {"a": "ok", "b": "ok", "c": "ok", "d": "over-range"}
    assert out.temperature == pytest.approx(expected if combine != "mean" else 20.0)


def test_protection_overrides_mode_off_only_below_its_set_point() -> None:
    s = settings(initial_mode="off")
    c = ZoneController(s)
    st, out = step_at(c, c.initial_state(0.0), 10.0, value=6.0)
    assert out.demand and out.reason == "protection"
    st, out = step_at(c, st, 20.0, value=7.0)  # back at the protection set point: off at once
    assert not out.demand and out.reason == "mode-off"
    no_protection = ZoneController(replace(s, protection_in_off=False))
    _, out = step_at(no_protection, no_protection.initial_state(0.0), 10.0, value=3.0)
    assert not out.demand


def test_backup_point_protects_in_fail_safe() -> None:
    slab = PointSettings("slab", max_rate_k_per_min=1e6)  # the test steps it on purpose
    s = settings(backup=slab, fail_safe_policy="off", sensor_timeout_s=60.0)
    c = ZoneController(s)
    st = c.initial_state(0.0)
    for now in range(10, 200, 10):
        backup = PointSample("slab", 5.0 if now > 100 else 12.0, float(now))
        inputs = ZoneInputs((PointSample("temperature", None, None, "comm-failure"),),
                            backup=backup)
        st, out = c.step(st, inputs, float(now))
        assert out.reliability["slab"] == "ok"
        if now >= 60:
            assert out.fail_safe
        if now > 100:
            assert out.demand and out.reason == "protection"
        elif now >= 60:
            assert not out.demand and out.reason == "fail-safe:off"


def test_resume_after_a_restart() -> None:
    s = settings()
    c = ZoneController(s)
    st = c.initial_state(0.0)
    for now in range(10, 610, 10):
        st, out = step_at(c, st, float(now), value=18.0)
    assert st.relay_on and st.anticipator_k > 0.5
    saved = ZoneState.from_json(st.to_json())
    resumed = c.resume(saved, 1800.0, relay_on=False)
    assert not resumed.relay_on and resumed.switched_at == 1800.0  # counted from the restart
    assert resumed.anticipator_k < st.anticipator_k  # decayed over the gap
    assert resumed.last_step_at == 1800.0
    # a point that is no longer configured is dropped; a new one starts fresh
    other = ZoneController(replace(s, inputs=(PointSettings("new-probe"),)))
    fresh = other.resume(saved, 1800.0)
    assert [p.name for p in fresh.points] == ["new-probe"]
    st, out = other.step(fresh, ZoneInputs((PointSample("new-probe", 19.0, 1810.0),)), 1810.0)
    assert out.temperature == 19.0


def test_no_reading_yet_is_not_a_fault() -> None:
    """Before the I/O layer's first reading the point is stale, but needs no recovery time."""
    c = ZoneController(settings())
    nothing = ZoneInputs((PointSample("temperature", None, None, "ok"),))
    st, out = c.step(c.initial_state(0.0), nothing, 10.0)
    assert out.reason == "no-temperature" and not out.demand
    assert out.reliability == {"temperature": "stale"}
    _, out = c.step(st, sample(18.0, 20.0), 20.0)
    assert out.temperature == 18.0 and out.demand


@pytest.mark.parametrize("field", ["setpoint", "hold_until"])
def test_a_huge_number_is_refused_not_a_traceback(field: str) -> None:
    s = settings()
    held = apply_command(s, ZoneController(s).initial_state(0.0), "setpoint", 21.0, 0.0)
    with pytest.raises(CommandRejected, match="too large") as caught:
        apply_command(s, held, field, "1" + "0" * 400, 0.0)
    assert caught.value.field == field


def test_hold_until_at_most_366_days_ahead() -> None:
    s = settings()
    held = apply_command(s, ZoneController(s).initial_state(0.0), "setpoint", 21.0, 1000.0)
    year = 366 * 86400.0
    assert apply_command(s, held, "hold_until", 1000.0 + year, 1000.0).hold_until == 1000.0 + year
    for far in (1000.0 + year + 1.0, 1e300):
        with pytest.raises(CommandRejected, match="366 days"):
            apply_command(s, held, "hold_until", far, 1000.0)


def alternating(low: float, high: float, tick: float = 10.0) -> Callable[[float, bool], float]:
    """A 0.1 K sensor flickering across the protection set point, one step per tick."""
    return lambda now, on: low if round(now / tick) % 2 else high


def ons_per_sliding_hour(trace: list[tuple[float, ZoneOutputs, ZoneState]]) -> int:
    ons = switch_times(trace, True)
    return max((sum(1 for t in ons if start <= t < start + 3600.0) for start in ons), default=0)


def test_a_sensor_flickering_at_the_protection_set_point_does_not_short_cycle_in_mode_off() -> None:
    s = settings(initial_mode="off", protection_c=7.0)
    trace = run(ZoneController(s), alternating(6.9, 7.0), end=3 * 3600.0, tick=10.0)
    assert switch_times(trace, True), "protection still heats below its set point"
    assert ons_per_sliding_hour(trace) <= s.max_cycles_per_hour
    # mode off never heats at or above the protection set point
    assert all(not out.demand for _, out, _ in trace if out.temperature == 7.0)


def test_a_protection_run_lasts_to_the_top_of_its_band_at_the_protection_level() -> None:
    s = settings(protection_c=7.0, differential_k=0.5, anticipator_gain_k=0.0)
    c = ZoneController(s)
    st = c.initial_state(0.0)
    trace = []
    for i in range(1, 361):
        now = 10.0 * i
        inputs = ZoneInputs((PointSample("temperature", 6.9 if i % 2 else 7.0, now),),
                            "protection")
        st, out = c.step(st, inputs, now)
        trace.append((now, out, st))
    assert len(switch_times(trace, True)) == 1 and trace[-1][1].demand
    st, out = step_at(c, st, 3610.0, value=7.2, level="protection")
    assert out.demand and out.reason == "protection" and st.protection_run
    st, out = step_at(c, st, 3620.0, value=7.25, level="protection")  # P + D/2: the run ends
    assert not st.protection_run and out.reason != "protection"


def test_protection_overrides_short_cycle_protection_only_well_below_its_set_point() -> None:
    s = settings(initial_mode="off", protection_c=7.0, differential_k=0.5, min_off_s=600.0)
    c = ZoneController(s)
    st, out = step_at(c, c.initial_state(0.0), 10.0, value=6.9)
    assert out.demand and out.reason == "protection"
    st, out = step_at(c, st, 20.0, value=7.0)
    assert not out.demand
    st, out = step_at(c, st, 30.0, value=6.9)  # just below P: the minimum off time holds
    assert not out.demand and out.reason == "min-off"
    st, out = step_at(c, st, 40.0, value=6.7)  # below P - D/2: protection goes first
    assert out.demand and out.reason == "protection"


def test_a_restart_after_a_long_downtime_is_a_cold_start_for_the_sensor_timeout() -> None:
    s = settings(sensor_timeout_s=300.0, fail_safe_policy="fixed-duty")
    c = ZoneController(s)
    st = c.initial_state(0.0)
    for now in range(10, 610, 10):
        st, _ = step_at(c, st, float(now), value=19.0)
    nothing = ZoneInputs((PointSample("temperature", None, None, "ok"),))
    st, out = c.step(st, nothing, 700.0)  # the I/O went quiet just before the stop
    assert st.points[0].verdict == "stale" and st.points[0].faulted
    resumed = c.resume(ZoneState.from_json(st.to_json()), 600.0 + 1800.0)
    assert resumed.good_at == 2400.0 and not resumed.points[0].faulted
    st, out = c.step(resumed, nothing, 2410.0)  # no reading yet after the restart
    assert not out.fail_safe and out.fail_safe_reason is None
    st, out = c.step(st, sample(19.0, 2420.0), 2420.0)  # the first reading is trusted at once
    assert out.reliability == {"temperature": "ok"} and out.temperature == 19.0
    # without readings the timeout still runs, counted from the restart
    for now in range(2430, 2730, 10):
        st, out = c.step(st, nothing, float(now))
    assert out.fail_safe


def test_resume_keeps_a_real_fault() -> None:
    c = ZoneController(settings())
    st = c.initial_state(0.0)
    st, _ = step_at(c, st, 10.0, value=19.0)
    st, out = step_at(c, st, 20.0, value=85.0)  # beyond the point's valid range
    assert out.reliability == {"temperature": "over-range"} and st.points[0].faulted
    resumed = c.resume(st, 100.0)
    assert resumed.points[0] == st.points[0] and resumed.points[0].faulted


def test_a_fahrenheit_set_point_at_a_limit_is_taken_as_the_limit() -> None:
    s = settings(limit_min_c=5.0, limit_max_c=28.0)
    state = ZoneController(s).initial_state(0.0)
    top = (82.4 - 32.0) * 5.0 / 9.0  # 82.4 F, as the service converts it
    assert top > 28.0
    assert apply_command(s, state, "setpoint", top, 0.0).hold_setpoint == 28.0
    assert apply_command(s, state, "setpoint", 5.0 - 1e-9, 0.0).hold_setpoint == 5.0
    with pytest.raises(CommandRejected, match="limits"):
        apply_command(s, state, "setpoint", 28.001, 0.0)
