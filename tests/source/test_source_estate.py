"""The estate benchmark's smallest run (``tests/bench/estate.py``): its figures come out and
make sense. Real processes: two ``roomloop run`` daemons on a paced clock, one mosquitto
broker restarted part-way, the demo's plant servers over Modbus TCP on loopback.

Not a timed test: the latency goal is the benchmark's to print; here the figures only have
to exist and be consistent (samples taken, counts positive, no daemon died, nothing the
restart caused).
"""

from __future__ import annotations

import math
import shutil
import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "bench"))

from estate import Options, run_estate

pytestmark = [pytest.mark.needs_mosquitto, pytest.mark.slow]


@pytest.mark.skipif(shutil.which("mosquitto") is None, reason="mosquitto is not installed")
async def test_smallest_estate_prints_sane_figures(tmp_path: Path) -> None:
    options = Options(daemons=2, zones=2, sources=1, hours=0.2, speed=120.0, outage_s=1.0)
    f = await run_estate(options, restart=True, workdir=tmp_path)
    assert f.died == []
    assert f.zones == 4
    assert f.sim_hours == pytest.approx(0.2, rel=0.1)
    # demand changes reached the source, across the broker and on its own daemon
    remote, local = f.latency_real[True], f.latency_real[False]
    assert remote and local, (remote, local)
    assert all(math.isfinite(x) and x >= 0 for x in remote + local)
    assert f.source_states > 0
    # every daemon published; the source daemon got its remote zones' messages
    assert f.kinds["state"] > 0 and f.kinds["demand"] > 0
    assert f.delivered > 0
    assert f.broker_counts.get("dropped", 0) == 0
    # footprint of two live processes
    assert 2 * 20.0 < f.rss_now_mb <= f.rss_peak_mb
    assert f.daemon_cpu_s > 0
    # the boiler fired for the cold rooms, every start had a valve open long enough before it,
    # and after the set-back (all its zones) and the broker's restart it stayed off
    assert f.starts["boiler-0"] >= 1
    assert f.unexplained == {"boiler-0": []}
    assert f.idle_starts == 0
    assert f.setback_ok == 4
    assert "restart" in f.timeline and "back" in f.timeline
