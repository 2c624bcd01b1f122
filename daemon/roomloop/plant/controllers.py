"""The controllers ``simulate`` and the benchmark run, by name, built from one zone's settings."""

from __future__ import annotations

import dataclasses
from typing import Any

from roomloop.core.controller import ZoneController
from roomloop.core.settings import CoolingSettings, ZoneSettings
from roomloop.core.types import Controller
from roomloop.plant.baselines import BASELINE_NAMES, call_tuning, make_baseline

CONTROLLER_NAMES: tuple[str, ...] = ("anticipator", *BASELINE_NAMES)
"""``anticipator`` is roomloop's own; the others are the baselines it is compared with."""


def make_controller(name: str, settings: ZoneSettings, mode: str = "heat") -> Controller[Any]:
    """The controller ``name`` for the zone ``settings``, switching its heating call
    (``mode="heat"``) or its cooling call (``"cool"``); ``KeyError`` for an unknown name.

    roomloop's own controller runs both calls as the zone's settings say (the protocol's
    :func:`~roomloop.plant.protocol.protocol_settings` sets the changeover for the run); a
    baseline switches the one call of ``mode``.
    """
    if name == "anticipator":
        return ZoneController(settings)
    return make_baseline(name, settings, call_tuning(settings, mode))


COOLING_ZONE_HEATING = "forced-air"
"""The heating type a cooling-only zone of :func:`cooling_zone_settings` carries for the
fields every zone has; it never heats (its cooling call has ``heating`` off)."""


def cooling_zone_settings(cooling_type: str) -> ZoneSettings:
    """A cooling-only zone with ``cooling_type``'s preset defaults and one input point (the
    simulator's ``--cooling TYPE``, the benchmark); changeover ``cool``.

    :class:`~roomloop.core.settings.SettingsError` for an unknown cooling type.
    """
    return dataclasses.replace(
        ZoneSettings.for_heating_type(COOLING_ZONE_HEATING),
        cooling=CoolingSettings.for_cooling_type(cooling_type),
    )
