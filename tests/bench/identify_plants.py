"""Benchmark: ``roomloop tune``'s identification over every built-in plant and random plants.

The long variant of ``tests/history/test_identify.py`` (which runs two of these cases in the
suite): for each plant, a week of history at a 10 s tick (seeded noise, 0.1 K sensor steps)
plus an eighth day; the plant identified on the week, its prediction of the unseen day, and
its time constants against the true plant's (goals from issue 11: unseen-day RMS < 0.1 K,
time constants the data excite within 15 %). Baseline in the same process: simulating the
history, for the ratio identify / simulate. Exit 1 when a goal is missed.

Run: python tests/bench/identify_plants.py [--random N] [--plants hydronic,steam]
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parents[1] / "history"))
import numpy as np
from simulated_history import random_plant, simulate

from roomloop.core.settings import ZoneSettings
from roomloop.plant.identify import fit_on, predict
from roomloop.plant.loader import BUILTIN_PLANTS, HEATING_FOR_PLANT, load_plant
from roomloop.plant.spec import PlantSpec


def one(plant: PlantSpec, heating: str, seed: int) -> tuple[str, bool]:
    start = time.perf_counter()
    sim = simulate(plant, ZoneSettings.for_heating_type(heating), days=8, seed=seed)
    sim_s = time.perf_counter() - start
    start = time.perf_counter()
    fit, series, until = fit_on(sim.history, 7 * 86400.0, heater_w=plant.heater_w, heating=heating)
    fit_s = time.perf_counter() - start
    yp = predict(fit, series, until)
    unseen = np.isfinite(series.y)
    unseen[:until] = False
    rms = float(np.sqrt(np.mean((yp[unseen] - series.y[unseen]) ** 2)))
    assert plant.mass is not None and plant.emitter is not None
    true_mass = plant.node_time_constants_s()[("mass", "capacity_j_per_k")]
    true_building = (
        plant.room.capacity_j_per_k + plant.mass.capacity_j_per_k
        + plant.emitter.capacity_j_per_k
    ) / plant.room.loss_w_per_k
    nodes = fit.node_time_constants_s()
    errors = {
        "mass": nodes["mass"] / true_mass - 1.0,
        "building": nodes["building"] / true_building - 1.0,
        "H": fit.params["H"] / plant.room.loss_w_per_k - 1.0,
    }
    excited = fit.rel_sd.get("Ce", 1.0) < 0.15 and fit.rel_sd.get("Ke", 1.0) < 0.15
    if excited and plant.emitter.is_linear:
        true_e = plant.node_time_constants_s()[("emitter", "capacity_j_per_k")]
        errors["emitter"] = nodes["emitter"] / true_e - 1.0
    ok = rms < 0.1 and all(abs(e) <= 0.15 for e in errors.values())
    line = (
        f"{plant.name:<12} {heating:<11} {rms:7.3f} {fit.rms_k:7.3f} "
        f"{true_mass / 3600:6.1f} {true_building / 3600:6.1f} "
        + " ".join(f"{k} {100 * v:+.0f}%" for k, v in errors.items())
        + f"  sim {sim_s:.1f} s fit {fit_s:.1f} s (ratio {fit_s / sim_s:.2f})"
        + ("" if ok else "  MISSED")
    )
    return line, ok


def main() -> int:
    parser = argparse.ArgumentParser()
    parser.add_argument("--random", type=int, default=6, help="random plants (seeds 1..N)")
    parser.add_argument("--plants", default=",".join(BUILTIN_PLANTS))
    args = parser.parse_args()
    cases: list[tuple[PlantSpec, str, int]] = [
        (load_plant(name), HEATING_FOR_PLANT[name], 3) for name in args.plants.split(",") if name
    ]
    cases += [(*random_plant(seed), seed) for seed in range(1, args.random + 1)]
    print("plant        heating      RMS-K   fit-K  mass-h bldg-h errors of the fitted time "
          "constants (goal: within 15 %), unseen-day RMS goal < 0.1 K")
    all_ok = True
    for plant, heating, seed in cases:
        line, ok = one(plant, heating, seed)
        print(line, flush=True)
        all_ok = all_ok and ok
    print("every goal met" if all_ok else "some goal missed")
    return 0 if all_ok else 1


if __name__ == "__main__":
    sys.exit(main())
