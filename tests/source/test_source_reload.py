"""A heat source across a SIGHUP reload, in-process on a virtual clock (``reload.serve``).

Real parts: a pymodbus TCP server holding the room (``service_rooms.RoomPlant``, coil 0) and
the boiler's enable and pump relays (coils 2 and 3). The reload's seam is driven as
``roomloop run`` drives it on SIGHUP, without the signal: the file is rewritten and the
reload event set. Every wait is bounded (clock seconds).
"""

from __future__ import annotations

import asyncio
import sys
from pathlib import Path
from typing import Any

import yaml
from structlog.testing import capture_logs

sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "service"))
from service_rooms import RoomPlant, site_yaml, until
from source_helpers import Coils

from roomloop.clock import VirtualClock, wait_for
from roomloop.config.loader import load_site
from roomloop.service.reload import serve

MAX_STARTS = 2


def _site(modbus_port: int, *, comfort: float, source: str, kind: str) -> dict[str, Any]:
    data = site_yaml(modbus_port=modbus_port, broker_port=1, zones=1)
    del data["broker"]
    data["zones"][0]["setpoints"]["comfort"] = comfort
    data["points"] += [
        {"name": "boiler-enable", "type": "modbus-output", "link": "rooms", "address": 2},
        {"name": "boiler-pump", "type": "modbus-output", "link": "rooms", "address": 3},
    ]
    data["heat_sources"] = [
        {
            "name": source,
            "kind": kind,
            "output": "boiler-enable",
            "pump_output": "boiler-pump",
            "zones": ["room0"],
            "timing": {"valve_opening_s": 30, "pump_overrun_s": 30, "min_on_s": 60,
                       "min_off_s": 60, "max_starts_per_hour": MAX_STARTS},
        }
    ]
    return data


async def test_a_reload_keeps_a_sources_starts_and_a_renamed_one_starts_fresh(
    tmp_path: Path, modbus_tcp_server: Any
) -> None:
    """The room cycles by itself until the boiler has started twice (its limit an hour); a
    reload that changes the room's set point keeps the boiler's two starts, so the room's
    call after it finds the boiler locked out (a service that forgot would fire after the
    60 s minimum off time). A reload that renames the boiler gives it no history: it fires;
    nor does one that keeps its name and changes its kind."""
    clock = VirtualClock()
    server = await modbus_tcp_server()
    config = tmp_path / "site.yaml"

    def write(*, comfort: float, source: str = "boiler", kind: str = "boiler") -> None:
        data = _site(server.port, comfort=comfort, source=source, kind=kind)
        config.write_text(yaml.safe_dump(data))

    write(comfort=20.0)
    stop, reload = asyncio.Event(), asyncio.Event()

    def starts() -> list[float]:
        return [at for at, coil, on in coils.changes if coil == 2 and on]

    with capture_logs() as logs:
        async with (
            RoomPlant(server, [17.0], clock) as plant,
            Coils(server, clock).watching() as coils,
        ):
            task = asyncio.create_task(
                serve(config, load_site(config), stop=stop, reload=reload,
                      state_dir=tmp_path / "state", clock=clock)
            )
            try:
                # the room heats to 20 C and cycles about it: each call starts the boiler
                await until(clock, lambda: len(starts()) >= MAX_STARTS and not coils.now[2], 3600)
                first = starts()[0]
                plant.frozen = True  # the room stays below 26 C: after the reload it calls
                write(comfort=26.0)
                reload.set()
                await until(clock, lambda: coils.now[0], 120)
                await clock.sleep(300)  # valve 30 s, minimum off 60 s: long past both
                assert clock.now() < first + 3600
                assert coils.now[0] and not coils.now[2], coils.changes
                assert len(starts()) == MAX_STARTS, coils.changes
                kept = [e for e in logs if e["event"] == "reload.source_kept"]
                assert kept and kept[0]["source"] == "boiler"
                assert kept[0]["starts_1h"] == MAX_STARTS
                assert any(
                    e["event"] == "source.lockout" and e["lockout"] == "max-starts"
                    for e in logs[logs.index(kept[0]):]
                ), [e["event"] for e in logs if str(e["event"]).startswith("source.")]

                # renamed: another source as far as the site file says; its history is not kept
                write(comfort=26.0, source="boiler-b")
                renamed_at = clock.now()
                reload.set()
                await until(clock, lambda: coils.now[2], 300)
                assert clock.now() < first + 3600
                assert len([e for e in logs if e["event"] == "reload.source_kept"]) == 1
                assert coils.first(2, True, after=renamed_at) - renamed_at >= 60 - 1.5
                # the same name, another kind: not the same source either
                write(comfort=26.0, source="boiler-b", kind="electric")
                reload.set()
                await until(clock, lambda: sum(
                    e["event"] == "service.reloaded" for e in logs) == 3, 60)
                await until(clock, lambda: sum(e["event"] == "source.resumed" for e in logs) == 4,
                            60)
                assert len([e for e in logs if e["event"] == "reload.source_kept"]) == 1
            finally:
                stop.set()
                await wait_for(clock, task, 30.0)
