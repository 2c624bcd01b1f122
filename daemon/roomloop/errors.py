"""The small error hierarchy of roomloop.

Every error a user can cause, or a field device or broker can cause, is one of
these and carries the facts needed to act on it (file and key path, endpoint,
register). The command line turns them into one clear line and an exit code;
nothing here ever reaches the user as a traceback.

This module imports nothing of roomloop, so every layer (even ``config``) may use it.
"""

from __future__ import annotations

from dataclasses import dataclass


class RoomloopError(Exception):
    """Base of every error roomloop raises on purpose."""


@dataclass(frozen=True)
class ConfigProblem:
    """One problem in a configuration file, located as precisely as we can."""

    file: str
    line: int | None
    path: str
    message: str
    column: int | None = None

    def __str__(self) -> str:
        where = self.file
        if self.line is not None:
            where += f":{self.line}"
            if self.column is not None:
                where += f":{self.column}"
        if self.path:
            return f"{where}: {self.path}: {self.message}"
        return f"{where}: {self.message}"


class ConfigError(RoomloopError):
    """A configuration (site or plant file) that cannot be used; carries every problem found."""

    def __init__(self, problems: list[ConfigProblem]) -> None:
        self.problems = problems
        super().__init__("\n".join(str(p) for p in problems))


class DeviceError(RoomloopError):
    """A field device did not answer as expected (Modbus or an MQTT point)."""

    def __init__(
        self,
        message: str,
        *,
        endpoint: str,
        point: str | None = None,
        register: int | None = None,
    ) -> None:
        self.endpoint = endpoint
        self.point = point
        self.register = register
        where = endpoint
        if point is not None:
            where += f" point {point}"
        if register is not None:
            where += f" register {register}"
        super().__init__(f"{where}: {message}")


class BrokerError(RoomloopError):
    """The MQTT broker could not be reached or refused us."""

    def __init__(self, message: str, *, endpoint: str) -> None:
        self.endpoint = endpoint
        super().__init__(f"{endpoint}: {message}")
