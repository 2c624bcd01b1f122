"""Find and read plant model files: the built-in ones by name, or a YAML file by path.

Plant files are read and located exactly like the site file (the config loader's
line-marked YAML and its pydantic error mapping), so a mistake reads
``FILE:LINE: key.path: message`` and the command exits 2.
"""

from __future__ import annotations

import os
from importlib import resources
from pathlib import Path

from pydantic import ValidationError

from roomloop.config.loader import (
    format_path,
    load_yaml_document,
    problems_from_validation_error,
)
from roomloop.errors import ConfigError, ConfigProblem
from roomloop.plant.spec import PlantSpec

HEATING_PLANTS: tuple[str, ...] = ("forced-air", "hydronic", "underfloor", "electric", "steam")
"""The built-in plants named after a heating type, one per type."""

STRESS_PLANTS: dict[str, str] = {"thick-slab": "underfloor", "oversized-air": "forced-air"}
"""Built-in plants that stress a heating type's defaults (name -> the heating type they test):
a thick slab (an emitter time constant of many hours) and a very light room with an
oversized air heater."""

BUILTIN_PLANTS: tuple[str, ...] = (*HEATING_PLANTS, *STRESS_PLANTS)
"""Every built-in plant: one per heating type, then the stress cases."""

PLANT_FOR_HEATING: dict[str, str] = {name: name for name in HEATING_PLANTS}
"""The built-in plant ``simulate`` and the demo take for a zone of each heating type."""

COOLING_PLANTS: tuple[str, ...] = ("direct-expansion", "chilled-water")
"""The built-in cooling plants (with ``cooler_w``), one per cooling type, named after it: a
room with a split unit, an office with a fan coil on chilled water. Both heat as well."""

PLANT_FOR_COOLING: dict[str, str] = {name: name for name in COOLING_PLANTS}
"""The built-in plant ``simulate --mode cool`` takes for a zone of each cooling type."""

ALL_PLANTS: tuple[str, ...] = (*BUILTIN_PLANTS, *COOLING_PLANTS)
"""Every built-in plant name ``load_plant`` knows."""

HEATING_FOR_PLANT: dict[str, str] = {**PLANT_FOR_HEATING, **STRESS_PLANTS}
"""The heating type whose defaults each built-in plant runs with (in the bench, ``simulate``)."""


def builtin_plant_path(name: str) -> Path:
    """Where the built-in plant ``name`` lives inside the installed package."""
    if name not in ALL_PLANTS:
        raise KeyError(name)
    return Path(str(resources.files("roomloop.plant").joinpath("builtin", f"{name}.yaml")))


def load_plant_file(path: str | os.PathLike[str]) -> PlantSpec:
    """Read and validate one plant file; :class:`ConfigError` with every problem located."""
    data, lines = load_yaml_document(path)
    try:
        spec = PlantSpec.model_validate(data)
    except ValidationError as err:
        raise ConfigError(
            problems_from_validation_error(err, str(path), lines, data=data, schema=PlantSpec)
        ) from None
    too_fast = spec.time_constant_problems()
    if too_fast:
        raise ConfigError(
            [
                ConfigProblem(str(path), lines.line(key_path), format_path(key_path), message)
                for key_path, message in too_fast
            ]
        )
    return spec


def load_plant(name_or_path: str | os.PathLike[str]) -> PlantSpec:
    """A built-in plant by name, else a plant file by path.

    A name that is neither gives one clear problem listing the built-in names.
    """
    text = os.fspath(name_or_path)
    if text in ALL_PLANTS:
        return load_plant_file(builtin_plant_path(text))
    if not os.path.exists(text):
        raise ConfigError(
            [
                ConfigProblem(
                    text,
                    None,
                    "",
                    "no such plant file, and not a built-in plant (built-in: "
                    + ", ".join(ALL_PLANTS)
                    + ")",
                )
            ]
        )
    return load_plant_file(text)
