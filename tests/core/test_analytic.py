"""The controller against closed-form solutions it did not write.

Sources (../shared/REFERENCES.md and DESIGN.md):
- the anticipator's exact exponential update (DESIGN.md "Control law" step 3);
- anticipator relay oscillation with the room held steady, on = off =
  tau ln((G + D)/(G - D)) at 50 % on-time [derived], and the same model solved for
  the band at other on-fractions [derived, derivation below];
- relay control of a first-order plant with and without dead time, 270.0 s and
  854.8 s [derived; computed] (REFERENCES.md "Relay (on/off) control of a
  first-order plant").
"""

from __future__ import annotations

import itertools
import math

import pytest
from scipy.optimize import brentq

from roomloop.core import ZoneController

from .helpers import FAST_POINT, FirstOrderPlant, run, sample, settings, switch_times

G = 1.5
D = 0.5
TAU = 600.0


def _free_cycling(**changes: object) -> ZoneController:
    """No short-cycle limits, no droop: only the anticipator and the band act."""
    values: dict[str, object] = {
        "anticipator_gain_k": G,
        "differential_k": D,
        "anticipator_time_constant_s": TAU,
        "min_on_s": 0.0,
        "min_off_s": 0.0,
        "max_cycles_per_hour": 60,
        "droop_compensation": False,
        # the sizing model itself, not the controller's regulation of it on a real plant
        "cycle_rate_regulation": False,
        # the test's temperatures jump on purpose: no rate-of-change check
        "inputs": (FAST_POINT,),
    }
    values.update(changes)
    return ZoneController(settings(**values))


@pytest.mark.parametrize("tick", [1.0, 7.0, 30.0])
def test_anticipator_alone_follows_its_exponential_solution(tick: float) -> None:
    """Relay held on (room far below the set point), then off (far above): a(t) is exact.

    Reference: a(t) = G (1 - exp(-t / tau)) rising from 0, and a(t) = a0 exp(-t / tau)
    decaying (the solution of tau da/dt = G u - a; DESIGN.md "Control law" step 3).
    """
    controller = _free_cycling()
    rising = run(controller, lambda now, on: 10.0, end=1800.0, tick=tick)
    assert all(out.demand for _, out, _ in rising)
    for now, out, _ in rising:
        # The relay switches on at the first tick, so it has been on for now - tick.
        expected = G * (1.0 - math.exp(-(now - tick) / TAU))
        assert out.anticipator_k == pytest.approx(expected, rel=1e-9, abs=1e-12)
    a0 = rising[-1][1].anticipator_k
    state = rising[-1][2]
    t0 = rising[-1][0]
    falling = run(controller, lambda now, on: 30.0, start=t0, end=t0 + 1800.0, tick=tick,
                  state=state)
    # The first tick still carries the on-state of the previous tick; from then on it is off.
    a1 = falling[0][1].anticipator_k
    assert a1 == pytest.approx(G + (a0 - G) * math.exp(-tick / TAU), rel=1e-9)
    for now, out, _ in falling[1:]:
        expected = a1 * math.exp(-(now - t0 - tick) / TAU)
        assert out.anticipator_k == pytest.approx(expected, rel=1e-9, abs=1e-12)


def _model_on_off(offset: float) -> tuple[float, float]:
    """Room held at S - c: a cycles between c - D/2 and c + D/2.

    Derivation: a rises toward G (a(t) = G + (a0 - G) e^(-t/tau)), so the on-time from
    c - D/2 to c + D/2 is tau ln((G - c + D/2)/(G - c - D/2)); it decays toward 0, so the
    off-time is tau ln((c + D/2)/(c - D/2)). [derived]
    """
    on = TAU * math.log((G - offset + D / 2) / (G - offset - D / 2))
    off = TAU * math.log((offset + D / 2) / (offset - D / 2))
    return on, off


def _measured_on_off(offset: float, tick: float = 1.0) -> tuple[float, float]:
    controller = _free_cycling()
    trace = run(controller, lambda now, on: 20.0 - offset, end=6 * 3600.0, tick=tick)
    events = sorted([(t, True) for t in switch_times(trace, True)]
                    + [(t, False) for t in switch_times(trace, False)])
    # Skip the first cycle (the anticipator starts from 0, not from the band's edge).
    runs = list(itertools.pairwise(events[2:]))
    on_runs = [b[0] - a[0] for a, b in runs if a[1]]
    off_runs = [b[0] - a[0] for a, b in runs if not a[1]]
    assert len(on_runs) >= 3 and len(off_runs) >= 3
    return sum(on_runs) / len(on_runs), sum(off_runs) / len(off_runs)


def test_room_held_steady_cycles_at_the_sizing_formula_at_50_percent() -> None:
    """DESIGN.md / REFERENCES.md [derived]: on = off = tau ln((G + D)/(G - D)) at 50 %."""
    expected = TAU * math.log((G + D) / (G - D))
    on, off = _measured_on_off(G / 2)
    assert on == pytest.approx(expected, rel=0.02)
    assert off == pytest.approx(expected, rel=0.02)


@pytest.mark.parametrize("fraction", [0.3, 0.6])
def test_room_held_steady_at_other_on_fractions_matches_the_model(fraction: float) -> None:
    """The same model solved for the band offset c giving the on-fraction [derived];
    scipy's brentq (an outside root finder) solves it."""
    offset = brentq(
        lambda c: _model_on_off(c)[0] / sum(_model_on_off(c)) - fraction,
        D / 2 + 1e-9,
        G - D / 2 - 1e-9,
    )
    expected_on, expected_off = _model_on_off(offset)
    on, off = _measured_on_off(offset)
    assert on == pytest.approx(expected_on, rel=0.02)
    assert off == pytest.approx(expected_off, rel=0.02)
    assert on / (on + off) == pytest.approx(fraction, abs=0.01)


@pytest.mark.parametrize(
    ("delay", "expected_run", "peak", "trough"),
    [
        # REFERENCES.md: tau = 3 h, T_a = 0, T_inf = 40, band 19.75-20.25 -> 270.0 s [computed]
        (0.0, 270.0, 20.25, 19.75),
        # REFERENCES.md: same plant with L = 300 s -> 854.8 s, peak 20.791, trough 19.209
        # [derived; computed]
        (300.0, 854.8, 20.791, 19.209),
    ],
)
def test_plain_hysteresis_on_a_first_order_plant(
    delay: float, expected_run: float, peak: float, trough: float
) -> None:
    """Gain 0 and no droop make the controller a plain hysteresis on [S - D/2, S + D/2]."""
    tick = 0.25
    controller = _free_cycling(anticipator_gain_k=0.0)
    plant = FirstOrderPlant(3 * 3600.0, 0.0, 40.0, start=20.0, delay=delay)
    state = controller.initial_state(0.0)
    times: list[tuple[float, bool]] = []
    temps: list[tuple[float, float]] = []
    previous = False
    steps = int(4 * 3600 / tick)
    for i in range(1, steps + 1):
        now = i * tick
        state, out = controller.step(state, sample(plant.temperature, now), now)
        if out.demand != previous:
            times.append((now, out.demand))
            previous = out.demand
        plant.advance(tick, out.demand)
        temps.append((now + tick, plant.temperature))
    # complete runs after the first full cycle
    runs_on = [b[0] - a[0] for a, b in itertools.pairwise(times) if a[1]][1:]
    runs_off = [b[0] - a[0] for a, b in itertools.pairwise(times) if not a[1]][1:]
    assert len(runs_on) >= 3 and len(runs_off) >= 3
    for run_s in runs_on + runs_off:
        assert run_s == pytest.approx(expected_run, rel=0.01)
    settled = [t for when, t in temps if when > times[2][0]]
    assert max(settled) == pytest.approx(peak, abs=0.01)
    assert min(settled) == pytest.approx(trough, abs=0.01)
