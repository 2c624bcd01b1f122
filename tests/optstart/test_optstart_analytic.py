"""The learned warm-up against a room whose warm-up is known in closed form.

Analytic source: the step response of a first-order system (Newton's law of heating and
cooling for one lumped capacity C with loss conductance H and heater power P, a standard
result of heat transfer textbooks) with a dead time L:

    T(t) = T0                                        for t < L
    T(t) = T_inf - (T_inf - T0) exp(-(t - L) / tau)  for t >= L,  tau = C / H,
    T_inf = T_out + P / H.

Derived from it (the derivation the assertions use):

* the room is DEAD_RISE_K above T0 at  t_r = L + tau ln((T_inf - T0) / (T_inf - T0 - d)),
  which is the dead time the planner measures;
* it reaches the target Tt = S - REACHED_K at  t_t = L + tau ln((T_inf - T0) / (T_inf - Tt));
* so the rate the planner measures is  (Tt - T0 - d) / (t_t - t_r)  (K per unit time).

Nothing here comes from the code under test: the expected values are computed from these
formulas, the planner only sees the temperatures, tick by tick.
"""

from __future__ import annotations

import math

import pytest

from roomloop.core.optimum_start import (
    DEAD_RISE_K,
    REACHED_K,
    OptimumStartInputs,
    OptimumStartSettings,
    OptimumStartState,
    plan,
)

TICK_S = 10.0
DAY = 86400.0
SWITCH0 = 1_767_337_200.0  # 2026-01-02 07:00 UTC; only differences matter
SETPOINTS = (("comfort", 20.0), ("standby", 18.0), ("economy", 17.0), ("protection", 7.0))
TARGET_C = 20.0 - REACHED_K


def _room(
    t_on: float | None, t: float, *, t0: float, t_inf: float, tau: float, dead: float
) -> float:
    """The closed-form room temperature at ``t`` for heating switched on at ``t_on``."""
    if t_on is None or t - t_on < dead:
        return t0
    return t_inf - (t_inf - t0) * math.exp(-(t - t_on - dead) / tau)


def _expected(t0: float, t_inf: float, tau: float, dead: float) -> tuple[float, float, float]:
    """(measured dead time s, measured rate K/h, time to reach the target s): see the docstring."""
    t_r = dead + tau * math.log((t_inf - t0) / (t_inf - t0 - DEAD_RISE_K))
    t_t = dead + tau * math.log((t_inf - t0) / (t_inf - TARGET_C))
    return t_r, (TARGET_C - t0 - DEAD_RISE_K) / ((t_t - t_r) / 3600.0), t_t


def _morning(
    cfg: OptimumStartSettings, state: OptimumStartState, switch: float, *,
    t0: float, t_inf: float, tau: float, dead: float, outdoor: float | None,
) -> tuple[OptimumStartState, float | None]:
    """One morning: economy until the switch, comfort after; the room heats from the tick the
    planner's level turns comfort. Returns the state and when heating began."""
    t = switch - 6 * 3600.0
    t_on: float | None = None
    while t < switch + 6 * 3600.0:
        before = t < switch
        inputs = OptimumStartInputs(
            mode="auto",
            scheduled_level="economy" if before else "comfort",
            next_switch_at=switch if before else switch + 15 * 3600.0,
            next_level="comfort" if before else "economy",
            temperature_c=_room(t_on, t, t0=t0, t_inf=t_inf, tau=tau, dead=dead),
            outdoor_c=outdoor,
        )
        state, decision = plan(cfg, state, inputs, t)
        if decision.level == "comfort" and t_on is None:
            t_on = t
        t += TICK_S
    # back to economy for the night: the next morning starts from T0 again
    night = OptimumStartInputs("auto", "economy", switch + DAY, "comfort", t0, outdoor)
    state, _ = plan(cfg, state, night, switch + 15 * 3600.0)
    return state, t_on


@pytest.mark.parametrize(
    ("tau_h", "power_over_h", "dead_s"),
    [(1.0, 25.0, 300.0), (3.0, 30.0, 900.0), (6.0, 40.0, 1800.0)],
)
def test_rate_converges_to_the_first_order_response(
    tau_h: float, power_over_h: float, dead_s: float
) -> None:
    """From a wrong initial rate (0.5 K/h) the learned dead time and rate equal the closed-form
    values after one morning (within a tick), and from then on the room reaches the set point
    at the switch: not after it, and not earlier than the plan's known 0.2 K/rate bias."""
    t_out, t0 = 0.0, 17.0
    t_inf, tau = t_out + power_over_h, tau_h * 3600.0
    cfg = OptimumStartSettings(
        enabled=True, earliest_s=8 * 3600.0, initial_rate_k_per_h=0.5, dead_time_s=0.0,
        setpoints=SETPOINTS,
    )
    want_dead, want_rate, want_reach = _expected(t0, t_inf, tau, dead_s)
    state = OptimumStartState()
    for day in range(5):
        switch = SWITCH0 + day * DAY
        state, t_on = _morning(
            cfg, state, switch, t0=t0, t_inf=t_inf, tau=tau, dead=dead_s, outdoor=t_out
        )
        assert t_on is not None
        rate, _ = state.model.rate_at(t_out, 99.0)
        # one tick of quantisation on each end of a measured interval
        assert state.model.dead_time_or(-1.0) == pytest.approx(want_dead, abs=TICK_S)
        assert rate == pytest.approx(want_rate, rel=2 * TICK_S / (want_reach - want_dead))
        if day >= 1:  # planned with the learned values
            reached_at = t_on + want_reach
            assert reached_at <= switch + TICK_S, "the room is late at the switch"
            bias = 3600.0 * DEAD_RISE_K / want_rate  # lead = dead + gap / rate, see the docstring
            assert reached_at >= switch - bias - 2 * TICK_S


def test_each_outdoor_band_learns_its_own_rate() -> None:
    """Colder outdoors the same heater warms the room more slowly (T_inf = T_out + P / H):
    alternate mornings at -7 C and +8 C teach two bands their own closed-form rates."""
    tau, dead, power_over_h, t0 = 2 * 3600.0, 600.0, 28.0, 17.0
    cfg = OptimumStartSettings(
        enabled=True, earliest_s=6 * 3600.0, initial_rate_k_per_h=1.0, dead_time_s=600.0,
        setpoints=SETPOINTS,
    )
    state = OptimumStartState()
    for day in range(6):
        t_out = -7.0 if day % 2 == 0 else 8.0
        state, _ = _morning(
            cfg, state, SWITCH0 + day * DAY, t0=t0, t_inf=t_out + power_over_h, tau=tau,
            dead=dead, outdoor=t_out,
        )
    for t_out in (-7.0, 8.0):
        _, want_rate, want_reach = _expected(t0, t_out + power_over_h, tau, dead)
        rate, source = state.model.rate_at(t_out, 99.0)
        assert "3 warm-up(s)" in source
        assert rate == pytest.approx(want_rate, rel=2 * TICK_S / want_reach)
    assert state.model.rate_at(-7.0, 99.0)[0] < state.model.rate_at(8.0, 99.0)[0]
