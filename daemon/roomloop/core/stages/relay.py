"""The relay's precedence: one ordered table; the first rule that applies sets the wish.

Each row names a rule, its wish (fixed, or computed by the rule's own stage) and
whether short-cycle protection (:mod:`.short_cycle`: ``min-on``, ``min-off``,
``max-cycles``) may hold the relay against that wish:

==============  =============================  ==================================
rule            applies when                   short-cycle protection may hold it
==============  =============================  ==================================
changeover      a zone with a cooling call is  never: off at once
                set up for cooling, or its
                changeover time or changeover
                output hold runs (:mod:`.cooling`)
protection      a protection run (:mod:`.protection`)  only above ``P - D/2``
mode off        mode ``off``                   never: off is off at once
fail-safe       in fail-safe (:mod:`.failsafe`)  yes (the policy's duty cycle)
no temperature  no trusted reading ever        yes
band            otherwise (:mod:`.switching`)  yes
==============  =============================  ==================================
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

from ..types import Reason

ShortCycle = Literal["holds", "unless-deep", "never"]


@dataclass(frozen=True, slots=True)
class Rule:
    name: str
    wish: tuple[bool, Reason] | None
    """The rule's fixed wish (relay on, reason); None: its stage computes it."""
    short_cycle: ShortCycle
    """Whether short-cycle protection may hold the relay against the wish."""


CHANGEOVER = Rule("changeover", None, "never")
PROTECTION = Rule("protection", (True, "protection"), "unless-deep")
MODE_OFF = Rule("mode off", (False, "mode-off"), "never")
FAIL_SAFE = Rule("fail-safe", None, "holds")
NO_TEMPERATURE = Rule("no temperature", (False, "no-temperature"), "holds")
BAND = Rule("band", None, "holds")

RELAY_PRECEDENCE: tuple[Rule, ...] = (
    CHANGEOVER, PROTECTION, MODE_OFF, FAIL_SAFE, NO_TEMPERATURE, BAND
)
"""Highest first; :func:`first_applying` takes one condition per row, in this order."""


def first_applying(
    changeover: bool, protection: bool, mode_off: bool, fail_safe: bool, no_temperature: bool
) -> Rule:
    """The first row of :data:`RELAY_PRECEDENCE` whose condition holds (the band's always does).

    The parameters are the rows' conditions in the table's order (a test checks it).
    ``changeover`` holds only in a zone with a cooling call (:mod:`.cooling`).
    """
    return RELAY_PRECEDENCE[
        (changeover, protection, mode_off, fail_safe, no_temperature, True).index(True)
    ]


def short_cycle_may_hold(rule: Rule, deep: bool) -> bool:
    """Whether short-cycle protection may hold the relay against ``rule``'s wish this tick."""
    return rule.short_cycle == "holds" or (rule.short_cycle == "unless-deep" and not deep)
