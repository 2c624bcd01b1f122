"""Cycle-rate sizing and its inverse (DESIGN.md "Cycle-rate sizing"; REFERENCES.md [derived])."""

from __future__ import annotations

import math

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from roomloop.config.presets import PRESETS
from roomloop.core import sizing


def test_time_constant_is_the_presets_formula() -> None:
    # DESIGN.md: tau = 3600 / (2 cph ln((G + D)/(G - D))); 5 cph, G 1.5, D 0.5 -> 519.37 s
    # [derived; computed by hand: 3600 / (10 ln 2)]
    assert sizing.time_constant_for_cycle_rate(5.0, 1.5, 0.5) == pytest.approx(
        3600.0 / (10.0 * math.log(2.0))
    )


@pytest.mark.parametrize("heating", sorted(PRESETS))
def test_inverse_gives_back_each_presets_cycle_rate(heating: str) -> None:
    p = PRESETS[heating]
    gain, diff = p.anticipator_gain_k, p.differential_k
    tau = sizing.time_constant_for_cycle_rate(p.cycle_rate_cph, gain, diff)
    assert sizing.cycles_per_hour(p.anticipator_gain_k, p.differential_k, tau) == pytest.approx(
        p.cycle_rate_cph
    )


@given(
    gain=st.floats(0.6, 5.0),
    diff_share=st.floats(0.05, 0.7),
    tau=st.floats(60.0, 5000.0),
    fraction=st.floats(0.1, 0.9),
)
@settings(max_examples=60, deadline=None)
def test_on_off_times_match_an_outside_root_finder(
    gain: float, diff_share: float, tau: float, fraction: float
) -> None:
    """The band offset for an on-fraction, solved by scipy's brentq as the outside reference
    on the model of REFERENCES.md ("Anticipator sizing", [derived])."""
    diff = gain * diff_share
    half = diff / 2

    def model(c: float) -> tuple[float, float]:
        return (
            tau * math.log((gain - c + half) / (gain - c - half)),
            tau * math.log((c + half) / (c - half)),
        )

    c = brentq(
        lambda c: model(c)[0] / sum(model(c)) - fraction,
        half + 1e-9 * diff,
        gain - half - 1e-9 * diff,
        xtol=1e-14,
    )
    on, off = sizing.on_off_times(gain, diff, tau, fraction)
    ref_on, ref_off = model(c)
    assert on == pytest.approx(ref_on, rel=1e-5)
    assert off == pytest.approx(ref_off, rel=1e-5)
    assert sizing.cycles_per_hour(gain, diff, tau, fraction) == pytest.approx(
        3600.0 / (ref_on + ref_off), rel=1e-5
    )


def test_cycle_rate_peaks_at_half_on_time() -> None:
    """REFERENCES.md (NEMA DC 3): the cycle rate is rated at 50 % on-time, where it peaks."""
    rates = [sizing.cycles_per_hour(1.5, 0.5, 519.0, f) for f in (0.2, 0.35, 0.5, 0.65, 0.8)]
    assert max(rates) == rates[2]
    assert rates[0] < rates[1] < rates[2] > rates[3] > rates[4]


def test_impossible_sizing_is_refused() -> None:
    with pytest.raises(ValueError, match="exceed"):
        sizing.cycles_per_hour(0.4, 0.5, 500.0)
    with pytest.raises(ValueError, match="between 0 and 1"):
        sizing.on_off_times(1.5, 0.5, 500.0, 1.0)
