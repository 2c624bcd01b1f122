"""Simulated mornings on a built-in plant: after a few warm-ups the room is warm at the switch.

The protocol is the bench's (tests/bench/optimum_start.py): roomloop's controller with the
heating type's defaults on the built-in plant model, economy 17 C from 22:00, comfort 20 C
from 07:00, a varying outdoor temperature; the scores use the plant's true room air.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path
from types import ModuleType

BENCH = Path(__file__).resolve().parents[1] / "bench" / "optimum_start.py"


def _bench() -> ModuleType:
    spec = importlib.util.spec_from_file_location("optimum_start_bench", BENCH)
    assert spec is not None and spec.loader is not None
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up by name
    spec.loader.exec_module(module)
    return module


def test_hydronic_room_is_warm_at_the_switch_after_learning() -> None:
    bench = _bench()
    run = bench.run_mornings("hydronic", days=6, seed=2)
    assert len(run.mornings) == 6
    learned = run.mornings[2:]
    for morning in learned:
        assert morning.early_min is not None and 0 < morning.early_min <= 180
        assert abs(morning.room_c - 20.0) <= 0.5, morning
    assert run.rates  # it learned something, per outdoor band
    # the same mornings without optimum start: the room is still cold at 07:00
    plain = bench.run_mornings("hydronic", days=3, seed=2, optimum=False)
    assert all(m.room_c < 19.5 for m in plain.mornings), plain.mornings
