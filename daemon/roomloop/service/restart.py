"""What a (re)start needs before the zones run: each output's real state and each zone's state.

After an unclean stop (SIGKILL, a power cut of the board only) the relays stay as
the old process left them. Forcing them to the safe state at once and then letting
the controller decide makes a start-up pulse (off for a fraction of a second) or a
short run; dating that switch from the saved state's ``last_step_at`` (minutes old)
lets short-cycle protection pass it. So the service reads every Modbus output
once before the zones start (:func:`read_output_states`) and hands the result to
:func:`restore_zone`, which checks the saved state against the zone and resumes it
(:meth:`~roomloop.core.controller.ZoneController.resume`) from the relay as it
really is. An output that cannot be read (a dead link, an MQTT output, whose
state topic is not subscribed yet) is ``None``: the zone starts from its safe
state, and that write counts as a switch at the restart.
"""

from __future__ import annotations

import asyncio
import contextlib
import json
from collections.abc import Iterable
from typing import Any

import structlog

from roomloop.core.controller import ZoneController
from roomloop.core.dual import DualZoneController
from roomloop.core.state import StateFormatError, ZoneState, check_for_zone
from roomloop.io.modbus import ModbusLink

log = structlog.get_logger("roomloop.persist")

READ_OUTPUTS_S = 3.0
"""Real seconds the start-up read of all outputs may take (links in parallel)."""


async def read_output_states(
    links: Iterable[ModbusLink], within_s: float = READ_OUTPUTS_S
) -> dict[str, bool | None]:
    """Each Modbus output's state as read from its device: True/False, None if unknown.

    Links are read in parallel, outputs of one link in turn; the whole read is bounded
    by ``within_s`` and never raises (a failure leaves the output unknown).
    """
    found: dict[str, bool | None] = {}

    async def one_link(link: ModbusLink) -> None:
        for name in link.output_names():
            found[name] = None
            try:
                found[name] = (await link.read_output(name)).on
            except Exception as exc:  # a device that does not answer: its output stays unknown
                log.warning(
                    "output.state_unknown_at_start", point=name, link=link.name,
                    error=str(exc) or type(exc).__name__,
                )

    tasks = [asyncio.create_task(one_link(link), name=f"read-outputs:{link.name}")
             for link in links]
    if tasks:
        _, pending = await asyncio.wait(tasks, timeout=within_s)
        for task in pending:
            task.cancel()
        for task in pending:
            with contextlib.suppress(BaseException):
                await task
    for name, on in sorted(found.items()):
        log.info("output.state_at_start", point=name, on=on)
    return found


def restore_zone(
    controller: ZoneController,
    saved: Any,
    now: float,
    *,
    zone: str,
    relay_on: bool | None,
    safe_on: bool,
    cooling_on: bool | None = None,
) -> ZoneState:
    """The zone's state at start: the saved one (JSON-like ``saved``) if valid, else fresh.

    A saved state that is not valid for this zone (corrupt, a hold set point outside the
    zone's limits, nested too deeply) is refused with ``persist.zone_state_rejected`` and
    the zone starts fresh. Either way the state is resumed from the output's real state
    ``relay_on`` (``None``: unknown, the safe state ``safe_on`` is written at start).
    """
    state = controller.initial_state(now)
    if saved is not None:
        try:
            loaded = ZoneState.from_json(json.dumps(saved))
            check_for_zone(loaded, controller.settings, now)
        except StateFormatError as exc:
            log.warning("persist.zone_state_rejected", zone=zone, reason=str(exc))
        except (RecursionError, ValueError, TypeError) as exc:  # not JSON-like at all
            log.warning(
                "persist.zone_state_rejected", zone=zone,
                reason=f"zone state cannot be read: {type(exc).__name__}",
            )
        else:
            log.info("persist.zone_restored", zone=zone, mode=loaded.mode)
            state = loaded
    if isinstance(controller, DualZoneController):
        return controller.resume(state, now, relay_on, safe_on=safe_on, cooling_on=cooling_on)
    return controller.resume(state, now, relay_on, safe_on=safe_on)
