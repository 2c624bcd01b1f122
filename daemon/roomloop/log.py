"""Logging set-up: structlog, configured once at start by the command line or the service.

Under systemd stdout is no terminal and journald stores what we write, so each event
becomes one JSON line (``{"event": "service.ready", "level": "info", ...}``) that
``journalctl -o cat | jq`` can read. On a terminal the same events are readable
``time level event key=value`` lines. Event names are namespaced by area
(``service.ready``, ``modbus.read_failed``; docs/journal.md lists them all); get a logger with
``structlog.get_logger("roomloop.<area>")``.

The console renderer is our own: structlog's dev renderer pulls in ``rich`` when it
is installed, which costs start-up time on a small board.
"""

from __future__ import annotations

import json
import logging
import sys
from collections.abc import MutableMapping
from typing import Any, ClassVar, Literal, TextIO

import structlog

Level = Literal["debug", "info", "warning", "error"]
Format = Literal["auto", "json", "console"]

_LEVELS = {
    "debug": logging.DEBUG,
    "info": logging.INFO,
    "warning": logging.WARNING,
    "error": logging.ERROR,
}


def _is_terminal(stream: TextIO) -> bool:
    try:
        return stream.isatty()
    except (AttributeError, ValueError):  # closed or odd streams: treat as a pipe
        return False


class ConsoleRenderer:
    """``2026-12-01T22:03:04Z info  config.loaded site=fernhollow zones=4``: one readable line."""

    def __init__(self, colors: bool = False) -> None:
        self.colors = colors

    _COLORS: ClassVar[dict[str, str]] = {
        "debug": "\x1b[2m",
        "info": "\x1b[32m",
        "warning": "\x1b[33m",
        "error": "\x1b[31;1m",
    }

    def __call__(self, _logger: Any, _name: str, event_dict: MutableMapping[str, Any]) -> str:
        event = dict(event_dict)
        timestamp = str(event.pop("timestamp", ""))
        level = str(event.pop("level", ""))
        name = str(event.pop("event", ""))
        exception = event.pop("exception", None)
        event.pop("logger", None)
        fields = " ".join(f"{key}={_value(value)}" for key, value in event.items())
        shown_level = f"{level:<7}"
        if self.colors and level in self._COLORS:
            shown_level = f"{self._COLORS[level]}{shown_level}\x1b[0m"
        line = " ".join(part for part in (timestamp, shown_level, name, fields) if part)
        if exception:
            line += "\n" + str(exception)
        return line


def _value(value: Any) -> str:
    text = value if isinstance(value, str) else json.dumps(value, default=str, ensure_ascii=False)
    if isinstance(value, str) and (not value or any(c in value for c in ' ="\n')):
        text = json.dumps(value, ensure_ascii=False)
    return text


def configure_logging(level: str = "info", fmt: str = "auto", stream: TextIO | None = None) -> None:
    """Configure structlog (and the standard library's root logger) for the whole process.

    ``fmt``: ``json`` (one JSON object per line), ``console`` (readable lines), or ``auto``
    (console when ``stream`` is a terminal, JSON otherwise). ``stream`` defaults to stdout.
    Calling it again replaces the previous set-up (tests do that).
    """
    if level not in _LEVELS:
        raise ValueError(f"unknown log level {level!r}; use one of {', '.join(_LEVELS)}")
    if fmt not in ("auto", "json", "console"):
        raise ValueError(f"unknown log format {fmt!r}; use auto, json or console")
    out = stream if stream is not None else sys.stdout
    console = fmt == "console" or (fmt == "auto" and _is_terminal(out))
    renderer: Any
    if console:
        renderer = ConsoleRenderer(colors=_is_terminal(out))
    else:
        renderer = structlog.processors.JSONRenderer(default=str, ensure_ascii=False)
    processors: list[Any] = [
        structlog.contextvars.merge_contextvars,
        structlog.processors.add_log_level,
        structlog.processors.TimeStamper(fmt="iso", utc=True),
        structlog.processors.format_exc_info,
        renderer,
    ]
    if not console:
        processors.insert(-1, structlog.processors.dict_tracebacks)
        processors.remove(structlog.processors.format_exc_info)
    structlog.configure(
        processors=processors,
        wrapper_class=structlog.make_filtering_bound_logger(_LEVELS[level]),
        logger_factory=structlog.WriteLoggerFactory(file=out),
        cache_logger_on_first_use=False,
    )
    # Libraries (pymodbus, asyncio) log through the standard library: same stream, same level
    # floor, plain one-line format, so nothing they say is lost or mixed into our JSON lines.
    root = logging.getLogger()
    for handler in list(root.handlers):
        if getattr(handler, "_roomloop", False):
            root.removeHandler(handler)
    handler = logging.StreamHandler(out)
    handler._roomloop = True  # type: ignore[attr-defined]
    if console:
        handler.setFormatter(logging.Formatter("%(asctime)s %(levelname)-7s %(name)s: %(message)s"))
    else:
        handler.setFormatter(_JsonFormatter())
    root.addHandler(handler)
    root.setLevel(max(_LEVELS[level], logging.INFO))


class _JsonFormatter(logging.Formatter):
    """Standard-library records as the same JSON lines structlog writes."""

    def format(self, record: logging.LogRecord) -> str:
        payload: dict[str, Any] = {
            "event": f"{record.name}.log",
            "level": record.levelname.lower(),
            "message": record.getMessage(),
            "timestamp": self.formatTime(record, "%Y-%m-%dT%H:%M:%SZ"),
        }
        if record.exc_info:
            payload["exception"] = self.formatException(record.exc_info)
        return json.dumps(payload, ensure_ascii=False, default=str)
