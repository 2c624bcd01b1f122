"""Cycle-rate regulation of the cooling call (core/stages/regulation.py, as for heating).

The plant is the first-order room of REFERENCES.md ("Relay (on/off) control of a first-order
plant" [derived]) with the sign reversed for cooling: tau 3 h, the call pulls the room toward
0 C, the warm surroundings (40 C) push it back, with a dead time between call and room. The
mirror of tests/core/test_droop_and_regulation.py's regulation test, on the chilled-water
type (4 cycles/h, G 1.5 K, D 0.5 K).
"""

from __future__ import annotations

import itertools
import math
from dataclasses import replace

import pytest

from roomloop.config.models import Zone
from roomloop.core import ZoneController, ZoneOutputs
from roomloop.core.dual import DualZoneController
from roomloop.core.optimum_start import Level
from roomloop.core.settings import CoolingSettings, ZoneSettings, cooling_settings
from roomloop.core.state import ZoneState, with_cooling_state

from .helpers import FAST_POINT, FirstOrderPlant, sample
from .helpers import settings as base_settings

TICK = 10.0


def chilled_water(**cooling: object) -> ZoneSettings:
    """A cooling-only chilled-water zone, its short-cycle limits out of the way."""
    values: dict[str, object] = {"min_on_s": 0.0, "min_off_s": 0.0, "max_cycles_per_hour": 60}
    values.update(cooling)
    cs = CoolingSettings.for_cooling_type("chilled-water", **values)  # type: ignore[arg-type]
    return base_settings(inputs=(FAST_POINT,), smoothing_s=0.0, cooling=cs, limit_max_c=30.0)


def steady(
    s: ZoneSettings, delay: float, hours: float = 12.0
) -> list[tuple[float, ZoneOutputs, ZoneState]]:
    controller = ZoneController(s)
    plant = FirstOrderPlant(3 * 3600.0, 40.0, 0.0, start=24.0, delay=delay)
    state = controller.initial_state(0.0)
    trace = []
    now = 0.0
    for _ in range(round(hours * 3600 / TICK)):
        now += TICK
        state, out = controller.step(state, sample(plant.temperature, now), now)
        assert out.cooling is not None
        plant.advance(TICK, out.cooling.demand)
        trace.append((now, out, state))
    return trace


def cycles_per_hour(trace: list[tuple[float, ZoneOutputs, ZoneState]]) -> float:
    def on(out: ZoneOutputs) -> bool:
        assert out.cooling is not None
        return out.cooling.demand

    ons = sum(1 for a, b in itertools.pairwise(trace) if on(b[1]) and not on(a[1]))
    return ons / ((trace[-1][0] - trace[0][0]) / 3600.0)


def scale(state: ZoneState) -> float:
    assert state.cooling is not None
    return state.cooling.tau_scale


@pytest.mark.parametrize(("delay", "direction"), [(140.0, 1.0), (300.0, -1.0)])
def test_cooling_regulation_brings_the_plant_to_the_cooling_cycle_rate(
    delay: float, direction: float
) -> None:
    """A room that moves with each burst of cooling cycles faster than the anticipator alone
    (140 s dead time: about 4.75 an hour against 4), a long dead time slower (300 s: about
    3.25); regulation scales the cooling time constant (longer, shorter) until the cooling
    type's cycle rate is met, as it does the heating one's."""
    s = chilled_water()
    assert s.cooling is not None
    rate = s.cooling.cycle_rate_cph
    unregulated = steady(replace(s, cooling=replace(s.cooling, cycle_rate_regulation=False)),
                         delay)[-1440:]  # the last 4 h
    regulated = steady(s, delay)[-1440:]
    assert (cycles_per_hour(unregulated) - rate) * direction > 0.5
    assert cycles_per_hour(regulated) == pytest.approx(rate, abs=0.25)
    assert (scale(regulated[-1][2]) - 1.0) * direction > 0.1
    assert scale(unregulated[-1][2]) == 1.0


def test_cooling_regulation_is_on_only_for_a_time_constant_derived_from_the_cycle_rate() -> None:
    """As for heating: a time constant written in the site file is the integrator's, left
    alone; one derived from the cycle rate is regulated."""
    def zone(tuning: dict[str, float]) -> Zone:
        return Zone.model_validate(
            {"name": "z", "inputs": ["t"], "heating": "forced-air",
             "cooling": {"output": "c", "type": "chilled-water", "tuning": tuning}}
        )

    derived = cooling_settings(zone({}))
    given = cooling_settings(zone({"anticipator_time_constant_s": 600.0}))
    assert derived is not None and derived.cycle_rate_regulation
    assert given is not None and not given.cycle_rate_regulation
    assert CoolingSettings.for_cooling_type("chilled-water").cycle_rate_regulation
    assert not CoolingSettings.for_cooling_type(
        "chilled-water", anticipator_time_constant_s=600.0
    ).cycle_rate_regulation
    # and a time constant given, the slow plant keeps its slow cycle
    fixed = chilled_water(anticipator_time_constant_s=derived.anticipator_time_constant_s)
    assert scale(steady(fixed, 300.0, hours=4.0)[-1][2]) == 1.0


def _lagged_run(level: Level, hours: float) -> ZoneState:
    controller = ZoneController(chilled_water())
    plant = FirstOrderPlant(3 * 3600.0, 40.0, 0.0, start=24.0, delay=300.0)
    state = controller.initial_state(0.0)
    now = 0.0
    for _ in range(round(hours * 3600 / TICK)):
        now += TICK
        inputs = replace(sample(plant.temperature, now), scheduled_level=level)
        state, out = controller.step(state, inputs, now)
        assert out.cooling is not None and out.level == level
        plant.advance(TICK, out.cooling.demand)
    return state


def test_cooling_regulation_adapts_only_at_the_default_level() -> None:
    """A long dead time slows the cooling cycle; at comfort (the default level) regulation
    shortens the cooling time constant, in a set-up (economy, 28 C) it leaves it alone, as
    it does the heating one in a set-back (a time constant shortened at a low on-fraction
    races the call into the cycle limit when the default level returns)."""
    assert scale(_lagged_run("comfort", 8.0)) < 0.9
    assert scale(_lagged_run("economy", 8.0)) == 1.0


def test_resume_keeps_the_cooling_scale_within_its_bounds() -> None:
    """A saved cooling scale comes back as saved, within [0.5, 2] (a hand-edited 5 becomes 2),
    and the anticipator follows the call over the gap with the scaled time constant."""
    s = chilled_water()
    assert s.cooling is not None
    controller = DualZoneController(s)
    state = controller.initial_state(0.0)
    assert state.cooling is not None
    for saved, expected in ((0.7, 0.7), (5.0, 2.0), (0.1, 0.5)):
        edited = with_cooling_state(
            state, replace(state.cooling, tau_scale=saved, anticipator_k=1.0)
        )
        gap = 300.0
        resumed = controller.resume(edited, gap, False, cooling_on=False)
        assert resumed.cooling is not None
        assert resumed.cooling.tau_scale == expected
        tau = s.cooling.anticipator_time_constant_s * expected
        # the call off over the gap: the anticipator decays from 1.0 with the scaled tau
        assert resumed.cooling.anticipator_k == pytest.approx(math.exp(-gap / tau), rel=1e-9)
    # without regulation the scale is 1 whatever was saved
    plain = DualZoneController(
        replace(s, cooling=replace(s.cooling, cycle_rate_regulation=False))
    )
    edited = with_cooling_state(state, replace(state.cooling, tau_scale=0.7))
    resumed = plain.resume(edited, 300.0, False, cooling_on=False)
    assert resumed.cooling is not None and resumed.cooling.tau_scale == 1.0


def test_a_cooling_state_saved_before_regulation_loads_unregulated() -> None:
    """A state file from before the cooling call was regulated (no tau_scale, no cycle_clean
    in its cooling part) loads with scale 1 and no cycle running; a saved scale round-trips."""
    controller = ZoneController(chilled_water())
    state = controller.initial_state(0.0)
    assert state.cooling is not None
    text = with_cooling_state(state, replace(state.cooling, tau_scale=0.8)).to_json()
    assert ZoneState.from_json(text).cooling == replace(state.cooling, tau_scale=0.8)
    head, cooling = text.split('"cooling":')
    old = head + '"cooling":' + cooling.replace(',"tau_scale":0.8', "").replace(
        ',"cycle_clean":false', ""
    )
    assert "tau_scale" not in old.split('"cooling":')[1]
    assert "cycle_clean" not in old.split('"cooling":')[1]
    loaded = ZoneState.from_json(old).cooling
    assert loaded is not None and loaded.tau_scale == 1.0 and not loaded.cycle_clean
