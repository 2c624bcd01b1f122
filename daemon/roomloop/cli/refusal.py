"""Why a command stops early: one exception that carries the line to print and the exit code.

A command's steps raise :class:`Refused`; its ``main`` catches it once and prints
``roomloop COMMAND: MESSAGE`` on stderr (the command's ``_fail``), so every check can
stay a short helper instead of a chain of early returns.
"""

from __future__ import annotations


class Refused(Exception):
    """A refusal: ``message`` is printed after ``roomloop COMMAND:``, ``code`` is the exit code."""

    def __init__(self, message: str, code: int) -> None:
        super().__init__(message)
        self.message = message
        self.code = code
