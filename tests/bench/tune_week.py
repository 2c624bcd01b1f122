"""Benchmark: ``roomloop tune``'s identification on a 7-day, 10 s history: wall time, peak RSS.

Goals (issue): under 60 s and 400 MB. Baseline in the same process: the simulation that
made the history (the standard of "how long a week of plant takes"), for the ratio.
Run: python tests/bench/tune_week.py [--plant hydronic]
"""

from __future__ import annotations

import argparse
import resource
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parents[1] / "history"))
from simulated_history import simulate

from roomloop.plant.loader import load_plant


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--plant", default="hydronic")
    parser.add_argument("--no-outdoor", action="store_true")
    args = parser.parse_args()
    plant = load_plant(args.plant)
    start = time.perf_counter()
    history = simulate(plant, days=7).history
    sim_s = time.perf_counter() - start
    if args.no_outdoor:
        history.outdoor = None
    from roomloop.plant.identify import identify

    start = time.perf_counter()
    fit, tried, _ = identify(history, heater_w=plant.heater_w, heating=args.plant)
    tune_s = time.perf_counter() - start
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"plant {args.plant}, {len(history.time)} ticks, outdoor {not args.no_outdoor}")
    print(f"identify: {tune_s:.1f} s wall (goal < 60), peak RSS {rss_mb:.0f} MB (goal < 400)")
    print(f"structures {[f.structure for f in tried]}, chosen {fit.structure}, "
          f"RMS {fit.rms_k:.3f} K")
    print(f"baseline (simulating the week): {sim_s:.1f} s; ratio identify/simulate "
          f"{tune_s / sim_s:.2f}")


if __name__ == "__main__":
    main()
