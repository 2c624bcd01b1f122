"""The controllers ``simulate`` and the benchmark run, by name, built from one zone's settings."""

from __future__ import annotations

from typing import Any

from roomloop.core.controller import ZoneController
from roomloop.core.settings import ZoneSettings
from roomloop.core.types import Controller
from roomloop.plant.baselines import BASELINE_NAMES, make_baseline

CONTROLLER_NAMES: tuple[str, ...] = ("anticipator", *BASELINE_NAMES)
"""``anticipator`` is roomloop's own; the others are the baselines it is compared with."""


def make_controller(name: str, settings: ZoneSettings) -> Controller[Any]:
    """The controller ``name`` for the zone ``settings``; ``KeyError`` for an unknown name."""
    if name == "anticipator":
        return ZoneController(settings)
    return make_baseline(name, settings)
