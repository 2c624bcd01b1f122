"""Temperature units: the one place that converts between Celsius and Fahrenheit.

roomloop works in Celsius (and kelvin for differences) everywhere inside; a site
with ``units: F`` is converted at its edges: the site file, commands, published
values, and points whose device reports Fahrenheit. Standard library only, so any
layer may use it.
"""

from __future__ import annotations

from typing import Literal

Units = Literal["C", "F"]

F_PER_K = 9.0 / 5.0
"""Fahrenheit degrees per kelvin (ISO 80000-5: t/°F = 1.8 t/°C + 32)."""
F_AT_0_C = 32.0


def to_celsius(value: float, units: str) -> float:
    """A temperature in ``units`` (``C`` or ``F``) in degrees Celsius."""
    return (value - F_AT_0_C) / F_PER_K if units == "F" else value


def from_celsius(value: float, units: str) -> float:
    """A Celsius temperature in ``units``."""
    return value * F_PER_K + F_AT_0_C if units == "F" else value


def delta_to_kelvin(value: float, units: str) -> float:
    """A temperature difference in ``units`` in kelvin."""
    return value / F_PER_K if units == "F" else value


def delta_from_kelvin(value: float, units: str) -> float:
    """A difference in kelvin in ``units``."""
    return value * F_PER_K if units == "F" else value
