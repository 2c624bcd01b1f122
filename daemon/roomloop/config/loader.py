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
import stat
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Annotated, Any, Literal, get_args, get_origin

import yaml
from pydantic import BaseModel, TypeAdapter, ValidationError
from yaml.constructor import SafeConstructor
from yaml.nodes import MappingNode, Node, ScalarNode, SequenceNode

from roomloop.config.checks import Finding, SiteParts, check_parts, warnings_of_parts
from roomloop.config.models import (
    SECRET_KEYS,
    Alarms,
    Bms,
    Broker,
    CalendarEntry,
    HeatSource,
    History,
    Link,
    Logging,
    Point,
    Site,
    SiteInfo,
    WrittenFloat,
    WrittenInt,
    Zone,
)
from roomloop.errors import ConfigError, ConfigProblem
from roomloop.units import delta_from_kelvin

KeyPath = tuple[str | int, ...]
"""A location in the document: mapping keys (str) and list indices (int)."""

MAX_FILE_BYTES = 4 * 1024 * 1024
"""A site or plant file is a few kilobytes; anything this big is the wrong file."""

MAX_DEPTH = 64
"""Nesting levels a document may have; a real site file has fewer than ten."""

MAX_VALUES = 200_000
"""Aliases can make a small file expand enormously; a real site has a few thousand values."""


# --------------------------------------------------------------------------- key paths


def format_path(path: Sequence[str | int], document: Any = None) -> str:
    """``('zones', 1, 'tuning', 'min_on_s')`` -> ``zones[1].tuning.min_on_s``.

    With the ``document`` the path points into, a list item with a usable ``name`` (unique in
    its list, a valid name) is named by it: ``points[meeting-temp].address``, which an
    integrator finds in the file faster than ``points[7]``.
    """
    out = ""
    current: Any = document
    for part in path:
        if isinstance(part, int):
            out += f"[{_item_label(current, part)}]"
            current = current[part] if isinstance(current, list) and part < len(current) else None
        else:
            out += ("." if out else "") + str(part)
            current = current.get(part) if isinstance(current, Mapping) else None
    return out


_LABEL = re.compile(r"[a-z0-9][a-z0-9_-]{0,63}")


def _item_label(items: Any, index: int) -> str:
    """The item's name if it names it unambiguously, else its index."""
    if not isinstance(items, list) or not 0 <= index < len(items):
        return str(index)
    item = items[index]
    name = item.get("name") if isinstance(item, Mapping) else None
    if not isinstance(name, str) or not _LABEL.fullmatch(name) or name.isdigit():
        return str(index)
    same = sum(1 for other in items if isinstance(other, Mapping) and other.get("name") == name)
    return name if same == 1 else str(index)


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
    """A scalar as the safe loader reads it, with three YAML 1.1 traps defused, and a
    number's text kept where the number loses it (:class:`WrittenInt`).

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
    value = constructor.construct_object(node, deep=True)
    if node.style is None and str(value) != node.value:
        return _with_text(value, node.value)
    return value


_OCTAL = re.compile(r"[-+]?0[0-7_]+")


def _octal_surprise(node: ScalarNode, value: Any) -> str | None:
    """A plain whole number with a leading zero is octal in YAML 1.1 (``address: 0100`` is
    64), but decimal to YAML 1.2 and to a reader: refused, with both readings."""
    if node.style is not None or node.tag != "tag:yaml.org,2002:int":
        return None
    if not _OCTAL.fullmatch(node.value) or isinstance(value, bool):
        return None
    decimal = int(node.value.replace("_", ""), 10)
    if decimal == value:
        return None  # 00 to 07: the same number either way
    return (
        f"{node.value} is read as the octal number {value} (a leading zero, YAML 1.1); "
        f"write {decimal} without the leading zero (or {value}, if that is meant)"
    )


def _with_text(value: Any, text: str) -> Any:
    """A number that lost its text (``0730`` is octal 472, ``7.30`` is 7.3) keeps it, for
    hints; anything else as it is."""
    if type(value) is int:
        return WrittenInt(value, text)
    if type(value) is float:
        return WrittenFloat(value, text)
    return value


class _Builder:
    """Turns a composed node tree into dicts and lists, recording lines and duplicate keys."""

    def __init__(self, file: str) -> None:
        self.file = file
        self.lines = LineMap()
        self.raw_problems: list[tuple[int, KeyPath, str]] = []
        self._constructor = _Scalars()
        self._built = 0

    def build(self, node: Node, path: KeyPath, depth: int = 0) -> Any:
        self.lines.value_lines.setdefault(path, node.start_mark.line + 1)
        self._built += 1
        if depth > MAX_DEPTH:
            # named where the nesting starts, not by 64 indices (an alias that contains itself)
            self._problem(
                node, path[:3], f"nested more than 64 levels deep below here ({len(path)} levels; "
                "an alias that refers to itself?)"
            )
            return None
        if self._built > MAX_VALUES:
            if self._built == MAX_VALUES + 1:
                self._problem(node, path, f"more than {MAX_VALUES} values (aliases expanding?)")
            return None
        if isinstance(node, ScalarNode):
            value = _scalar(node, self._constructor)
            octal = _octal_surprise(node, value)
            if octal is not None and path and path[-1] != "at":  # a time has its own hint
                self._problem(node, path, octal)
            return value
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
        previous: tuple[Node, Node] | None = None
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
            comma = _decimal_comma(node, key_node, value_node, previous)
            if comma is not None and previous is not None:
                self._problem(previous[0], (*path, str(previous[0].value)), comma)
                continue
            previous = (key_node, value_node)
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
        self.raw_problems.append((node.start_mark.line + 1, path, message))

    def problems(self, document: Any) -> list[ConfigProblem]:
        """The problems found while building, their paths naming items of ``document``."""
        return [
            ConfigProblem(self.file, line, format_path(path, document), message)
            for line, path, message in self.raw_problems
        ]


def _decimal_comma(
    node: MappingNode, key: ScalarNode, value: Node, previous: tuple[Node, Node] | None
) -> str | None:
    """``{comfort: 21,5}`` is ``{comfort: 21, 5: null}`` to YAML: a decimal comma, not a key.

    Only in a flow mapping, for a bare-number key without a value right after a bare whole
    number, on the same line: no real site file has a key like ``5`` there.
    """
    if not node.flow_style or previous is None or key.style is not None:
        return None
    before = previous[1]
    if not (
        isinstance(before, ScalarNode)
        and before.style is None
        and re.fullmatch(r"[-+]?\d+", before.value)
        and re.fullmatch(r"\d+", key.value)
        and isinstance(value, ScalarNode)
        and value.tag == "tag:yaml.org,2002:null"
        and key.start_mark.line == before.end_mark.line
    ):
        return None
    number = f"{before.value}.{key.value}"
    return (
        f"{before.value},{key.value} reads as {before.value} and a key {key.value!r}: "
        f"write decimals with a point ({number})"
    )


def _fail(
    file: str, message: str, line: int | None = None, column: int | None = None
) -> ConfigError:
    return ConfigError([ConfigProblem(file, line, "", message, column)])


def _read_text(path: str | os.PathLike[str]) -> tuple[str, str]:
    """The file's name (as the user gave it) and its text; one clear line when it cannot be read.

    Only a regular file is read: a FIFO would block the reader until some writer comes
    (``check`` and ``run`` would hang), and a device or socket is never a site file. The
    file is opened without blocking and judged by ``fstat`` of what was opened, so there
    is no gap between the check and the read.
    """
    file = os.fspath(path)
    try:
        fd = os.open(file, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise _fail(file, "no such file") from None
    except IsADirectoryError:
        raise _fail(file, "is a directory, not a YAML file") from None
    except PermissionError:
        raise _fail(file, "cannot read the file: permission denied") from None
    except OSError as exc:
        raise _fail(file, f"cannot read the file: {exc.strerror or exc}") from None
    mode = os.fstat(fd).st_mode
    if not stat.S_ISREG(mode):
        os.close(fd)
        if stat.S_ISDIR(mode):
            raise _fail(file, "is a directory, not a YAML file")
        raise _fail(file, f"is {_file_kind(mode)}, not a regular file; give the YAML file")
    with os.fdopen(fd, "rb") as handle:
        try:
            raw = handle.read(MAX_FILE_BYTES + 1)
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


def _file_kind(mode: int) -> str:
    if stat.S_ISFIFO(mode):
        return "a named pipe (FIFO)"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a file"


_OPENS = (
    yaml.BlockMappingStartToken,
    yaml.BlockSequenceStartToken,
    yaml.FlowMappingStartToken,
    yaml.FlowSequenceStartToken,
)
_CLOSES = (yaml.BlockEndToken, yaml.FlowMappingEndToken, yaml.FlowSequenceEndToken)


def _deepest(file: str, text: str) -> None:
    """Refuse a document nested deeper than :data:`MAX_DEPTH`, at the line where it gets too deep.

    PyYAML's composer recurses once per level, so a few hundred nested lists or mappings
    end in a RecursionError. Its scanner is a loop: count the depth on the tokens first.
    """
    depth = 0
    for token in yaml.scan(text, Loader=yaml.SafeLoader):
        if isinstance(token, _OPENS):
            depth += 1
            if depth > MAX_DEPTH:
                mark = token.start_mark
                raise _fail(
                    file,
                    f"nested more than {MAX_DEPTH} levels deep; a site file needs a handful",
                    mark.line + 1,
                    mark.column + 1,
                )
        elif isinstance(token, _CLOSES):
            depth -= 1


def _syntax_hint(problem: str | None) -> str:
    if problem and "'\\t'" in problem:
        return " (indent with spaces, not tabs)"
    return ""


def _compose(file: str, text: str) -> Node | None:
    try:
        _deepest(file, text)
        return yaml.compose(text, Loader=yaml.SafeLoader)
    except yaml.MarkedYAMLError as exc:
        mark = exc.problem_mark or exc.context_mark
        what = ": ".join(part for part in (exc.context, exc.problem) if part)
        message = f"YAML syntax error: {what or 'cannot parse'}{_syntax_hint(exc.problem)}"
        if mark is None:
            raise _fail(file, message) from None
        raise _fail(file, message, mark.line + 1, mark.column + 1) from None
    except yaml.YAMLError as exc:
        raise _fail(file, f"YAML error: {exc}") from None
    except RecursionError:  # pragma: no cover - _deepest refuses such documents first
        raise _fail(file, f"nested more than {MAX_DEPTH} levels deep") from None


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
    return file, data, builder.lines, builder.problems(data)


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
_NUMBER_TYPES = {"int_type": "a whole number", "float_type": "a number"}


def _message(error: Mapping[str, Any], allowed: Iterable[str] = (), tags: str = "") -> str:
    kind = str(error.get("type", ""))
    msg = str(error.get("msg", "invalid"))
    for prefix in _PREFIXES:
        if msg.startswith(prefix):
            msg = msg[len(prefix) :]
    shown = error.get("input")
    told = _shape_message(kind, error, allowed, tags) or _number_message(kind, shown)
    if told is not None:
        return told
    if kind in ("value_error", "assertion_error"):
        return msg  # our own wording, already a sentence fragment
    msg = f"{msg[:1].lower()}{msg[1:]}"  # pydantic's "Input should be ..." reads on after the path
    if isinstance(shown, dict | list):
        return msg
    return f"{msg} (got {_show(shown)})"


def _shape_message(
    kind: str, error: Mapping[str, Any], allowed: Iterable[str], tags: str
) -> str | None:
    """Missing and unknown keys, union tags, a scalar where a mapping belongs."""
    if kind == "missing":
        return "missing: this key is required"
    if kind == "extra_forbidden":
        key = str(error["loc"][-1]) if error.get("loc") else ""
        close = difflib.get_close_matches(key, list(allowed), n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close else ""
        return f"unknown key {key!r} (a typo is never ignored){hint}"
    if kind in ("union_tag_invalid", "union_tag_not_found"):
        tags = tags or str(error.get("ctx", {}).get("expected_tags", ""))
        if kind == "union_tag_not_found":
            return f"missing 'type': say which kind this is ({tags or 'see the reference'})"
        return f"unknown type {error.get('ctx', {}).get('tag')!r}; use one of {tags}"
    if kind in {"model_type", "dict_type", "model_attributes_type"}:
        return f"must be a mapping of keys, got {_show(error.get('input'))}"
    return None


def _number_message(kind: str, shown: Any) -> str | None:
    """A boolean, text or a fraction where a number or a whole number belongs."""
    if kind in _NUMBER_TYPES and isinstance(shown, bool):
        return (
            f"must be {_NUMBER_TYPES[kind]}, not {str(shown).lower()} (a boolean is no number; "
            "write the number itself)"
        )
    if kind in _NUMBER_TYPES and isinstance(shown, str):
        hint = "; write it without quotes" if _looks_numeric(shown) else ""
        if re.fullmatch(r"\s*[-+]?\d+,\d+\s*", shown):
            hint = f"; write decimals with a point ({shown.strip().replace(',', '.')})"
        return f"must be {_NUMBER_TYPES[kind]}, not text (got {_show(shown)}){hint}"
    if kind == "int_type" and isinstance(shown, float):
        return f"must be a whole number (got {_show(shown)})"
    return None


def _looks_numeric(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


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
        f"input should be {words} {round(delta_from_kelvin(limit, units), 4):g} °F ({limit:g} K) "
        f"(got {_show(error.get('input'))})"
    )


class _Hidden:
    """Stands in for a secret key's value in a message."""


_HIDDEN = _Hidden()


def _show(value: Any) -> str:
    if isinstance(value, _Hidden):
        return "a value that is not shown"
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
    document: Any = None,
) -> list[ConfigProblem]:
    """One :class:`ConfigProblem` per pydantic error, located at its key's line.

    ``prefix`` is where the validated object sits in the document (``('zones', 1)``
    when one zone was validated on its own); ``data`` is the object that was validated
    (used to drop union tags from ``loc``; without it the tags are guessed from the
    error's shape); ``schema`` is the model or type validated, used to suggest the
    right spelling of an unknown key; ``units`` (``"F"``) states the bounds of temperature
    differences (keys ending in ``_k``) in °F degrees, as the file is written; ``document``
    is the whole document (list items are then named by their ``name``:
    ``points[meeting-temp].address``). Stable interface: the plant loader uses it.
    """
    problems: list[ConfigProblem] = []
    seen: set[tuple[int | None, str, str]] = set()
    for error in err.errors(include_url=False):
        loc = tuple(error.get("loc", ()))
        path = _clean_loc(loc, data) if data is not None else _drop_tags(loc)
        full = (*tuple(prefix), *path)
        allowed: Iterable[str] = ()
        dedented = ""
        if schema is not None:
            parent, parent_data = _model_at(schema, data, path[:-1])
            allowed = list(parent.model_fields) if parent is not None else []
            if error.get("type") == "extra_forbidden" and path and isinstance(path[-1], str):
                homes = _homes(parent, parent_data, path[-1])
                keys = parent_data if isinstance(parent_data, Mapping) else {}
                dedented = _dedent_hint(path[-1], homes, keys)
        tags = ""
        if str(error.get("type", "")).startswith("union_tag"):
            tags = _type_tags(schema)
            if error["type"] == "union_tag_invalid":
                full = (*full, "type")  # point at the 'type' line itself
        told: Mapping[str, Any] = error
        if any(part in SECRET_KEYS for part in full if isinstance(part, str)):
            told = {**error, "input": _HIDDEN}  # a password typed there is never echoed
        message = _fahrenheit_bound(told, full, units) or _message(
            told, [] if dedented else allowed, tags
        )
        message += dedented
        line = linemap.line(full)
        shown_path = format_path(full, document)
        key = (line, shown_path, message)
        if key in seen:
            continue
        seen.add(key)
        problems.append(ConfigProblem(file, line, shown_path, message))
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


def _model_at(schema: Any, data: Any, path: KeyPath) -> tuple[Any, Any]:
    """The model type at ``path`` (None if it is no model) and the data there."""
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
            return None, None
    current_type = _narrow(current_type, current)
    if isinstance(current_type, type) and issubclass(current_type, BaseModel):
        return current_type, current
    return None, None


def _allowed_keys(schema: Any, data: Any, path: KeyPath) -> list[str]:
    """The keys the model at ``path`` accepts (for 'did you mean ...?')."""
    model, _ = _model_at(schema, data, path)
    return list(model.model_fields) if model is not None else []


def _homes(model: Any, data: Any, key: str) -> list[str]:
    """The sub-sections of ``model`` (``fail_safe``, ``tuning``, ...) that have ``key``:
    where a key reported as unknown belongs when it was dedented out of its section."""
    if model is None:
        return []
    found: list[str] = []
    for name, info in model.model_fields.items():
        value = data.get(name) if isinstance(data, Mapping) else None
        sub = _narrow(info.annotation, value)
        if isinstance(sub, type) and issubclass(sub, BaseModel) and key in sub.model_fields:
            found.append(name)
    return found


def _dedent_hint(key: str, homes: Sequence[str], data_keys: Iterable[str]) -> str:
    if not homes:
        return ""
    present = [home for home in homes if home in set(data_keys)]
    chosen = present or list(homes)
    where = " or ".join(f"'{home}:'" for home in chosen)
    return (
        f"; {key!r} is a key of {' or '.join(chosen)}: indent it under {where} "
        "(is it dedented out of its section?)"
    )


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
    "bms": Bms,
    "alarms": Alarms,
    "history": History,
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
    site, _warnings = load_site_with_warnings(path)
    return site


def load_site_with_warnings(path: str | os.PathLike[str]) -> tuple[Site, list[ConfigProblem]]:
    """:func:`load_site`, plus what is probably a mistake but may be right (``check`` prints
    these; the site is valid with them), each located like a problem."""
    file, data, lines, problems = _read_document(path)
    return _validated(data, file, lines, problems)


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
    site, _warnings = _validated(data, file, lines, problems)
    return site


def _validated(
    data: Mapping[str, Any],
    file: str,
    lines: LineMap | None = None,
    problems: list[ConfigProblem] | None = None,
) -> tuple[Site, list[ConfigProblem]]:
    lines = lines if lines is not None else LineMap()
    found: list[ConfigProblem] = list(problems or [])
    units = _site_units(data)
    context = {"units": units}

    found += _section_names(data, file, lines)

    parts = SiteParts(units=units, broker_present=data.get("broker") is not None)

    def validate(section: str, value: Any, where: KeyPath) -> Any:
        try:
            return _ADAPTERS[section].validate_python(value, context=context)
        except ValidationError as exc:
            found.extend(
                problems_from_validation_error(
                    exc,
                    file,
                    lines,
                    where,
                    data=value,
                    schema=_SECTIONS[section],
                    units=units,
                    document=data,
                )
            )
            return None

    for section in ("site", "broker", "logging", "bms", "alarms"):
        if section in data and data[section] is not None:
            setattr(parts, section, validate(section, data[section], (section,)))
        elif section in data and section == "site":
            found.append(
                ConfigProblem(
                    file, lines.line(("site",)), "site", "must be a mapping with at least 'name'"
                )
            )

    if data.get("history") is not None:  # checked alone: no cross-references
        validate("history", data["history"], ("history",))

    for section in _LIST_SECTIONS:
        items, shape = _list_section(data, section, file, lines)
        found += shape
        if items is None:
            continue
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
        found.append(_locate(finding, file, lines, data))

    if found:
        raise ConfigError(_sorted(found))
    warnings = _sorted([_locate(w, file, lines, data) for w in warnings_of_parts(parts)])
    try:
        return Site.model_validate(data, context=context), warnings
    except ValidationError as exc:  # pragma: no cover - the sections above catch the same errors
        raise ConfigError(
            problems_from_validation_error(exc, file, lines, (), data=data, schema=Site)
        ) from None


def _section_names(data: Mapping[str, Any], file: str, lines: LineMap) -> list[ConfigProblem]:
    """Unknown sections (with where a dedented key belongs) and missing required ones."""
    found: list[ConfigProblem] = []
    for key in data:
        if key in _SECTIONS:
            continue
        homes = [
            section
            for section in ("site", "broker", "logging")
            if str(key) in _SECTIONS[section].model_fields
        ]
        in_item = _item_dedent_hint(data, str(key))
        close = difflib.get_close_matches(str(key), list(_SECTIONS), n=1, cutoff=0.6)
        hint = f"; did you mean {close[0]!r}?" if close and not homes and not in_item else ""
        hint += in_item or _dedent_hint(str(key), homes, data)
        found.append(
            ConfigProblem(
                file,
                lines.line((key,)),
                str(key),
                f"unknown section {key!r} (sections: {', '.join(_SECTIONS)}){hint}",
            )
        )
    for key in _REQUIRED:
        if key not in data and not (key == "zones" and _has_sources(data)):
            found.append(ConfigProblem(file, 1, key, f"missing: the '{key}' section is required"))
    return found


def _item_dedent_hint(data: Mapping[str, Any], key: str) -> str:
    """Where a key dedented to the file's first column belongs when the section above it is
    a list (``zones:``): the last item of that list, or one of the item's sub-sections."""
    keys = [str(k) for k in data]
    known_above = [k for k in keys[: keys.index(key)] if k in _SECTIONS]  # past other strays
    above = known_above[-1] if known_above else None
    items = data.get(above) if above in _LIST_SECTIONS else None
    if not isinstance(items, list) or not items or not isinstance(items[-1], Mapping):
        return ""
    item = items[-1]
    model = _narrow(_SECTIONS[str(above)], item)
    if not (isinstance(model, type) and issubclass(model, BaseModel)):
        return ""
    label = format_path((str(above), len(items) - 1), data)
    if key in model.model_fields:
        return (
            f"; {key!r} is a key of {label}, the item above it: indent it as that item's other "
            "keys (is it dedented out of its section?)"
        )
    homes = _homes(model, item, key)
    if not homes:
        return ""
    chosen = [home for home in homes if home in item] or homes
    return (
        f"; {key!r} is a key of {' or '.join(f'{label}.{home}' for home in chosen)}: indent it "
        f"under that item's {' or '.join(repr(home + ':') for home in chosen)} "
        "(is it dedented out of its section?)"
    )


def _has_sources(data: Mapping[str, Any]) -> bool:
    """The site lists heat sources: it may have no zones of its own (a boiler's board whose
    zones all live on other daemons)."""
    sources = data.get("heat_sources")
    return isinstance(sources, list) and len(sources) > 0


def _list_section(
    data: Mapping[str, Any], section: str, file: str, lines: LineMap
) -> tuple[list[Any] | None, list[ConfigProblem]]:
    """The items of a list section (None when there are none to validate) and its problems."""
    items = data.get(section)
    where = lines.line((section,))
    no_zones = [ConfigProblem(file, where, section, _NO_ZONES)]
    if items is None:
        if section == "zones" and section in data and not _has_sources(data):
            return None, no_zones
        return None, []
    if not isinstance(items, list):
        message = f"must be a list (one '- ' item per entry), got {_show(items)}"
        return None, [ConfigProblem(file, where, section, message)]
    if section == "zones" and not items and not _has_sources(data):
        return items, no_zones
    return items, []


_NO_ZONES = "list at least one zone (a site without zones needs a heat source serving remote ones)"


def _locate(finding: Finding, file: str, lines: LineMap, document: Any = None) -> ConfigProblem:
    return ConfigProblem(
        file, lines.line(finding.path), format_path(finding.path, document), finding.message
    )


def _sorted(problems: list[ConfigProblem]) -> list[ConfigProblem]:
    """In file order (problems without a line first), stable otherwise."""
    return sorted(problems, key=lambda p: -1 if p.line is None else p.line)
