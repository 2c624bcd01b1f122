"""Output files a command writes after a long run (``--json``, ``--plot``), checked before it.

A run of a minute (or of the whole simulation protocol) should not end in "cannot
write": the folder, its permissions, the plot's file type and matplotlib are all
known up front, so they are checked up front.
"""

from __future__ import annotations

import importlib.util
import os

MATPLOTLIB_MISSING = (
    "--plot needs matplotlib, which is not installed: pip install matplotlib "
    "(or pip install '.[plot]' in the roomloop checkout), or leave out --plot"
)


def output_path_problem(option: str, path: str, suffix: str | None = None) -> str | None:
    """Why ``path`` cannot be written (one line naming the option), or ``None`` if it can.

    ``suffix`` (e.g. ``.png``) is the only file type accepted, in any letter case.
    """
    if suffix is not None and not path.lower().endswith(suffix):
        return f"{option} {path}: the file name must end in {suffix} (the only format written)"
    if os.path.isdir(path):
        return f"{option} {path}: is a folder; give a file name"
    folder = os.path.dirname(os.path.abspath(path))
    if not os.path.isdir(folder):
        return f"{option} {path}: the folder {folder} does not exist"
    if not os.access(folder, os.W_OK | os.X_OK):
        return f"{option} {path}: the folder {folder} is not writable"
    if os.path.exists(path) and not os.access(path, os.W_OK):
        return f"{option} {path}: the file exists and is not writable"
    return None


def matplotlib_available() -> bool:
    """Whether ``--plot`` can work (found, and importable: a ``None`` entry hides it)."""
    try:
        return importlib.util.find_spec("matplotlib") is not None
    except ValueError:  # sys.modules["matplotlib"] is None: import would fail
        return False
