"""Benchmark: ``roomloop tune`` on a 7-day, 10 s history: wall time, peak RSS.

Goals (issue): under 60 s and 400 MB, so that ``tune`` runs on the Pi itself. Two
figures: ``identify()`` alone, in this process (the fit), and the whole command,
``roomloop tune -c SITE --zone Z --history week.csv`` in a child process (reading
the CSV, the fit, and the tuning search, which costs most of the time), once with
the CSV's ``outdoor`` column and once without it (the fit of an unknown load
instead). The child's peak RSS is its own high-water mark (VmHWM, Linux), read as it
exits. Baseline in the same process: the simulation that made the history (the
standard of "how long a week of plant takes"), for the ratios.
Run: python tests/bench/tune_week.py [--plant hydronic] [--no-outdoor]
"""

from __future__ import annotations

import argparse
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from zoneinfo import ZoneInfo

sys.path.insert(0, str(Path(__file__).parents[1] / "history"))
from simulated_history import one_zone_site, simulate

from roomloop.history.csvfile import write_csv
from roomloop.history.store import ZoneHistory
from roomloop.plant.loader import load_plant

TUNE_TIMEOUT_S = 900.0


CHILD = """\
import atexit, sys
def peak():
    # the high-water mark of this process image alone (VmHWM): ru_maxrss carries the
    # parent's over fork and exec (Linux keeps the old image's peak in signal->maxrss;
    # recalled from the kernel's sources, from memory; seen here: it read the parent's)
    with open("/proc/self/status") as status, open(sys.argv[1], "w") as out:
        out.write(next(line for line in status if line.startswith("VmHWM:")).split()[1])
atexit.register(peak)
from roomloop.cli import main
sys.exit(main(sys.argv[2:]))
"""


def _run_child(argv: list[str], tmp: Path) -> tuple[int, float, float, str]:
    """``roomloop ARGV`` in a child process, as ``python -m roomloop`` runs it: exit code,
    wall seconds, the child's own peak RSS (MB), its output. Killed after TUNE_TIMEOUT_S."""
    peak_file = tmp / "peak-kb"
    peak_file.unlink(missing_ok=True)
    with tempfile.TemporaryFile() as out:
        start = time.perf_counter()
        done = subprocess.run(
            [sys.executable, "-c", CHILD, str(peak_file), *argv],
            stdout=out, stderr=subprocess.STDOUT, timeout=TUNE_TIMEOUT_S, check=False,
        )
        wall = time.perf_counter() - start
        out.seek(0)
        text = out.read().decode(errors="replace")
    peak_mb = int(peak_file.read_text()) / 1024.0 if peak_file.exists() else float("nan")
    return done.returncode, wall, peak_mb, text


def _time_tune(
    history: ZoneHistory, heating: str, heater_w: float, *, outdoor: bool, tmp: Path
) -> tuple[int, float, float, str]:
    """The whole ``roomloop tune --history week.csv`` on ``history``."""
    site = tmp / "site.yaml"
    site.write_text(
        one_zone_site(tmp / "state", heating=heating, heater_w=heater_w, site="bench-house")
    )
    csv_path = tmp / ("week.csv" if outdoor else "week-no-outdoor.csv")
    kept = history.outdoor
    if not outdoor:
        history.outdoor = None
    try:
        with open(csv_path, "w", encoding="utf-8", newline="") as handle:
            write_csv(history, handle, tz=ZoneInfo("UTC"), units="C")
    finally:
        history.outdoor = kept
    return _run_child(
        ["tune", "-c", str(site), "--zone", "den", "--history", str(csv_path)], tmp
    )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--plant", default="hydronic")
    parser.add_argument(
        "--no-outdoor", action="store_true", help="identify() without the outdoor temperature"
    )
    args = parser.parse_args()
    plant = load_plant(args.plant)
    heating = (
        args.plant if args.plant in ("forced-air", "hydronic", "underfloor", "electric")
        else "hydronic"
    )
    start = time.perf_counter()
    history = simulate(plant, days=7).history
    sim_s = time.perf_counter() - start
    full_outdoor = history.outdoor
    if args.no_outdoor:
        history.outdoor = None
    from roomloop.plant.identify import identify

    start = time.perf_counter()
    fit, tried, _ = identify(history, heater_w=plant.heater_w, heating=heating)
    tune_s = time.perf_counter() - start
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0
    print(f"plant {args.plant}, {len(history.time)} ticks, outdoor {not args.no_outdoor}")
    print(f"identify: {tune_s:.1f} s wall (goal < 60), peak RSS {rss_mb:.0f} MB (goal < 400)")
    print(f"structures {[f.structure for f in tried]}, chosen {fit.structure}, "
          f"RMS {fit.rms_k:.3f} K")
    print(f"baseline (simulating the week): {sim_s:.1f} s; ratio identify/simulate "
          f"{tune_s / sim_s:.2f}")
    history.outdoor = full_outdoor
    with tempfile.TemporaryDirectory() as tmp:
        for outdoor in (True, False):
            code, wall, child_mb, text = _time_tune(
                history, heating, plant.heater_w, outdoor=outdoor, tmp=Path(tmp)
            )
            told = (
                "recommends new settings" if "site-file lines to paste" in text
                else "today's tuning is the best" if "nothing to change" in text
                else "no recommendation" if "no recommendation" in text
                else "no fit"
            )
            print(
                f"roomloop tune --history week.csv, {'with' if outdoor else 'without'} "
                f"outdoor column: {wall:.1f} s wall (goal < 60), peak RSS {child_mb:.0f} MB "
                f"(goal < 400), exit {code}, {told}; ratio tune/simulate {wall / sim_s:.2f}"
            )
            if code not in {0, 1}:
                print("  its output:\n" + "\n".join("  " + line for line in text.splitlines()))


if __name__ == "__main__":
    main()
