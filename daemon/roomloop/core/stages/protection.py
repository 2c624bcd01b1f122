"""Protection: below the protection set point ``P`` the relay is on, whatever the mode.

The zone temperature decides, or the backup point's while the zone has none; in mode
``off`` only with ``protection_in_off``. A protection run starts below ``P`` and holds
the relay on until ``P + D/2`` (``protection_run`` marks it). It overrides the minimum
off time and the cycle limit only deep down, below ``P - D/2``; between ``P - D/2`` and
``P`` they still hold the relay off, so a sensor flickering across ``P`` cannot
short-cycle the plant. In mode ``off`` the run ends at ``P`` itself, even inside
``min_on_s``: mode off never heats above the protection set point; there the minimum
off time and the cycle limit alone bound the cycling.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from ..state import ZoneState

if TYPE_CHECKING:
    from .constants import LawConstants


def judge(
    k: LawConstants, state: ZoneState, mode: str, value: float | None
) -> tuple[bool, bool]:
    """(forced on, so deep below ``P`` that short-cycle protection must give way).

    ``value``: the zone temperature, or the backup point's while the zone has none.
    """
    if value is None or (mode == "off" and not k.protection_in_off):
        return False, False
    protection_c = k.protection_c
    run_ends_at = protection_c if mode == "off" else protection_c + k.half_k
    forced = value < protection_c or (
        state.relay_on and state.protection_run and value < run_ends_at
    )
    return forced, forced and value < protection_c - k.half_k
