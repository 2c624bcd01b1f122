"""The first-order plus dead-time room against the relay-feedback formulas.

Source: K. J. Astrom and T. Hagglund, "Automatic tuning of simple regulators with
specifications on phase and amplitude margins", Automatica 20(5), 1984, and their book
"PID Controllers: Theory, Design and Tuning" (ISA, 1995), relay auto-tuning; the closed forms
for a first-order plus dead-time plant are also in C.-C. Yu, "Autotuning of PID
Controllers" (Springer, 2nd ed. 2006). A plant of gain K, time constant T and dead time L
under an ideal relay of +-d (no hysteresis) oscillates with

    period     P = 2 T ln(2 e^(L/T) - 1)
    amplitude  a = K d (1 - e^(-L/T))

(check values T = 600 s, L = 120 s: P = 439.91 s, a = 0.18127 K d [published; computed]).

A single-node room with a transport delay is exactly that plant: T = C / H, K = 1 / H
(kelvin per watt), L the transport delay, and the relay's +-d is the heater's P/2 about
the mean when the outdoor temperature makes half the heater balance the losses at the
set point [derived].

1. roomloop's simulator (``PlantSimulation``) under an ideal relay shows the published
   period and amplitude.
2. ``roomloop tune``'s identification, on the history of that room under a relay decided
   at the service's 10 s tick, recovers K, T and L, and the formulas on the identified
   plant give back the period and amplitude.
"""

from __future__ import annotations

import itertools
import math

import pytest

from roomloop.history.store import ZoneHistory
from roomloop.plant.identify import identify
from roomloop.plant.model import PlantSimulation
from roomloop.plant.spec import PlantSpec

T_S = 600.0
L_S = 120.0
HEATER_W = 2000.0
LOSS_W_PER_K = 100.0
SETPOINT_C = 20.0
OUTDOOR_C = SETPOINT_C - HEATER_W / 2 / LOSS_W_PER_K  # half the heater balances the losses
K_D = (1.0 / LOSS_W_PER_K) * (HEATER_W / 2)  # K d = 10 K


def relay_period_s(t: float, dead: float) -> float:
    """Astrom and Hagglund: the period of an ideal relay on a FOPDT plant."""
    return 2.0 * t * math.log(2.0 * math.exp(dead / t) - 1.0)


def relay_amplitude(k_d: float, t: float, dead: float) -> float:
    """Astrom and Hagglund: the amplitude of that oscillation."""
    return k_d * (1.0 - math.exp(-dead / t))


def fopdt_room() -> PlantSpec:
    return PlantSpec.model_validate(
        {
            "name": "fopdt-room",
            "heater_w": HEATER_W,
            "transport_delay_s": L_S,
            "emitter": None,
            "room": {"capacity_j_per_k": T_S * LOSS_W_PER_K, "loss_w_per_k": LOSS_W_PER_K},
            "mass": None,
            "sensor": {"time_constant_s": 0.0, "resolution_k": 0.0, "noise_k": 0.0},
        }
    )


def test_the_published_check_values() -> None:
    """REFERENCES.md's computed check values of the two formulas."""
    assert relay_period_s(600.0, 120.0) == pytest.approx(439.91, abs=0.01)
    assert relay_amplitude(1.0, 600.0, 120.0) == pytest.approx(0.18127, abs=1e-5)


def _relay_run(
    dt_s: float, hours: float, *, night_c: float = SETPOINT_C
) -> tuple[list[float], list[float], list[bool], list[float]]:
    """The room under a relay decided every ``dt_s`` on the room air (no hysteresis), at
    the set point, or at ``night_c`` from 22:00 to 06:00."""
    sim = PlantSimulation(fopdt_room(), outdoor_c=OUTDOOR_C, room_c=SETPOINT_C - 0.5)
    times: list[float] = []
    temps: list[float] = []
    relay: list[bool] = []
    setpoints: list[float] = []
    for k in range(round(hours * 3600.0 / dt_s)):
        t = k * dt_s
        hour = (t / 3600.0) % 24.0
        setpoint = SETPOINT_C if 6.0 <= hour < 22.0 else night_c
        reading = sim.read_sensor()
        on = reading < setpoint
        times.append(t)
        temps.append(reading)
        relay.append(on)
        setpoints.append(setpoint)
        sim.advance(dt_s, on)
    return times, temps, relay, setpoints


def test_simulator_under_an_ideal_relay_gives_the_published_period_and_amplitude() -> None:
    times, temps, _, _ = _relay_run(0.1, 2.0)
    ups = [
        times[k - 1] + 0.1 * (SETPOINT_C - temps[k - 1]) / (temps[k] - temps[k - 1])
        for k in range(1, len(temps))
        if temps[k - 1] < SETPOINT_C <= temps[k]
    ]
    settled = ups[3:]  # the first cycles still carry the start
    assert len(settled) >= 8
    periods = [b - a for a, b in itertools.pairwise(settled)]
    # A relay decided every 0.1 s adds up to 0.1 s to the dead time at each switch.
    assert sum(periods) / len(periods) == pytest.approx(relay_period_s(T_S, L_S), abs=0.5)
    tail = temps[round(settled[0] / 0.1) :]
    amplitude = (max(tail) - min(tail)) / 2.0
    assert amplitude == pytest.approx(relay_amplitude(K_D, T_S, L_S), rel=0.005)
    assert (max(tail) + min(tail)) / 2.0 == pytest.approx(SETPOINT_C, abs=0.01)


def _history(
    times: list[float], temps: list[float], relay: list[bool], setpoints: list[float]
) -> ZoneHistory:
    h = ZoneHistory("fopdt")
    h.time = [1.7e9 + t for t in times]
    h.temperature = list(temps)
    h.relay = list(relay)
    n = len(times)
    h.setpoint = list(setpoints)
    h.level = h.mode = h.reason = [""] * n
    h.anticipator_k = h.droop_k = [0.0] * n
    h.fail_safe = [False] * n
    h.outdoor = [OUTDOOR_C] * n
    return h


def test_identification_recovers_the_fopdt_plant_and_its_relay_cycle() -> None:
    """A day of the room under a relay at the service's 10 s tick, identified on a 10 s
    grid with the single-node structure; the formulas on the identified K, T, L give the
    published period and amplitude of the true plant.

    A relay cycle alone fixes one point of the frequency response (period and amplitude:
    the ultimate gain and period), not the static gain K; Astrom and Hagglund take K from
    a separate step. Here the night set-back to 16 C is that step: the room cools freely
    towards the outdoor temperature at 22:00 and heats at full power at 06:00."""
    history = _history(*_relay_run(10.0, 25.0, night_c=16.0))
    fit, _, _ = identify(history, heater_w=HEATER_W, structures=("room",), step_s=10.0)
    p = fit.params
    t_fit = p["Cr"] / p["H"]
    # The data have no sensor lag: what the fit gives it adds to its dead time.
    l_fit = p["delay_s"] + p["tau_s"]
    assert 1.0 / p["H"] == pytest.approx(1.0 / LOSS_W_PER_K, rel=0.01)
    assert t_fit == pytest.approx(T_S, rel=0.01)
    assert l_fit == pytest.approx(L_S, abs=5.0)
    k_d_fit = (1.0 / p["H"]) * (HEATER_W / 2)
    assert relay_period_s(t_fit, l_fit) == pytest.approx(relay_period_s(T_S, L_S), rel=0.01)
    assert relay_amplitude(k_d_fit, t_fit, l_fit) == pytest.approx(
        relay_amplitude(K_D, T_S, L_S), rel=0.01
    )
    assert fit.rms_k < 0.02
