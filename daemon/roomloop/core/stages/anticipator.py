"""The anticipator: a virtual heat term that rises toward ``G`` while the relay is on.

Exact over the elapsed tick with the relay state ``u`` held during it,
``a <- G u + (a - G u) exp(-dt / tau)``, so the trajectory does not depend on the tick
length (DESIGN.md, control law 3). ``tau`` is the configured time constant scaled by
cycle-rate regulation (:mod:`.regulation`).
"""

from __future__ import annotations

from math import exp


def advance(
    anticipator_k: float, gain_k: float, tau_s: float, relay_on: bool, dt: float
) -> tuple[float, float]:
    """The anticipator after ``dt`` seconds with the relay held ``relay_on``, and the decay
    ``exp(-dt / tau)`` over that time (1 for no time), which the droop term fades with."""
    if dt <= 0.0:
        return anticipator_k, 1.0
    decay = exp(-dt / tau_s)
    if relay_on:
        return gain_k + (anticipator_k - gain_k) * decay, decay
    return anticipator_k * decay, decay
