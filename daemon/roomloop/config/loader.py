"""Read a site file: YAML with line marks, duplicate keys refused, every problem reported.

PyYAML's usual ``safe_load`` forgets where each value came from and silently keeps
the last of two equal keys. Here the YAML is composed into its node tree with the
safe loader and turned into plain dicts and lists by hand, recording the line of
every key and value (:class:`LineMap`), so a pydantic error at
``zones[1].tuning.min_on_s`` becomes ``site.yaml:42: zones[1].tuning.min_on_s: ...``.

Two functions are a stable interface for other file loaders (the plant loader in
:mod:`roomloop.plant` uses them for plant YAML files):

- :func:`load_yaml_document` reads a file into ``(data, LineMap)`` or raises
  :class:`~roomloop.errors.ConfigError`;
- :func:`problems_from_validation_error` maps a pydantic ``ValidationError`` to
  :class:`~roomloop.errors.ConfigProblem` s with file, line and key path.

:func:`load_site` is the site loader: each section item is validated on its own
(so a bad zone does not hide a dangling point reference elsewhere), then the
cross-checks of :mod:`roomloop.config.checks` run on whatever was valid.
"""

from __future__ import annotations

import difflib
import os
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Annotated, Any, Literal, get_args, get_origin

import yaml
from pydantic import BaseModel, TypeAdapter, ValidationError
from yaml.constructor import SafeConstructor
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from roomloop.config.checks import Finding, SiteParts, check_parts
from roomloop.config.models import (
    Broker,
    CalendarEntry,
    HeatSource,
    Link,
    Logging,
    Point,
    Site,
    SiteInfo,
    Zone,
)
from roomloop.errors import ConfigError, ConfigProblem

KeyPath = tuple[str | int, ...]
"""A location in the document: mapping keys (str) and list indices (int)."""

MAX_FILE_BYTES = 4 * 1024 * 1024
"""A site or plant file is a few kilobytes; anything this big is the wrong file."""

MAX_VALUES = 200_000
"""Aliases can make a small file expand enormously; a real site has a few thousand values."""


# --------------------------------------------------------------------------- key paths


def format_path(path: Sequence[str | int]) -> str:
    """``('zones', 1, 'tuning', 'min_on_s')`` -> ``zones[1].tuning.min_on_s``."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


@dataclass
class LineMap:
    """Where each key and value of a document sits (1-based line numbers).

    ``key_lines`` holds the line of a mapping key, ``value_lines`` the line where a
    value (scalar, mapping or list item) starts. :meth:`line` picks the best line
    for a path, walking up to the nearest recorded parent for keys that are missing.
    """

    key_lines: dict[KeyPath, int] = field(default_factory=dict)
    value_lines: dict[KeyPath, int] = field(default_factory=dict)

    def line(self, path: Sequence[str | int]) -> int | None:
        """The line of the key at ``path``, else of its value, else of the nearest parent."""
        probe: KeyPath = tuple(path)
        while True:
            if probe in self.key_lines:
                return self.key_lines[probe]
            if probe in self.value_lines:
                return self.value_lines[probe]
            if not probe:
                return None
            probe = probe[:-1]

    def value_line(self, path: Sequence[str | int]) -> int | None:
        """The line where the value at ``path`` starts (the key's line if the value has none)."""
        probe = tuple(path)
        if probe in self.value_lines:
            return self.value_lines[probe]
        return self.line(probe)


# --------------------------------------------------------------------------- YAML


class _Scalars(SafeConstructor):
    """Builds scalars with the safe loader's types; no stream of its own."""


_BOOL_WORDS = {"yes", "no", "on", "off", "y", "n"}
_EXPONENT_FLOAT = re.compile(r"[-+]?(\d+\.?\d*|\.\d+)[eE][-+]?\d+")


def _scalar(node: ScalarNode, constructor: _Scalars) -> Any:
    """A scalar as the safe loader reads it, with three YAML 1.1 traps defused.

    Plain ``06:30`` is a base-60 integer (390) in YAML 1.1 and plain ``on`` / ``off``
    are booleans; both keep their text here, so a time of day stays a time and an
    MQTT payload ``on`` stays a string. pydantic still reads ``"yes"`` or ``"off"``
    as a boolean where a field wants one. And ``3.0e5`` (no sign in the exponent) is a
    string to YAML 1.1 but a number to everyone else: here it is a number.
    """
    if node.style is None:
        if node.tag == "tag:yaml.org,2002:str" and _EXPONENT_FLOAT.fullmatch(node.value):
            return float(node.value)
        if node.tag in ("tag:yaml.org,2002:int", "tag:yaml.org,2002:float") and ":" in node.value:
            return node.value
        if node.tag == "tag:yaml.org,2002:bool" and node.value.lower() in _BOOL_WORDS:
            return node.value
        if node.tag == "tag:yaml.org,2002:timestamp":
            # a date keeps its text: the model reads it (YAML would raise on 2026-02-30)
            return node.value
    return constructor.construct_object(node, deep=True)


class _Builder:
    """Turns a composed node tree into dicts and lists, recording lines and duplicate keys."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.lines = LineMap()
        self.problems: list[ConfigProblem] = []
        self._constructor = _Scalars()
        self._built = 0

    def build(self, node: Node, path: KeyPath, depth: int = 0) -> Any:
        self.lines.value_lines.setdefault(path, node.start_mark.line + 1)
        self._built += 1
        if depth > 64:
            self._problem(node, path, "nested too deeply (an alias that refers to itself?)")
            return None
        if self._built > MAX_VALUES:
            if self._built == MAX_VALUES + 1:
                self._problem(node, path, f"more than {MAX_VALUES} values (aliases expanding?)")
            return None
        if isinstance(node, ScalarNode):
            return _scalar(node, self._constructor)
        if isinstance(node, SequenceNode):
            return [self.build(item, (*path, i), depth + 1) for i, item in enumerate(node.value)]
        if isinstance(node, MappingNode):
            return self._mapping(node, path, depth)
        self._problem(node, path, "unsupported YAML node")
        return None

    def _mapping(
        self, node: MappingNode, path: KeyPath, depth: int, from_merge: bool = False
    ) -> dict[str, Any]:
        out: dict[str, Any] = {}
        first_line: dict[str, int] = {}
        merged: list[tuple[Node, KeyPath]] = []
        for key_node, value_node in node.value:
            if key_node.tag == "tag:yaml.org,2002:merge":
                merged.append((value_node, path))
                continue
            if not isinstance(key_node, ScalarNode):
                self._problem(key_node, path, "a key must be a plain word, not a list or mapping")
                continue
            key = str(key_node.value)
            line = key_node.start_mark.line + 1
            if key in first_line:
                self._problem(
                    key_node,
                    (*path, key),
                    f"duplicate key {key!r} (first given at line {first_line[key]}); "
                    "give each key once",
                )
                continue
            first_line[key] = line
            if from_merge and (*path, key) in self.lines.key_lines:
                continue  # given directly in the mapping that merges this one: that wins
            self.lines.key_lines[(*path, key)] = line
            out[key] = self.build(value_node, (*path, key), depth + 1)
        # YAML merge keys (<<: *defaults): keys given directly win over merged ones.
        for value_node, at in merged:
            sources = value_node.value if isinstance(value_node, SequenceNode) else [value_node]
            for source in sources:
                if not isinstance(source, MappingNode):
                    self._problem(source, at, "'<<' merges a mapping (or a list of mappings)")
                    continue
                extra = self._mapping(source, at, depth + 1, from_merge=True)
                for key, value in extra.items():
                    out.setdefault(key, value)
        return out

    def _problem(self, node: Node, path: KeyPath, message: str) -> None:
        self.problems.append(
            ConfigProblem(self.file, node.start_mark.line + 1, format_path(path), message)
        )


def _fail(
    file: str, message: str, line: int | None = None, column: int | None = None
) -> ConfigError:
    return ConfigError([ConfigProblem(file, line, "", message, column)])


def _read_text(path: str | os.PathLike[str]) -> tuple[str, str]:
    """The file's name (as the user gave it) and its text; one clear line when it cannot be read."""
    file = os.fspath(path)
    try:
        with open(file, "rb") as handle:
            raw = handle.read(MAX_FILE_BYTES + 1)
    except FileNotFoundError:
        raise _fail(file, "no such file") from None
    except IsADirectoryError:
        raise _fail(file, "is a directory, not a YAML file") from None
    except PermissionError:
        raise _fail(file, "cannot read the file: permission denied") from None
    except OSError as exc:
        raise _fail(file, f"cannot read the file: {exc.strerror or exc}") from None
    if len(raw) > MAX_FILE_BYTES:
        raise _fail(
            file,
            f"the file is larger than {MAX_FILE_BYTES // (1024 * 1024)} MiB; is it the right file?",
        )
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise _fail(file, "not UTF-8 text (is it a YAML file?)", line) from None
    return file, text


def _compose(file: str, text: str) -> Node | None:
    try:
        return yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        what = ": ".join(part for part in (exc.context, exc.problem) if part)
        message = f"YAML syntax error: {what or 'cannot parse'}"
        if mark is None:
            raise _fail(file, message) from None
        raise _fail(file, message, mark.line + 1, mark.column + 1) from None
    except yaml.YAMLError as exc:
        raise _fail(file, f"YAML error: {exc}") from None


def _read_document(
    path: str | os.PathLike[str],
) -> tuple[str, dict[str, Any], LineMap, list[ConfigProblem]]:
    file, text = _read_text(path)
    if not text.strip():
        raise _fail(file, "the file is empty")
    node = _compose(file, text)
    if node is None:
        raise _fail(file, "the file holds no YAML document (only comments?)")
    if not isinstance(node, MappingNode):
        kind = "a list" if isinstance(node, SequenceNode) else "a single value"
        raise _fail(
            file,
            f"the top level must be a mapping of sections (key: value lines), not {kind}",
            node.start_mark.line + 1,
        )
    builder = _Builder(file)
    data = builder.build(node, ())
    return file, data, builder.lines, builder.problems


def load_yaml_document(path: str | os.PathLike[str]) -> tuple[dict[str, Any], LineMap]:
    """Read one YAML file into plain dicts and lists plus the line of every key and value.

    Raises :class:`ConfigError` with one clear problem for a missing, unreadable, empty or
    non-mapping file or a YAML syntax error (line and column), and with every duplicate
    key (each at its line). Stable interface: the plant loader uses it.
    """
    _file, data, lines, problems = _read_document(path)
    if problems:
        raise ConfigError(problems)
    return data, lines


# --------------------------------------------------------------------------- pydantic errors


def _clean_loc(loc: Sequence[str | int], data: Any) -> KeyPath:
    """A pydantic ``loc`` as a key path into ``data``: union tags and member names removed.

    pydantic puts the discriminator value (``'modbus-input'``) or a member's type name
    (``'list[str]'``) into ``loc`` for union members; those are no keys of the document.
    """
    out: list[str | int] = []
    current: Any = data
    last = len(loc) - 1
    for i, part in enumerate(loc):
        if isinstance(current, Mapping):
            if isinstance(part, str) and part in current:
                out.append(part)
                current = current[part]
                continue
            is_tag = isinstance(part, str) and part == current.get("type")
            if i < last or is_tag or not isinstance(part, str):
                continue  # a union member's name or tag, not a key
            out.append(part)  # a missing or unknown key: reported at its parent
            current = None
        elif isinstance(current, list):
            if isinstance(part, int) and 0 <= part < len(current):
                out.append(part)
                current = current[part]
            # else: a member name of a union over a list ('list[str]'): skip
        elif isinstance(part, int) and i == last and current is not None:
            out.append(part)
            # a scalar has no keys: whatever follows names a union member
    return tuple(out)


_PREFIXES = ("Value error, ", "Assertion failed, ")


def _message(error: Mapping[str, Any], allowed: Iterable[str] = (), tags: str = "") -> str:
    kind = str(error.get("type", ""))
    msg = str(error.get("msg", "invalid"))
    for prefix in _PREFIXES:
        if msg.startswith(prefix):
            msg = msg[len(prefix) :]
    if kind == "missing":
        return "missing: this key is required"
    if kind == "extra_forbidden":
        key = str(error["loc"][-1]) if error.get("loc") else ""
        close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        return f"unknown key {key!r} (a typo is never ignored){hint}"
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        tags = tags or str(error.get("ctx", {}).get("expected_tags", ""))
        found = error.get("ctx", {}).get("tag")
        if kind == "union_tag_not_found":
            return f"missing 'type': say which kind this is ({tags or 'see the reference'})"
        return f"unknown type {found!r}; use one of {tags}"
    if kind in {"model_type", "dict_type", "model_attributes_type"}:
        return f"must be a mapping of keys, got {_show(error.get('input'))}"
    shown = error.get("input")
    if kind in ("value_error", "assertion_error"):
        return msg  # our own wording, already a sentence fragment
    msg = f"{msg[:1].lower()}{msg[1:]}"  # pydantic's "Input should be ..." reads on after the path
    if isinstance(shown, dict | list):
        return msg
    return f"{msg} (got {_show(shown)})"


_BOUNDS = {
    "greater_than": ("gt", "greater than"),
    "greater_than_equal": ("ge", "greater than or equal to"),
    "less_than": ("lt", "less than"),
    "less_than_equal": ("le", "less than or equal to"),
}


def _fahrenheit_bound(error: Mapping[str, Any], path: KeyPath, units: str) -> str | None:
    """A bound on a temperature difference, in the °F degrees an F site writes (held in K)."""
    kind = str(error.get("type", ""))
    if units != "F" or kind not in _BOUNDS or not path or not isinstance(path[-1], str):
        return None
    if not (path[-1].endswith("_k") or path[-1].endswith("_k_per_min")):
        return None
    key, words = _BOUNDS[kind]
    limit = error.get("ctx", {}).get(key)
    if not isinstance(limit, int | float):
        return None
    return (
        f"input should be {words} {round(limit * 1.8, 4):g} °F ({limit:g} K) "
        f"(got {_show(error.get('input'))})"
    )


def _show(value: Any) -> str:
    if value is None:
        return "nothing"
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def problems_from_validation_error(
    err: ValidationError,
    file: str,
    linemap: LineMap,
    prefix: Sequence[str | int] = (),
    *,
    data: Any = None,
    schema: Any = None,
    units: str = "C",
) -> list[ConfigProblem]:
    """One :class:`ConfigProblem` per pydantic error, located at its key's line.

    ``prefix`` is where the validated object sits in the document (``('zones', 1)``
    when one zone was validated on its own); ``data`` is the object that was validated
    (used to drop union tags from ``loc``; without it the tags are guessed from the
    error's shape); ``schema`` is the model or type validated, used to suggest the
    right spelling of an unknown key; ``units`` (``"F"``) states the bounds of temperature
    differences (keys ending in ``_k``) in °F degrees, as the file is written. Stable
    interface: the plant loader uses it.
    """
    problems: list[ConfigProblem] = []
    seen: set[tuple[int | None, str, str]] = set()
    for error in err.errors(include_url=False):
        loc = tuple(error.get("loc", ()))
        path = _clean_loc(loc, data) if data is not None else _drop_tags(loc)
        full = (*tuple(prefix), *path)
        allowed = _allowed_keys(schema, data, path[:-1]) if schema is not None else ()
        tags = ""
        if str(error.get("type", "")).startswith("union_tag"):
            tags = _type_tags(schema)
            if error["type"] == "union_tag_invalid":
                full = (*full, "type")  # point at the 'type' line itself
        message = _fahrenheit_bound(error, full, units) or _message(error, allowed, tags)
        line = linemap.line(full)
        key = (line, format_path(full), message)
        if key in seen:
            continue
        seen.add(key)
        problems.append(ConfigProblem(file, line, format_path(full), message))
    return problems


def _type_tags(schema: Any) -> str:
    """The ``type`` values a discriminated union accepts: ``'modbus-tcp', 'modbus-rtu'``."""
    tp = schema
    while get_origin(tp) is Annotated:
        tp = get_args(tp)[0]
    tags: list[str] = []
    for member in get_args(tp):
        if isinstance(member, type) and issubclass(member, BaseModel):
            type_field = member.model_fields.get("type")
            if type_field is not None:
                tags.extend(repr(tag) for tag in get_args(type_field.annotation))
    return ", ".join(tags)


def _drop_tags(loc: Sequence[str | int]) -> KeyPath:
    """Without the data: drop ``loc`` parts that look like union member names or tags."""
    return tuple(
        part
        for part in loc
        if isinstance(part, int)
        or not (re.search(r"[\[\]]", part) or re.fullmatch(r"[a-z0-9]+(-[a-z0-9]+)+", part))
    )


def _allowed_keys(schema: Any, data: Any, path: KeyPath) -> list[str]:
    """The keys the model at ``path`` accepts (for 'did you mean ...?')."""
    current_type: Any = schema
    current: Any = data
    for part in path:
        current_type = _narrow(current_type, current)
        if isinstance(part, int):
            args = get_args(current_type)
            current_type = args[0] if args else None
            current = current[part] if isinstance(current, list) and part < len(current) else None
        elif isinstance(current_type, type) and issubclass(current_type, BaseModel):
            info = current_type.model_fields.get(part)
            current_type = info.annotation if info is not None else None
            current = current.get(part) if isinstance(current, Mapping) else None
        else:
            return []
    current_type = _narrow(current_type, current)
    if isinstance(current_type, type) and issubclass(current_type, BaseModel):
        return list(current_type.model_fields)
    return []


def _narrow(tp: Any, value: Any) -> Any:
    """Unwrap Annotated/Optional and pick the union member the value's ``type`` names."""
    for _ in range(8):
        origin = get_origin(tp)
        args = get_args(tp)
        if origin is None or not args:
            return tp
        if origin in (list, tuple):
            return tp
        if origin is Annotated:
            tp = args[0]
            continue
        members = [a for a in args if a is not type(None)]
        chosen = members[0] if len(members) == 1 else None
        if chosen is None and isinstance(value, Mapping):
            for member in members:
                if isinstance(member, type) and issubclass(member, BaseModel):
                    type_field = member.model_fields.get("type")
                    if type_field is not None and value.get("type") in get_args(
                        type_field.annotation
                    ):
                        chosen = member
        if chosen is None:
            return None
        tp = chosen
    return tp


# --------------------------------------------------------------------------- the site

_SECTIONS: dict[str, Any] = {
    "site": SiteInfo,
    "links": Link,
    "broker": Broker,
    "points": Point,
    "zones": Zone,
    "calendar": CalendarEntry,
    "heat_sources": HeatSource,
    "logging": Logging,
}
_LIST_SECTIONS = ("links", "points", "zones", "calendar", "heat_sources")
_REQUIRED = ("site", "zones")

_ADAPTERS: dict[str, TypeAdapter[Any]] = {name: TypeAdapter(tp) for name, tp in _SECTIONS.items()}


def _site_units(data: Mapping[str, Any]) -> Literal["C", "F"]:
    site = data.get("site")
    if isinstance(site, Mapping) and site.get("units") == "F":
        return "F"
    return "C"


def load_site(path: str | os.PathLike[str]) -> Site:
    """Read, validate and cross-check a site file; raise :class:`ConfigError` with every problem.

    Each problem reads ``FILE:LINE: key.path: message``; temperatures are in the units the
    file's ``site.units`` names.
    """
    file, data, lines, problems = _read_document(path)
    site = site_from_data(data, file, lines, problems)
    return site


def site_from_data(
    data: Mapping[str, Any],
    file: str,
    lines: LineMap | None = None,
    problems: list[ConfigProblem] | None = None,
) -> Site:
    """Validate an already-read site document (``data``) located in ``file``.

    Useful for sites built in code (the demo, tests); ``lines`` may be empty, then the
    problems carry no line numbers.
    """
    lines = lines if lines is not None else LineMap()
    found: list[ConfigProblem] = list(problems or [])
    units = _site_units(data)
    context = {"units": units}

    for key in data:
        if key not in _SECTIONS:
            close = difflib.get_close_matches(str(key), list(_SECTIONS), n=1, cutoff=0.6)
            hint = f"; did you mean {close[0]!r}?" if close else ""
            found.append(
                ConfigProblem(
                    file,
                    lines.line((key,)),
                    str(key),
                    f"unknown section {key!r} (sections: {', '.join(_SECTIONS)}){hint}",
                )
            )
    for key in _REQUIRED:
        if key not in data:
            found.append(ConfigProblem(file, 1, key, f"missing: the '{key}' section is required"))

    parts = SiteParts(units=units, broker_present=data.get("broker") is not None)

    def validate(section: str, value: Any, where: KeyPath) -> Any:
        try:
            return _ADAPTERS[section].validate_python(value, context=context)
        except ValidationError as exc:
            found.extend(
                problems_from_validation_error(
                    exc, file, lines, where, data=value, schema=_SECTIONS[section], units=units
                )
            )
            return None

    for section in ("site", "broker", "logging"):
        if section in data and data[section] is not None:
            setattr(parts, section, validate(section, data[section], (section,)))
        elif section in data and section == "site":
            found.append(
                ConfigProblem(
                    file, lines.line(("site",)), "site", "must be a mapping with at least 'name'"
                )
            )

    for section in _LIST_SECTIONS:
        items = data.get(section)
        if items is None:
            if section == "zones" and section in data:
                found.append(
                    ConfigProblem(file, lines.line((section,)), section, "list at least one zone")
                )
            continue
        if not isinstance(items, list):
            found.append(
                ConfigProblem(
                    file,
                    lines.line((section,)),
                    section,
                    f"must be a list (one '- ' item per entry), got {_show(items)}",
                )
            )
            continue
        if section == "zones" and not items:
            found.append(
                ConfigProblem(file, lines.line((section,)), section, "list at least one zone")
            )
        valid: list[tuple[int, Any]] = []
        invalid_names: set[str] = set()
        for index, item in enumerate(items):
            model = validate(section, item, (section, index))
            if model is not None:
                valid.append((index, model))
            elif isinstance(item, Mapping) and isinstance(item.get("name"), str):
                invalid_names.add(item["name"])
        setattr(parts, section, valid)
        parts.invalid_names[section] = invalid_names

    for finding in check_parts(parts):
        found.append(_locate(finding, file, lines))

    if found:
        raise ConfigError(_sorted(found))
    try:
        return Site.model_validate(data, context=context)
    except ValidationError as exc:  # pragma: no cover - the sections above catch the same errors
        raise ConfigError(
            problems_from_validation_error(exc, file, lines, (), data=data, schema=Site)
        ) from None


def _locate(finding: Finding, file: str, lines: LineMap) -> ConfigProblem:
    return ConfigProblem(file, lines.line(finding.path), format_path(finding.path), finding.message)


def _sorted(problems: list[ConfigProblem]) -> list[ConfigProblem]:
    """In file order (problems without a line first), stable otherwise."""
    return sorted(problems, key=lambda p: -1 if p.line is None else p.line)
