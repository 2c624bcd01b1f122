"""First checks of the public API: settings, a step, the state's JSON round trip, commands."""

from __future__ import annotations

import itertools
import math

import pytest

from roomloop.config.models import FailSafe, TuningInput
from roomloop.core import (
    CommandRejected,
    SettingsError,
    StateFormatError,
    ZoneController,
    ZoneSettings,
    ZoneState,
    apply_command,
)
from roomloop.core.failsafe import BUCKET_S, choose_duty, learned_fraction
from roomloop.core.types import Controller

from .helpers import run, sample, settings


def test_for_heating_type_uses_the_preset_and_derives_tau() -> None:
    s = ZoneSettings.for_heating_type("hydronic")
    assert s.cycle_rate_cph == 3.0
    assert s.inputs[0].name == "temperature"
    # DESIGN.md cycle-rate sizing: tau = 3600 / (2 cph ln((G + D)/(G - D)))
    assert (s.anticipator_gain_k, s.differential_k) == (2.5, 0.5)  # the hydronic preset
    expected = 3600.0 / (2 * 3.0 * math.log((2.5 + 0.5) / (2.5 - 0.5)))
    assert s.anticipator_time_constant_s == pytest.approx(expected)


def test_for_heating_type_takes_overrides_and_refuses_bad_values() -> None:
    s = ZoneSettings.for_heating_type(
        "electric", tuning=TuningInput(min_on_s=0), fail_safe=FailSafe(policy="off")
    )
    assert s.min_on_s == 0.0 and s.fail_safe_policy == "off"
    with pytest.raises(SettingsError, match="heating"):
        ZoneSettings.for_heating_type("nuclear")


def test_controller_conforms_to_the_protocol() -> None:
    controller: Controller[ZoneState] = ZoneController(settings())
    state = controller.initial_state(0.0)
    state, out = controller.step(state, sample(18.0, 10.0), 10.0)
    assert out.demand is True and out.reason == "cut-in"
    assert out.temperature == 18.0 and out.setpoint == 20.0
    assert out.reliability == {"temperature": "ok"}


def test_cold_room_heats_and_warm_room_does_not() -> None:
    controller = ZoneController(settings())
    cold = run(controller, lambda now, on: 18.0, end=60.0, tick=10.0)
    assert all(out.demand for _, out, _ in cold)
    warm = run(controller, lambda now, on: 22.0, end=60.0, tick=10.0)
    assert not any(out.demand for _, out, _ in warm)
    assert warm[-1][1].reason == "off-to-cut-in"


def test_state_round_trips_through_json() -> None:
    controller = ZoneController(settings())
    trace = run(controller, lambda now, on: 19.0 + (0.3 if on else 0.0), end=3000.0, tick=10.0)
    state = trace[-1][2]
    text = state.to_json()
    assert ZoneState.from_json(text) == state
    assert '"schema":"roomloop.zone-state"' in text


@pytest.mark.parametrize(
    "text",
    ["", "[]", '{"schema": "something-else", "version": 1}', "not json",
     '{"schema": "roomloop.zone-state", "version": 99}'],
)
def test_foreign_state_is_refused_clearly(text: str) -> None:
    with pytest.raises(StateFormatError):
        ZoneState.from_json(text)


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ('"anticipator_k":0.0', '"anticipator_k":"hot"', "anticipator_k"),
        ('"tau_scale":1.0', '"tau_scale":-1', "tau_scale"),
        ('"mode":"auto"', '"mode":"party"', "mode"),
        ('"points":[', '"surprise":1,"points":[', "unknown keys"),
        ('"relay_on":false', '"relay_on":0', "relay_on"),
    ],
)
def test_corrupt_field_is_named(old: str, new: str, key: str) -> None:
    # a fresh zone without droop compensation: its anticipator starts at 0 (with droop it
    # starts at G x the fail-safe duty)
    state = ZoneController(settings(droop_compensation=False)).initial_state(0.0)
    text = state.to_json()
    assert old in text
    with pytest.raises(StateFormatError, match=key):
        ZoneState.from_json(text.replace(old, new))


def test_last_hour_figures() -> None:
    """cycles_1h and on_fraction_1h against a count over the relay trace itself."""
    controller = ZoneController(
        settings(min_on_s=0.0, min_off_s=0.0, max_cycles_per_hour=60, droop_compensation=False)
    )
    trace = run(controller, lambda now, on: 19.0, end=3 * 3600.0, tick=10.0)
    last_hour = [out for now, out, _ in trace if now > trace[-1][0] - 3600.0]
    ons = sum(1 for a, b in itertools.pairwise(trace)
              if b[0] > trace[-1][0] - 3600.0 and b[1].demand and not a[1].demand)
    out = trace[-1][1]
    assert out.cycles_1h == ons > 0
    # each tick's relay state holds until the next tick
    on_fraction = sum(o.demand for o in last_hour[:-1]) / (len(last_hour) - 1)
    assert out.on_fraction_1h == pytest.approx(on_fraction, abs=2 * 10.0 / 3600.0)


def test_setpoint_command_holds_and_limits_refuse() -> None:
    s = settings()
    controller = ZoneController(s)
    state = controller.initial_state(0.0)
    held = apply_command(s, state, "setpoint", "21.5", 0.0)
    assert held.mode == "hold" and held.hold_setpoint == 21.5
    _, out = controller.step(held, sample(20.0, 10.0), 10.0)
    assert out.setpoint == 21.5 and out.mode == "hold"
    with pytest.raises(CommandRejected, match="limits"):
        apply_command(s, state, "setpoint", 40, 0.0)
    with pytest.raises(CommandRejected, match="not a number"):
        apply_command(s, state, "setpoint", "warm", 0.0)
    with pytest.raises(CommandRejected, match="unknown field"):
        apply_command(s, state, "colour", "red", 0.0)


@pytest.mark.parametrize(
    ("old", "new", "key"),
    [
        ('"hold_until":null', '"hold_until":1e300', "hold_until"),
        ('"hold_until":null', '"hold_until":253402300800', "hold_until"),
        ('"hold_until":null', '"hold_until":1' + "0" * 400, "hold_until"),
        ('"last_step_at":0.0', '"last_step_at":1e20', "last_step_at"),
        ('"anticipator_k":0.0', '"anticipator_k":1' + "0" * 400, "anticipator_k"),
        ('"duty_current":[0.0,', '"duty_current":[1e300,', "duty_current"),
    ],
)
def test_a_time_beyond_year_9999_or_a_huge_number_is_refused(
    old: str, new: str, key: str
) -> None:
    """A saved time must stay displayable as a date; a huge integer is no traceback."""
    # without droop compensation the anticipator of a fresh zone starts at 0
    text = ZoneController(settings(droop_compensation=False)).initial_state(0.0).to_json()
    assert old in text
    with pytest.raises(StateFormatError, match=key):
        ZoneState.from_json(text.replace(old, new))
    last_second = text.replace('"hold_until":null', '"hold_until":253402300799')
    assert ZoneState.from_json(last_second).hold_until == 253402300799.0


def test_learned_duty_ignores_an_open_bucket_older_than_the_learning_window() -> None:
    """A zone off for days keeps its last open bucket: it must not count as recent history."""
    learn_s = 4 * 3600.0
    old_open = (0.0, 900.0, 900.0)  # fully on, three days ago
    recent = ((3 * 86400.0 - 2 * BUCKET_S, 90.0, 900.0), (3 * 86400.0 - BUCKET_S, 90.0, 900.0))
    now = 3 * 86400.0
    fraction, covered = learned_fraction(recent, old_open, now, learn_s)
    assert fraction == pytest.approx(0.1) and covered == 1800.0
    assert learned_fraction((), old_open, now, learn_s) == (0.0, 0.0)
    assert learned_fraction((), old_open, 100.0, learn_s) == (1.0, 900.0)  # still recent
    duty, why = choose_duty("learned-duty", (), old_open, now, duty=0.3, period_s=600.0,
                            learn_hours=4.0, min_duty=0.1, max_duty=0.8)
    assert duty == 0.3 and "unavailable" in why
