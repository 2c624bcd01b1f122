"""Identification of a zone's plant (``roomloop tune``) against outside sources.

- A single-node room against Newton's law of cooling in closed form (REFERENCES.md:
  T(t) = T_a + (T0 - T_a) e^(-t/tau) [published]); the data are made from the closed
  form itself, not by roomloop's simulator.
- scipy.optimize.curve_fit as the reference for the same fit (an independent numerical
  reference, [published] library).
- Identification on simulated history (every built-in plant and seeded random plants in
  the plausible range, time constants from minutes to days; a week at a 10 s tick, seeded
  noise and 0.1 K sensor steps): the identified plant predicts an unseen eighth day within
  0.1 K RMS, and the time constants the week excites (the mass node's and the building's
  always, the emitter's where the fit determines it) come back within 15 %. The simulator
  is the reference here; the FOPDT case against Astrom and Hagglund's relay formulas is in
  test_identify_relay.py.
- Refusals: too little data, no switching, a stuck sensor.
- The daemon's path imports no numpy.
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from scipy import optimize

from roomloop.core.settings import ZoneSettings
from roomloop.history.store import ZoneHistory
from roomloop.plant.identify import IdentificationRefused, check_data, fit_on, identify, predict
from roomloop.plant.loader import BUILTIN_PLANTS, HEATING_FOR_PLANT, load_plant
from roomloop.plant.spec import PlantSpec

sys.path.insert(0, str(Path(__file__).parent))
from simulated_history import random_plant, simulate


def _newton_history(tau: float, t_a: float, t_inf: float, hours: float) -> ZoneHistory:
    """Relay on 2 h / off 2 h; each stretch follows the closed form exactly (10 s tick)."""
    h = ZoneHistory("room")
    temp = 15.0
    for k in range(int(hours * 360)):
        t = k * 10.0
        on = (t // 7200) % 2 == 0
        h.time.append(1e9 + t)
        h.temperature.append(temp)
        h.relay.append(on)
        h.setpoint.append(20.0)
        h.fail_safe.append(False)
        for col, v in ((h.level, ""), (h.mode, ""), (h.reason, "")):
            col.append(v)
        h.anticipator_k.append(0.0)
        h.droop_k.append(0.0)
        target = t_inf if on else t_a
        temp = target + (temp - target) * math.exp(-10.0 / tau)
    h.outdoor = [t_a] * len(h.time)
    return h


def test_single_node_room_against_newtons_law_of_cooling() -> None:
    """tau = C / H = 2e6 / 100 = 20000 s; T_inf - T_a = P / H = 2000 / 100 = 20 K (derived
    from the single-node model; the closed form is Newton's law of cooling)."""
    history = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    fit, _, _ = identify(history, heater_w=2000.0, structures=("room",))
    # the sensor lag and delay are free: the data have none, the fit must find ~none
    assert fit.params["Cr"] / fit.params["H"] == pytest.approx(20000.0, rel=0.01)
    assert fit.params["H"] == pytest.approx(100.0, rel=0.01)
    assert fit.rms_k < 0.01


def test_scipy_curve_fit_is_the_reference_on_the_same_cooling() -> None:
    """The closed-form cooling fitted by scipy.optimize.curve_fit and by roomloop agree."""
    history = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    t = np.array(history.time) - history.time[0]
    y = np.array(history.temperature, dtype=float)
    off = (t >= 7200) & (t < 14400)  # the first cooling stretch
    ts, ys = t[off] - 7200, y[off]

    def cooling(tt: np.ndarray, tau: float, t0: float) -> np.ndarray:
        return 5.0 + (t0 - 5.0) * np.exp(-tt / tau)

    (tau_ref, _), _ = optimize.curve_fit(cooling, ts, ys, p0=(5000.0, 20.0))
    assert tau_ref == pytest.approx(20000.0, rel=1e-6)  # exact data, exact answer
    fit, _, _ = identify(history, heater_w=2000.0, structures=("room",))
    assert fit.params["Cr"] / fit.params["H"] == pytest.approx(tau_ref, rel=0.01)


RANDOM_SEEDS = (1, 2, 3, 4)
LONG = os.environ.get("ROOMLOOP_LONG_TESTS") == "1"
"""Each case costs 15-45 s of CPU (a simulated week and its fit): the suite runs every
built-in plant and two random ones (about 2.5 minutes on 2 cores); ``ROOMLOOP_LONG_TESTS=1``
adds two more random plants, and ``tests/bench/identify_plants.py`` prints the figures of
all of them and of more random plants."""
IN_SUITE = {*BUILTIN_PLANTS, 1, 2}


KNOWN_MISSES: dict[str, str] = {}
"""Built-in plants whose identification misses a goal today, each with what it misses; a
strict xfail, so the test fails when the miss is mended and the entry must go."""


def _case(value: object) -> object:
    marks = [pytest.mark.slow]
    if isinstance(value, str) and value in KNOWN_MISSES:
        marks.append(pytest.mark.xfail(strict=True, reason=KNOWN_MISSES[value]))
    if value not in IN_SUITE:
        marks.append(
            pytest.mark.skipif(not LONG, reason="long variant: ROOMLOOP_LONG_TESTS=1 runs it")
        )
    return pytest.param(value, marks=marks)


def check_identified(plant: PlantSpec, heating: str, seed: int) -> dict[str, float]:
    """A week of ``plant``'s history at a 10 s tick (seeded noise, 0.1 K sensor steps),
    identified on its first seven days; the prediction of the unseen eighth day and the
    recovered time constants checked against the true plant. Returns the figures."""
    settings = ZoneSettings.for_heating_type(heating)
    sim = simulate(plant, settings, days=8, seed=seed)
    fit, series, until = fit_on(sim.history, 7 * 86400.0, heater_w=plant.heater_w, heating=heating)
    yp = predict(fit, series, until)
    unseen = np.isfinite(series.y)
    unseen[:until] = False
    rms = float(np.sqrt(np.mean((yp[unseen] - series.y[unseen]) ** 2)))
    assert rms < 0.1, f"{plant.name}: unseen day RMS {rms:.3f} K"
    nodes = fit.node_time_constants_s()
    true = plant.node_time_constants_s()
    assert plant.mass is not None and plant.emitter is not None
    building = (
        plant.room.capacity_j_per_k + plant.mass.capacity_j_per_k
        + plant.emitter.capacity_j_per_k
    ) / plant.room.loss_w_per_k
    # The slow ones a week excites: the whole building's always; the building mass's where
    # the fit determines its capacity and conductance to 15 % (a screed slab of 8.9 h beside
    # a mass of 5 h trades capacity with it along a valley of equal fit), and where it does
    # not, the truth lies within the fit's stated spread (no confident wrong answer).
    assert nodes["building"] == pytest.approx(building, rel=0.15)
    if fit.rel_sd["Cm"] < 0.15 and fit.rel_sd["Km"] < 0.15:
        assert nodes["mass"] == pytest.approx(true[("mass", "capacity_j_per_k")], rel=0.15)
    else:
        for key, truth in (
            ("Cm", plant.mass.capacity_j_per_k), ("Km", plant.mass.conductance_w_per_k)
        ):
            off = abs(math.log(fit.params[key] / truth))
            assert off <= 3.0 * fit.rel_sd[key], f"{plant.name}: {key} off by {off:.2f} (log)"
    assert fit.params["H"] == pytest.approx(plant.room.loss_w_per_k, rel=0.15)
    # The emitter's where the data excite it (the fit determines its capacity and
    # conductance to 15 %) and it has one time constant (a linear emitter; an EN 442
    # emitter's depends on its output).
    excited = fit.rel_sd.get("Ce", 1.0) < 0.15 and fit.rel_sd.get("Ke", 1.0) < 0.15
    if excited and plant.emitter.is_linear:
        assert nodes["emitter"] == pytest.approx(
            true[("emitter", "capacity_j_per_k")], rel=0.15
        )
    return {"rms_unseen_k": rms, "rms_fit_k": fit.rms_k}


def test_scipy_lsq_linear_is_the_reference_on_a_small_linear_case() -> None:
    """The single-node room sampled every 10 s is exactly linear in its discrete form,
    T[k+1] = a T[k] + b u[k] + c, with a = e^(-h/tau), b = (P/H)(1 - a), c = T_a (1 - a)
    [derived: zero-order hold of the first-order model]. scipy.optimize.lsq_linear solves
    that small linear least-squares problem exactly (the known answer: tau = 20000 s,
    H = 100 W/K); roomloop's fit on a 10 s grid must agree with it."""
    history = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    y = np.array(history.temperature, dtype=float)
    u = np.array(history.relay, dtype=float)
    a_mat = np.stack([y[:-1], u[:-1], np.ones(y.size - 1)], axis=1)
    ref = optimize.lsq_linear(a_mat, y[1:], method="bvls", tol=1e-14)
    a, b, c = ref.x
    tau_ref = -10.0 / math.log(a)
    h_ref = 2000.0 * (1.0 - a) / b
    assert tau_ref == pytest.approx(20000.0, rel=1e-6)  # the exact answer
    assert h_ref == pytest.approx(100.0, rel=1e-6)
    assert c / (1.0 - a) == pytest.approx(5.0, abs=1e-4)
    fit, _, _ = identify(history, heater_w=2000.0, structures=("room",), step_s=10.0)
    # (the fit's free slow load and sensor lag, bounded at 1 s, leave a few tenths of a %)
    assert fit.params["Cr"] / fit.params["H"] == pytest.approx(tau_ref, rel=5e-3)
    assert fit.params["H"] == pytest.approx(h_ref, rel=5e-3)


@pytest.mark.parametrize("name", [_case(n) for n in BUILTIN_PLANTS])
def test_builtin_plant_week_predicts_an_unseen_day(name: str) -> None:
    plant = load_plant(name)
    check_identified(plant, HEATING_FOR_PLANT[name], seed=3)  # under its heating type


@pytest.mark.parametrize("seed", [_case(n) for n in RANDOM_SEEDS])
def test_random_plant_week_predicts_an_unseen_day(seed: int) -> None:
    plant, heating = random_plant(seed)
    check_identified(plant, heating, seed=seed)


def test_without_the_outdoor_temperature_no_confident_wrong_answer() -> None:
    """Three days of the hydronic plant with no outdoor temperature (the daemon's history
    of a site without an outdoor point). A single-node room then fits the fast part with
    small uncertainties and a building time constant of under an hour (the true one is a
    day): that confident wrong answer must not be chosen. The fit's load (a slow part and a
    daily profile) follows the daily swing, and where the loss to outdoors is off, its
    stated uncertainty says so (the truth within two standard uncertainties + 15 %)."""
    plant = load_plant("hydronic")
    history = simulate(plant, days=3, seed=3).history
    history.outdoor = None
    # the full structure and the single-node room (no-mass, in between, left out for time)
    fit, tried, series = identify(
        history, heater_w=plant.heater_w, heating="hydronic", structures=("full", "room")
    )
    assert series.outdoor is None
    assert fit.structure != "room"
    room = [f for f in tried if f.structure == "room"]
    assert room and room[0].spread_determined  # the confident wrong answer was there to take
    # ... and its loss to outdoors (five times the true one, with a small spread) is not
    # passed off as determined: without the outdoor temperature no structure determines it
    assert room[0].params["H"] > 2.0 * plant.room.loss_w_per_k
    assert "H" in room[0].undetermined() and not room[0].determined
    assert "H" in fit.undetermined()
    assert room[0].node_time_constants_s()["building"] < 0.2 * 86400.0
    assert any("too simple" in note for note in fit.notes)
    assert fit.rms_k < 0.1
    h_err = abs(fit.params["H"] / plant.room.loss_w_per_k - 1.0)
    assert h_err <= 2.0 * fit.rel_sd["H"] + 0.15, (fit.params["H"], fit.rel_sd["H"])
    assert any("without the outdoor temperature" in note for note in fit.notes)


def test_refusals_name_the_reason() -> None:
    short = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=10)
    assert any("too little data" in r for r in check_data(short))
    flat = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    flat.relay = [True] * len(flat.relay)
    assert any("too little excitation" in r for r in check_data(flat))
    stuck = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    stuck.temperature = [20.0] * len(stuck.temperature)
    assert any("stuck sensor" in r for r in check_data(stuck))
    failsafe = _newton_history(tau=20000.0, t_a=5.0, t_inf=25.0, hours=48)
    failsafe.fail_safe = [True] * len(failsafe.fail_safe)
    with pytest.raises(IdentificationRefused, match="outside fail-safe"):
        identify(failsafe, heater_w=2000.0)


def test_daemon_path_imports_no_numpy() -> None:
    code = (
        "import sys\n"
        "import roomloop.cli, roomloop.cli.run, roomloop.service.app, roomloop.history.recorder\n"
        "import roomloop.cli.history, roomloop.cli.report, roomloop.cli.tune\n"
        "bad = [m for m in ('numpy', 'scipy') if m in sys.modules]\n"
        "print(bad); sys.exit(1 if bad else 0)\n"
    )
    done = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=False
    )
    assert done.returncode == 0, done.stdout + done.stderr
