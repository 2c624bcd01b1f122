"""roomloop.core: the sans-IO control core (no clocks, no sockets, no asyncio).

Public API: :class:`ZoneController` (``initial_state``, ``step``, ``resume``),
:class:`ZoneSettings`, :class:`ZoneState`, :func:`apply_command` with
:class:`CommandRejected`, and the boundary types of :mod:`roomloop.core.types`.
"""

from .commands import CommandRejected, apply_command
from .controller import ZoneController
from .settings import PointSettings, SettingsError, ZoneSettings
from .state import PointState, StateFormatError, ZoneState
from .types import Controller, PointSample, ZoneInputs, ZoneOutputs

__all__ = [
    "CommandRejected",
    "Controller",
    "PointSample",
    "PointSettings",
    "PointState",
    "SettingsError",
    "StateFormatError",
    "ZoneController",
    "ZoneInputs",
    "ZoneOutputs",
    "ZoneSettings",
    "ZoneState",
    "apply_command",
]
