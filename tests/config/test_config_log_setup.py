"""structlog set-up: JSON lines for journald when not on a terminal, readable lines on one."""

from __future__ import annotations

import io
import json
import logging
import os

import pytest
import structlog

from roomloop.log import configure_logging


@pytest.fixture(autouse=True)
def _restore_structlog() -> object:
    yield None
    structlog.reset_defaults()
    root = logging.getLogger()
    for handler in list(root.handlers):
        if getattr(handler, "_roomloop", False):
            root.removeHandler(handler)


def test_json_lines_when_not_a_terminal() -> None:
    out = io.StringIO()
    configure_logging("info", "auto", out)
    log = structlog.get_logger("roomloop.config")
    log.info("config.loaded", site="fernhollow joinery", zones=4)
    log.debug("config.detail", hidden=True)  # below the level: dropped
    # a library logger through the stdlib (pymodbus itself is quietened once a link starts)
    logging.getLogger("some.library").warning("from a library")
    lines = out.getvalue().splitlines()
    assert len(lines) == 2
    first = json.loads(lines[0])
    assert first["event"] == "config.loaded"
    assert first["level"] == "info"
    assert first["site"] == "fernhollow joinery" and first["zones"] == 4
    assert first["timestamp"].endswith("Z")
    second = json.loads(lines[1])
    assert second["level"] == "warning" and second["message"] == "from a library"


def test_readable_lines_on_a_terminal() -> None:
    controller, terminal = os.openpty()  # a real pseudo-terminal
    stream = os.fdopen(terminal, "w", buffering=1)
    try:
        configure_logging("debug", "auto", stream)
        structlog.get_logger("roomloop.modbus").warning(
            "modbus.read_failed", link="shop-bus", register=12
        )
        stream.flush()
        text = os.read(controller, 4096).decode()
    finally:
        stream.close()
        os.close(controller)
    assert "modbus.read_failed" in text
    assert "link=shop-bus register=12" in text
    assert not text.lstrip().startswith("{")


def test_console_format_forced_and_json_exceptions() -> None:
    out = io.StringIO()
    configure_logging("info", "console", out)
    structlog.get_logger("roomloop.service").info("service.started", note="two words")
    assert 'service.started note="two words"' in out.getvalue()
    out = io.StringIO()
    configure_logging("info", "json", out)
    try:
        raise RuntimeError("boom")
    except RuntimeError:
        structlog.get_logger("roomloop.service").exception("service.crashed")
    record = json.loads(out.getvalue().splitlines()[0])
    assert record["event"] == "service.crashed" and "boom" in json.dumps(record["exception"])


def test_bad_arguments_are_refused() -> None:
    with pytest.raises(ValueError, match="log level"):
        configure_logging("loud")
    with pytest.raises(ValueError, match="log format"):
        configure_logging("info", "xml")
