"""The one backoff policy and the one units module."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from roomloop.backoff import Backoff
from roomloop.units import delta_from_kelvin, delta_to_kelvin, from_celsius, to_celsius


def test_backoff_doubles_up_to_its_ceiling() -> None:
    policy = Backoff(0.5, 30.0)
    pauses = [policy.first()]
    for _ in range(8):
        pauses.append(policy.after(pauses[-1]))
    assert pauses == [0.5, 1.0, 2.0, 4.0, 8.0, 16.0, 30.0, 30.0, 30.0]
    assert [Backoff(0.05, 1.0).nth(n) for n in (1, 2, 3, 6)] == [0.05, 0.1, 0.2, 1.0]
    assert Backoff(0.0, 5.0).after(0.0) == 0.0  # a zero floor stays at zero
    with pytest.raises(ValueError):
        Backoff(2.0, 1.0)


def test_celsius_and_fahrenheit() -> None:
    # ISO 80000-5: t/°F = 1.8 t/°C + 32; water freezes at 32 °F, boils at 212 °F [published]
    assert from_celsius(0.0, "F") == 32.0 and from_celsius(100.0, "F") == 212.0
    assert to_celsius(-40.0, "F") == -40.0  # the scales cross at -40 [published]
    assert to_celsius(68.0, "F") == pytest.approx(20.0)
    assert from_celsius(21.5, "C") == 21.5 and to_celsius(21.5, "C") == 21.5
    assert delta_to_kelvin(1.8, "F") == pytest.approx(1.0)
    assert delta_from_kelvin(0.5, "F") == pytest.approx(0.9)


@settings(max_examples=50, deadline=None)
@given(st.floats(-200.0, 500.0))
def test_the_conversions_are_inverse(celsius: float) -> None:
    assert to_celsius(from_celsius(celsius, "F"), "F") == pytest.approx(celsius, abs=1e-9)
