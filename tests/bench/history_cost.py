"""Benchmark: history write cost per zone-tick (CPU) and bytes on disk per zone-day.

Goal (issue): under 200 kB per zone-day. Baseline in the same process: the same ticks
written as one plain SQLite row each (no packing), so the ratio shows what packing buys.
Run: python tests/bench/history_cost.py [--days N] [--zones N]
"""

from __future__ import annotations

import argparse
import os
import sqlite3
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).parents[1] / "history"))
from simulated_history import simulate

from roomloop.history.store import HistoryFile
from roomloop.plant.loader import load_plant


def size(path: Path) -> int:
    return sum(p.stat().st_size for p in path.parent.glob(path.name + "*"))


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--days", type=float, default=2.0)
    parser.add_argument("--zones", type=int, default=2)
    args = parser.parse_args()
    ticks = simulate(load_plant("hydronic"), days=args.days).ticks
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "h.sqlite"
        db = HistoryFile(path)
        start = time.process_time()
        for i in range(0, len(ticks), 6):  # 6 ticks per commit: commit_s 60 at a 10 s tick
            db.write({f"zone{z}": ticks[i : i + 6] for z in range(args.zones)})
        cpu = time.process_time() - start
        db.close()
        ours = size(path)
        plain = Path(tmp) / "plain.sqlite"
        con = sqlite3.connect(plain)
        con.execute("PRAGMA journal_mode=WAL")
        con.execute(
            "CREATE TABLE t (zone TEXT, at REAL, temp REAL, sp REAL, level TEXT, mode TEXT, "
            "relay INT, a REAL, b REAL, fs INT, reason TEXT, points TEXT)"
        )
        con.execute("CREATE INDEX t_i ON t (zone, at)")
        start = time.process_time()
        for i in range(0, len(ticks), 6):
            with con:
                for z in range(args.zones):
                    con.executemany(
                        "INSERT INTO t VALUES (?,?,?,?,?,?,?,?,?,?,?,?)",
                        [
                            (f"zone{z}", t.at, t.temperature, t.setpoint, t.level, t.mode,
                             int(t.relay), t.anticipator_k, t.droop_k, int(t.fail_safe),
                             t.reason, repr(t.points))
                            for t in ticks[i : i + 6]
                        ],
                    )
        base_cpu = time.process_time() - start
        con.close()
        base = size(plain)
    zone_days = args.zones * args.days
    zone_ticks = args.zones * len(ticks)
    print(f"zone-days {zone_days:g}, zone-ticks {zone_ticks}, pid {os.getpid()}")
    print(f"packed: {ours / zone_days / 1000:.1f} kB per zone-day (goal < 200), "
          f"{cpu / zone_ticks * 1e6:.1f} us CPU per zone-tick")
    print(f"plain rows (baseline): {base / zone_days / 1000:.1f} kB per zone-day, "
          f"{base_cpu / zone_ticks * 1e6:.1f} us CPU per zone-tick")
    print(f"ratio packed/plain: bytes {ours / base:.3f}, CPU {cpu / max(base_cpu, 1e-9):.2f}")


if __name__ == "__main__":
    main()
