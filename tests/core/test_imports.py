"""The core is sans-IO: importing it pulls in no event loop, no sockets, no field-bus or
broker client and no numpy (a fresh interpreter, so other tests' imports do not count)."""

from __future__ import annotations

import json
import subprocess
import sys

FORBIDDEN = (
    "asyncio", "pymodbus", "aiomqtt", "paho", "socket", "numpy", "scipy", "structlog",
    # not forbidden by the design, but the step must not need it: importing the core
    # leaves pydantic (the config models) out until a settings builder is called
    "pydantic",
)
CORE_MODULES = (
    "roomloop.core",
    "roomloop.core.controller",
    "roomloop.core.commands",
    "roomloop.core.failsafe",
    "roomloop.core.records",
    "roomloop.core.reliability",
    "roomloop.core.settings",
    "roomloop.core.sizing",
    "roomloop.core.stages.constants",
    "roomloop.core.state",
    "roomloop.core.types",
)


def test_core_imports_no_io() -> None:
    code = (
        "import importlib, json, sys\n"
        f"for name in {CORE_MODULES!r}:\n"
        "    importlib.import_module(name)\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    result = subprocess.run(
        [sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True
    )
    loaded = json.loads(result.stdout)
    assert "roomloop.core.controller" in loaded
    bad = sorted(m for m in loaded if m.split(".")[0] in FORBIDDEN)
    assert bad == []
