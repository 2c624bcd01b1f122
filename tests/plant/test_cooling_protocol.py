"""The standard protocol's cooling variant, its figures, and the baselines on the cooling call."""

from __future__ import annotations

import dataclasses
import math
from typing import Any

import pytest

from roomloop.core.settings import CoolingSettings, SettingsError, ZoneSettings
from roomloop.core.types import PointSample, ZoneInputs
from roomloop.plant.baselines import (
    CallTuning,
    ElectromechanicalController,
    PlainController,
    TimeProportionalController,
    bimetal_settings,
    call_tuning,
    pi_settings,
)
from roomloop.plant.controllers import (
    CONTROLLER_NAMES,
    cooling_zone_settings,
    make_controller,
)
from roomloop.plant.figures import window_figures
from roomloop.plant.loader import load_plant
from roomloop.plant.protocol import (
    COOLING_COMFORT_C,
    COOLING_ECONOMY_C,
    PlantCannotCool,
    ProtocolResult,
    cooling_outdoor_c,
    protocol_settings,
    run_protocol,
)

T0 = 1_767_225_600.0


def cooling_of(zone: ZoneSettings) -> CoolingSettings:
    assert zone.cooling is not None
    return zone.cooling


def inputs(value: float | None, level: str = "comfort") -> ZoneInputs:
    return ZoneInputs(samples=(PointSample("temperature", value, T0),), scheduled_level=level)  # type: ignore[arg-type]


@pytest.fixture(scope="module")
def plain_run() -> ProtocolResult:
    settings = protocol_settings(cooling_zone_settings("direct-expansion"), mode="cool")
    return run_protocol(
        make_controller("plain", settings, "cool"),
        load_plant("direct-expansion"),
        seed=2,
        sensor_names=[p.name for p in settings.inputs],
        controller_name="plain",
        mode="cool",
    )


def test_cooling_protocol_sets_gains_setpoints_and_scores_the_cooling_call(
    plain_run: ProtocolResult,
) -> None:
    spec = load_plant("direct-expansion")
    assert spec.cooler_w is not None
    trace = plain_run.trace
    at = {round(t): k for k, t in enumerate(trace.time_s)}
    # A warm day: 6 K above the comfort set point, the whole run.
    outdoor = COOLING_COMFORT_C + 6.0
    assert cooling_outdoor_c(spec) == outdoor
    assert set(trace.outdoor_c) == {outdoor}
    fabric = spec.room.loss_w_per_k * 6.0

    # The schedule's gains plus the fabric are what the cooler must remove: 30 %, 45 % (the
    # middle of the ramp) and 60 % of cooler_w [derived: the room's steady heat balance].
    def removed(hours: float) -> float:
        return trace.gains_w[at[round(hours * 3600)]] + fabric + spec.internal_gains_w

    assert removed(20) == pytest.approx(0.3 * spec.cooler_w)
    assert removed(24.5) == pytest.approx(0.45 * spec.cooler_w)
    assert removed(33) == pytest.approx(0.6 * spec.cooler_w)
    # The set-up to economy and the step back.
    assert trace.setpoint_c[at[40 * 3600]] == COOLING_ECONOMY_C == 27.0
    assert trace.setpoint_c[at[44 * 3600]] == COOLING_COMFORT_C == 24.0
    assert max(trace.room_c[at[41 * 3600] : at[43 * 3600]]) > 26.0
    # The scored relay is the cooling call, and it ran about as much as the load asks.
    low, high = plain_run.phases["low-load"], plain_run.phases["high-load"]
    assert low.on_fraction == pytest.approx(0.3, abs=0.05)
    assert high.on_fraction == pytest.approx(0.6, abs=0.05)
    assert low.energy_kwh == pytest.approx(spec.cooler_w * low.on_fraction * 8 / 1000)
    # The recovery's overshoot is the fall below the set point after the step down.
    window = trace.room_c[at[43 * 3600] :]
    recovery = plain_run.phases["recovery"]
    assert recovery.overshoot_k == pytest.approx(24.0 - min(window))
    assert recovery.settle_s is not None
    first = next(k for k, t in enumerate(window) if t <= 24.5)
    assert recovery.settle_s == first * 10.0
    assert plain_run.to_dict()["mode"] == "cool"
    assert plain_run.to_dict()["setpoints_c"] == {"comfort": 24.0, "economy": 27.0}


def test_window_figures_in_cooling_by_hand() -> None:
    # Ticks of 10 s; window [20 s, 100 s) holds ticks 2..9; the step is down to 24 C.
    room = [27.0, 27.0, 26.0, 25.0, 24.4, 23.6, 23.8, 24.0, 24.2, 24.1, 30.0]
    relay = [False, True, True, True, False, False, True, True, False, False, False]
    f = window_figures(
        room, relay, tick_s=10.0, start_s=20.0, end_s=100.0, setpoint_c=24.0,
        heater_w=3600.0, step_response=True, cooling=True,
    )
    assert f.overshoot_k == pytest.approx(24.0 - 23.6)
    assert f.settle_s == 20.0  # tick 4 (24.4 C) is the first at or below 24.5 C
    assert f.control_variation_k == pytest.approx((26.0 - 23.6) / 2)


def test_a_cooling_run_needs_a_plant_and_a_zone_that_cool() -> None:
    settings = protocol_settings(cooling_zone_settings("chilled-water"), mode="cool")
    with pytest.raises(PlantCannotCool, match="no cooler_w"):
        run_protocol(make_controller("plain", settings, "cool"), load_plant("hydronic"),
                     mode="cool")
    heating_only = ZoneSettings.for_heating_type("hydronic")
    with pytest.raises(SettingsError, match="no cooling call"):
        protocol_settings(heating_only, mode="cool")
    with pytest.raises(SettingsError, match="only cools"):
        protocol_settings(cooling_zone_settings("chilled-water"), mode="heat")


def test_protocol_settings_set_the_runs_changeover_and_cooling_setpoints() -> None:
    zone = cooling_zone_settings("direct-expansion")
    cool = protocol_settings(zone, comfort_c=23.0, economy_c=26.5, mode="cool")
    assert cool.cooling is not None
    assert cool.cooling.initial_changeover == "cool"
    assert (cool.cooling.comfort_c, cool.cooling.economy_c) == (23.0, 26.5)
    both = dataclasses.replace(
        ZoneSettings.for_heating_type("hydronic"),
        cooling=dataclasses.replace(cooling_of(zone), heating=True, initial_changeover="auto"),
    )
    heat = protocol_settings(both, mode="heat")
    assert heat.cooling is not None and heat.cooling.initial_changeover == "heat"
    assert (heat.comfort_c, heat.economy_c) == (20.0, 17.0)


# --------------------------------------------------------------------------- baselines


def call(**changes: Any) -> CallTuning:
    base = CallTuning(
        cooling=True,
        kind="direct-expansion",
        differential_k=0.5,
        cycle_rate_cph=3.0,
        min_on_s=60.0,
        min_off_s=60.0,
        setpoints={"comfort": 24.0, "standby": 26.0, "economy": 27.0, "protection": None},
    )
    return dataclasses.replace(base, **changes)


SETTINGS = ZoneSettings.for_heating_type("forced-air")


def test_plain_cooling_cuts_in_above_the_band_and_out_below_it() -> None:
    c = PlainController(SETTINGS, call())
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(24.2), T0)
    assert out.cooling is not None and not out.cooling.demand  # inside 23.75 .. 24.25
    state, out = c.step(state, inputs(24.25), T0 + 10)
    assert out.cooling is not None and out.cooling.demand and out.reason == "cut-in"
    assert not out.demand  # the heating call never runs
    state, out = c.step(state, inputs(23.7), T0 + 30)
    assert out.cooling is not None and out.cooling.demand and out.reason == "min-on"
    state, out = c.step(state, inputs(23.7), T0 + 70)
    assert out.cooling is not None and not out.cooling.demand and out.reason == "cut-out"
    state, out = c.step(state, inputs(26.0, "economy"), T0 + 200)
    assert out.cooling is not None and out.cooling.setpoint == 27.0 and not out.cooling.demand
    _, out = c.step(state, inputs(35.0, "protection"), T0 + 300)
    assert out.cooling is not None and not out.cooling.demand  # no overheat limit: no call


def test_cooling_anticipator_heats_the_element_while_the_cooling_is_off() -> None:
    # REFERENCES.md: the classic cooling anticipator heats the element while cooling is off,
    # so cooling starts earlier [trade: common practice, no source]; here the exact
    # first-order rise toward G while off (the law of DESIGN.md's anticipator).
    b = bimetal_settings(SETTINGS, gain_k=1.0, call=call())
    c = ElectromechanicalController(SETTINGS, b, call())
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(24.0), T0)  # in the band: off
    assert out.cooling is not None and not out.cooling.demand
    started = None
    for k in range(1, 200):
        state, out = c.step(state, inputs(24.0), T0 + 10 * k)
        assert out.cooling is not None
        if out.cooling.demand:
            started = k
            break
        expected = 1.0 * (1 - math.exp(-10 * k / b.anticipator_time_constant_s))
        assert out.cooling.anticipator_k == pytest.approx(expected, rel=1e-9)
    # A room held at the set point: the element felt warmer and the cooling cut in once the
    # anticipator reached D/2 = 0.25 K, i.e. after tau ln(1 / (1 - 0.25)) [derived].
    assert started is not None
    assert 10 * started == pytest.approx(
        b.anticipator_time_constant_s * math.log(1 / 0.75), abs=10.0
    )
    # While the cooling runs the anticipator cools back (toward 0).
    before = state.anticipator_k
    state, out = c.step(state, inputs(24.0), T0 + 10 * (started + 1))
    assert out.cooling is not None and out.cooling.anticipator_k < before


def test_cooling_anticipator_is_sized_from_the_cooling_cycle_rate() -> None:
    # DESIGN.md sizing, the same formula in cooling: on = off = tau ln((G + D) / (G - D)).
    b = bimetal_settings(SETTINGS, gain_k=1.0, call=call())
    half_cycle = b.anticipator_time_constant_s * math.log(1.5 / 0.5)
    assert 3600 / (2 * half_cycle) == pytest.approx(3.0)


def test_time_proportional_cooling_works_on_t_minus_s() -> None:
    cool = call(min_on_s=0.0, min_off_s=0.0)
    pi = dataclasses.replace(pi_settings(SETTINGS, 0.5, 3600.0, cool), cycle_s=1200.0)
    c = TimeProportionalController(SETTINGS, pi, cool)
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(25.0), T0)  # 1 K above: duty 0.5
    assert state.duty == pytest.approx(0.5)
    assert out.cooling is not None and out.cooling.demand
    c = TimeProportionalController(SETTINGS, pi, cool)
    state = c.initial_state(T0)
    state, out = c.step(state, inputs(23.0), T0)  # below the set point: no cooling
    assert state.duty == 0.0 and out.cooling is not None and not out.cooling.demand


@pytest.mark.parametrize("name", CONTROLLER_NAMES)
def test_every_controller_runs_the_cooling_call_from_zone_settings(name: str) -> None:
    settings = protocol_settings(cooling_zone_settings("chilled-water"), mode="cool")
    c = make_controller(name, settings, "cool")
    state = c.initial_state(T0)
    for k in range(40):  # long enough for the minimum off time after the start
        state, out = c.step(state, inputs(30.0), T0 + 10 * k)
    assert out.cooling is not None and out.cooling.demand and not out.demand
    assert out.cooling.setpoint == pytest.approx(24.0)


def test_call_tuning_takes_the_cooling_types_preset() -> None:
    settings = cooling_zone_settings("direct-expansion")
    tuning = call_tuning(settings, "cool")
    assert settings.cooling is not None
    assert tuning.cooling and tuning.kind == "direct-expansion"
    assert tuning.min_off_s == settings.cooling.min_off_s
    assert tuning.cycle_rate_cph == settings.cooling.cycle_rate_cph
    with pytest.raises(SettingsError):
        call_tuning(ZoneSettings.for_heating_type("hydronic"), "cool")
