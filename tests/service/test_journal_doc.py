"""docs/journal.md against the events the daemon's code can log, in both directions.

The events are collected from the source, not from a run: many of them (a damaged state
file, a stuck stop, a BMS client refused) take a fault no scenario reaches. An AST walk over
every module of ``daemon/roomloop`` reads:

1. **Direct log calls**: ``<logger>.<method>("area.name", key=...)`` with ``method`` one of
   ``debug``, ``info``, ``warning``, ``error``, ``exception`` (logged at ``error``) or
   ``critical``, and ``<logger>.log(logging.INFO, "area.name", ...)``. A logger is an
   expression whose last name is ``log`` or ``logger`` (``log``, ``self.logger``); every
   structlog logger the package makes must be bound to such a name (rule 6), so ``math.log``
   is never taken for one.
2. **The rate-limited helpers** of :class:`roomloop.io.eventlog.RateLimitedLog`:
   ``.problem(key, "area.name", now, ...)``, ``.recovered(key, "area.name", ...)`` and
   ``.event(key, "area.name", now, level=..., ...)``. Which argument is the event and at
   which level each helper logs are read from the helpers' own code (``problem`` calls
   ``self.logger.warning(event, ...)``; ``event`` logs at its ``level`` argument, whose
   default is read from its signature).
3. **Zone and heat-source events**: ``ZoneEvent("area.name", level, fields)`` (see
   ``roomloop.service.events``), the service logging each at its ``level``.
4. An event name, a level or a fields dict may be a local or module-level name bound to a
   constant (``fields = {...}`` then ``ZoneEvent(..., fields)``), or a conditional
   expression (``"a.b" if x else "a.c"``, ``log.warning if x else log.info``,
   ``logging.INFO if x else logging.ERROR``). Two conditional expressions on the same test
   in one call are read branch by branch: ``(log.warning if e.raised else log.info)(
   "alarm.raised" if e.raised else "alarm.cleared")`` gives a warning and an info event,
   not four combinations.
5. A log call whose event is not readable by these rules is a **forwarding site** (the
   helpers' own ``self.logger.warning(event, ...)``, the service's ``getattr(log,
   event.level)(event.event, ...)``): each must be one of :data:`FORWARDERS`, whose events
   are collected where they are made (rules 2 and 3), and each listed one must still exist.
   A new kind of indirection fails here rather than hiding its events.
6. Every ``get_logger(...)`` result is bound to ``log`` or ``logger`` (or given straight to
   a ``RateLimitedLog``), and no logger is re-bound (``log.bind(...)``) under another name.
7. Any other string constant in the package shaped like an event of a known area
   (``output.something``) must be an event collected above: a name kept in a constant and
   logged by some route these rules miss fails here.

An event's fields are the keywords of its calls (all its call sites together) or the keys
of its ``ZoneEvent`` dict; what the helpers and structlog add (``suppressed``,
``failing_for_s``, ``failed_for_s``, ``failures``, ``exception``, ``timestamp``) is described
once in the doc's introduction, not per event.

The doc gives each event a ``### `area.name` `` heading, a ``- level:`` line naming every
level it can be logged at, a ``- fields:`` line with each field in backquotes, and for an
event of a rate-limited helper a ``- repeats:`` line (``folded`` for ``problem``,
``closes`` for ``recovered``, ``limited`` for ``event``: what the doc's introduction says
about its extra fields holds). The names, the levels, the fields and the repeats must match
the code exactly.
"""

from __future__ import annotations

import ast
import inspect
import re
from collections.abc import Iterator
from dataclasses import dataclass, field
from pathlib import Path

from roomloop.io.eventlog import RateLimitedLog

ROOT = Path(__file__).resolve().parents[2]
PACKAGE = ROOT / "daemon" / "roomloop"
DOC = ROOT / "docs" / "journal.md"

NAME_RE = re.compile(r"[a-z][a-z_]*\.[a-z][a-z_]*")
LOGGER_NAMES = {"log", "logger"}
METHOD_LEVELS = {
    "debug": "debug", "info": "info", "warning": "warning", "error": "error",
    "exception": "error", "critical": "critical",
}
LEVEL_WORDS = ("debug", "info", "warning", "error", "critical")
HELPER_CLASS = "RateLimitedLog"
REPEATS = {"problem": "folded", "recovered": "closes", "event": "limited"}
"""The doc's ``- repeats:`` word for the events of each rate-limited helper."""
EVENT_CLASS = "ZoneEvent"

FORWARDERS = {
    ("io/eventlog.py", "event"): "RateLimitedLog.event logs the name it is given (rule 2)",
    ("io/eventlog.py", "problem"): "RateLimitedLog.problem (rule 2)",
    ("io/eventlog.py", "recovered"): "RateLimitedLog.recovered (rule 2)",
    ("service/zones.py", "run_zone"): "each zone step's ZoneEvents (rule 3)",
    ("service/sources.py", "step"): "each heat source tick's ZoneEvents (rule 3)",
}
"""Log calls whose event is a variable: (module, function) -> where their events come from."""

Cond = frozenset[tuple[str, bool]]
"""The branches of conditional expressions a value was taken under: (the test, which side)."""


@dataclass
class Event:
    levels: set[str] = field(default_factory=set)
    fields: set[str] = field(default_factory=set)
    sites: list[str] = field(default_factory=list)
    helpers: set[str] = field(default_factory=set)
    """The :class:`RateLimitedLog` methods that log it (rule 2)."""


@dataclass
class Collected:
    events: dict[str, Event] = field(default_factory=dict)
    forwarders: set[tuple[str, str]] = field(default_factory=set)
    problems: list[str] = field(default_factory=list)

    def add(
        self, name: str, level: str, fields: set[str], site: str, helper: str | None = None
    ) -> None:
        event = self.events.setdefault(name, Event())
        event.levels.add(level)
        event.fields |= fields
        if site not in event.sites:
            event.sites.append(site)
        if helper is not None:
            event.helpers.add(helper)


class Scope:
    """The constants bound to plain names in a module and in each function (rule 4)."""

    def __init__(self, module: ast.Module) -> None:
        self.module = _bindings(module.body)
        self.functions: dict[ast.AST, dict[str, list[ast.expr]]] = {}

    def lookup(self, name: str, function: ast.AST | None) -> list[ast.expr]:
        if function is not None:
            if function not in self.functions:
                self.functions[function] = _bindings(list(ast.walk(function)))
            found = self.functions[function].get(name)
            if found:
                return found
        return self.module.get(name, [])


def _bindings(nodes: list[ast.AST] | list[ast.stmt]) -> dict[str, list[ast.expr]]:
    out: dict[str, list[ast.expr]] = {}
    for node in nodes:
        if isinstance(node, ast.Assign):
            for target in node.targets:
                if isinstance(target, ast.Name):
                    out.setdefault(target.id, []).append(node.value)
        elif (
            isinstance(node, ast.AnnAssign)
            and isinstance(node.target, ast.Name)
            and node.value is not None
        ):
            out.setdefault(node.target.id, []).append(node.value)
    return out


def _alternatives(
    expr: ast.expr, scope: Scope, function: ast.AST | None, depth: int = 0
) -> Iterator[tuple[Cond, ast.expr]]:
    """The leaves ``expr`` may evaluate to, with the branches taken to reach each."""
    if depth > 8:
        return
    if isinstance(expr, ast.IfExp):
        test = ast.dump(expr.test)
        for side, branch in ((True, expr.body), (False, expr.orelse)):
            for cond, leaf in _alternatives(branch, scope, function, depth + 1):
                yield cond | {(test, side)}, leaf
        return
    if isinstance(expr, ast.Name):
        bound = scope.lookup(expr.id, function)
        if bound:
            for value in bound:
                yield from _alternatives(value, scope, function, depth + 1)
            return
    yield frozenset(), expr


def _constant_strings(
    expr: ast.expr, scope: Scope, function: ast.AST | None
) -> list[tuple[Cond, str]] | None:
    """Every string ``expr`` may be, or None when one of its leaves is not a constant."""
    out = []
    for cond, leaf in _alternatives(expr, scope, function):
        if not (isinstance(leaf, ast.Constant) and isinstance(leaf.value, str)):
            return None
        out.append((cond, leaf.value))
    return out


def _is_logger(expr: ast.expr) -> bool:
    if isinstance(expr, ast.Name):
        return expr.id in LOGGER_NAMES
    return isinstance(expr, ast.Attribute) and expr.attr in LOGGER_NAMES


def _method_levels(
    func: ast.expr, scope: Scope, function: ast.AST | None
) -> list[tuple[Cond, str]] | None:
    """The levels a callee logs at (``log.warning``, ``log.debug if x else log.info``), or
    None when it is no logger method; ``log.log`` gives ``"log"``, its level being an
    argument."""
    out = []
    for cond, leaf in _alternatives(func, scope, function):
        if not (isinstance(leaf, ast.Attribute) and _is_logger(leaf.value)):
            return None
        if leaf.attr == "log":
            out.append((cond, "log"))
        elif leaf.attr in METHOD_LEVELS:
            out.append((cond, METHOD_LEVELS[leaf.attr]))
        else:
            return None
    return out


def _stdlib_levels(
    expr: ast.expr, scope: Scope, function: ast.AST | None
) -> list[tuple[Cond, str]] | None:
    """``logging.INFO`` (or a conditional of such) as level words."""
    out = []
    for cond, leaf in _alternatives(expr, scope, function):
        if not (isinstance(leaf, ast.Attribute) and leaf.attr.lower() in LEVEL_WORDS):
            return None
        out.append((cond, leaf.attr.lower()))
    return out


def _pairs(
    names: list[tuple[Cond, str]], levels: list[tuple[Cond, str]]
) -> list[tuple[str, str]]:
    """Names with levels, dropping combinations that take both sides of one test."""
    out = []
    for name_cond, name in names:
        for level_cond, level in levels:
            sides = dict(name_cond)
            if any(sides.get(test, side) != side for test, side in level_cond):
                continue
            out.append((name, level))
    return out


def _keywords(call: ast.Call) -> set[str]:
    return {k.arg for k in call.keywords if k.arg is not None}


def _dict_keys(expr: ast.expr, scope: Scope, function: ast.AST | None) -> set[str] | None:
    keys: set[str] = set()
    for _, leaf in _alternatives(expr, scope, function):
        if not isinstance(leaf, ast.Dict):
            return None
        for key in leaf.keys:
            if not (isinstance(key, ast.Constant) and isinstance(key.value, str)):
                return None
            keys.add(key.value)
    return keys


@dataclass(frozen=True)
class Helper:
    """One :class:`RateLimitedLog` method: where its event argument is, what level it logs."""

    event_index: int
    """The event's position among the call's positional arguments."""
    levels: tuple[str, ...]
    """The levels it logs at; empty: at its ``level`` argument."""
    default_level: str | None


def read_helpers() -> dict[str, Helper]:
    """Rule 2, read from ``io/eventlog.py``: each method of the class that logs its ``event``."""
    tree = ast.parse((PACKAGE / "io" / "eventlog.py").read_text(encoding="utf-8"))
    (cls,) = [n for n in tree.body if isinstance(n, ast.ClassDef) and n.name == HELPER_CLASS]
    helpers: dict[str, Helper] = {}
    for method in cls.body:
        if not isinstance(method, ast.FunctionDef):
            continue
        params = [a.arg for a in method.args.args][1:]  # without self
        if "event" not in params:
            continue
        levels: list[str] = []
        by_argument = False
        for node in ast.walk(method):
            if not (isinstance(node, ast.Call) and node.args):
                continue
            first = node.args[0]
            if not (isinstance(first, ast.Name) and first.id == "event"):
                continue
            if isinstance(node.func, ast.Attribute) and node.func.attr in METHOD_LEVELS:
                levels.append(METHOD_LEVELS[node.func.attr])
            elif isinstance(node.func, ast.Call) and ast.unparse(node.func.func) == "getattr":
                by_argument = True
        default = None
        if by_argument:
            default = inspect.signature(getattr(RateLimitedLog, method.name)).parameters[
                "level"
            ].default
        if levels or by_argument:
            helpers[method.name] = Helper(
                params.index("event"), tuple(dict.fromkeys(levels)), default
            )
    return helpers


def _functions(tree: ast.Module) -> dict[ast.AST, ast.AST | None]:
    """Each node's innermost enclosing function (None at module level)."""
    owner: dict[ast.AST, ast.AST | None] = {}

    def visit(node: ast.AST, function: ast.AST | None) -> None:
        for child in ast.iter_child_nodes(node):
            inner = (
                child
                if isinstance(child, ast.FunctionDef | ast.AsyncFunctionDef | ast.Lambda)
                else function
            )
            owner[child] = function
            visit(child, inner)

    visit(tree, None)
    return owner


def _docstrings(tree: ast.Module) -> set[int]:
    ids = set()
    for node in ast.walk(tree):
        body = getattr(node, "body", None)
        if isinstance(body, list) and body and isinstance(body[0], ast.Expr):
            ids.add(id(body[0].value))
    return ids


def collect(package: Path = PACKAGE) -> Collected:
    """Every event the package can log (rules 1 to 6; rule 7 is in :func:`stray_names`)."""
    helpers = read_helpers()
    found = Collected()
    for path in sorted(package.rglob("*.py")):
        module = path.relative_to(package).as_posix()
        tree = ast.parse(path.read_text(encoding="utf-8"), str(path))
        scope = Scope(tree)
        owner = _functions(tree)
        for node in ast.walk(tree):
            if isinstance(node, ast.Assign | ast.AnnAssign):
                _check_binding(node, module, found)
            if not isinstance(node, ast.Call):
                continue
            function = owner.get(node)
            site = f"{module}:{node.lineno}"
            where = (module, getattr(function, "name", ""))
            _read_call(
                node, scope, function, site=site, where=where, helpers=helpers, found=found
            )
    return found


def _check_binding(node: ast.Assign | ast.AnnAssign, module: str, found: Collected) -> None:
    """Rule 6: a logger is made or re-bound only under a logger's name."""
    value = node.value
    if not isinstance(value, ast.Call):
        return
    callee = ast.unparse(value.func)
    makes = callee.endswith("get_logger") or (
        isinstance(value.func, ast.Attribute)
        and value.func.attr in ("bind", "new")
        and _is_logger(value.func.value)
    )
    if not makes:
        return
    targets = node.targets if isinstance(node, ast.Assign) else [node.target]
    for target in targets:
        if not _is_logger(target):
            found.problems.append(
                f"{module}:{node.lineno}: a logger bound to {ast.unparse(target)!r}: call it "
                f"{' or '.join(sorted(LOGGER_NAMES))} so this test sees its events"
            )


def _argument(call: ast.Call, index: int, name: str) -> ast.expr | None:
    """A call's argument by position or by keyword."""
    if len(call.args) > index:
        return call.args[index]
    return next((k.value for k in call.keywords if k.arg == name), None)


def _read_call(
    call: ast.Call,
    scope: Scope,
    function: ast.AST | None,
    *,
    site: str,
    where: tuple[str, str],
    helpers: dict[str, Helper],
    found: Collected,
) -> None:
    func = call.func
    # rule 3: ZoneEvent(name, level, fields)
    if isinstance(func, ast.Name) and func.id == EVENT_CLASS:
        event_arg, level_arg = _argument(call, 0, "event"), _argument(call, 1, "level")
        fields_arg = _argument(call, 2, "fields")
        names = None if event_arg is None else _constant_strings(event_arg, scope, function)
        levels = None if level_arg is None else _constant_strings(level_arg, scope, function)
        keys = set() if fields_arg is None else _dict_keys(fields_arg, scope, function)
        if names is None or levels is None or keys is None:
            found.problems.append(f"{site}: a {EVENT_CLASS} whose name, level or fields "
                                  "are not constants")
            return
        for name, level in _pairs(names, levels):
            found.add(name, level, keys, site)
        return
    # rule 2: the rate-limited helpers
    if isinstance(func, ast.Attribute) and func.attr in helpers and not _is_logger(func.value):
        helper = helpers[func.attr]
        if len(call.args) > helper.event_index:
            names = _constant_strings(call.args[helper.event_index], scope, function)
            if names and all(NAME_RE.fullmatch(n) for _, n in names):
                level_kw = next((k.value for k in call.keywords if k.arg == "level"), None)
                no_branch: Cond = frozenset()
                helper_levels: list[tuple[Cond, str]]
                if helper.levels:
                    helper_levels = [(no_branch, level) for level in helper.levels]
                elif level_kw is not None:
                    helper_levels = _constant_strings(level_kw, scope, function) or []
                else:
                    assert helper.default_level is not None
                    helper_levels = [(no_branch, helper.default_level)]
                fields = _keywords(call) - {"level"}
                for name, level in _pairs(names, helper_levels):
                    found.add(name, level, fields, site, func.attr)
                return
    # rule 1: logger methods (and rule 5: the forwarding sites)
    method_levels = _method_levels(func, scope, function)
    forwarding = (
        isinstance(func, ast.Call)
        and ast.unparse(func.func) == "getattr"
        and bool(func.args)
        and _is_logger(func.args[0])
    )
    if method_levels is None and not forwarding:
        return
    if method_levels is not None and all(level == "log" for _, level in method_levels):
        if len(call.args) < 2:
            found.problems.append(f"{site}: a .log() call without a level and a name")
            return
        name_arg: ast.expr | None = call.args[1]
        levels = _stdlib_levels(call.args[0], scope, function)
    else:
        name_arg = call.args[0] if call.args else None
        levels = method_levels
    names = None if name_arg is None else _constant_strings(name_arg, scope, function)
    if forwarding or names is None or levels is None:
        found.forwarders.add(where)
        if where not in FORWARDERS:
            found.problems.append(
                f"{site}: a log call whose event is not a constant this test can read "
                f"({ast.unparse(call)[:80]}); log the name as a literal, or add the site to "
                "FORWARDERS with the rule that collects its events"
            )
        return
    for name, level in _pairs(names, levels):
        if not NAME_RE.fullmatch(name):
            found.problems.append(f"{site}: event {name!r} is not named 'area.what'")
            continue
        found.add(name, level, _keywords(call), site)


def stray_names(collected: Collected, package: Path = PACKAGE) -> list[str]:
    """Rule 7: string constants shaped like an event of a known area that no rule collected."""
    areas = {name.split(".", 1)[0] for name in collected.events}
    strays = []
    for path in sorted(package.rglob("*.py")):
        tree = ast.parse(path.read_text(encoding="utf-8"))
        docstrings = _docstrings(tree)
        for node in ast.walk(tree):
            if not (isinstance(node, ast.Constant) and isinstance(node.value, str)):
                continue
            text = node.value
            if id(node) in docstrings or not NAME_RE.fullmatch(text):
                continue
            if text.split(".", 1)[0] in areas and text not in collected.events:
                strays.append(f"{path.relative_to(package)}:{node.lineno}: {text!r}")
    return strays


@dataclass
class DocEvent:
    section: str
    levels: set[str] | None = None
    fields: set[str] | None = None
    repeats: str | None = None


def read_doc(text: str) -> dict[str, DocEvent]:
    """The events of docs/journal.md: ``### `name` `` headings with their ``- level:``,
    ``- fields:`` (``- fields: none`` for an event without any) and ``- repeats:`` lines."""
    events: dict[str, DocEvent] = {}
    section = ""
    current: DocEvent | None = None
    for line in text.splitlines():
        if line.startswith("## "):
            section, current = line[3:].strip(), None
            continue
        if line.startswith("### "):
            heading = re.fullmatch(r"### `([^`]+)`\s*", line)
            assert heading, f"an event heading is '### `area.name`', not {line!r}"
            name = heading.group(1)
            assert name not in events, f"{name} documented twice"
            current = events[name] = DocEvent(section)
            continue
        if current is None:
            continue
        if line.startswith("- level:") and current.levels is None:
            current.levels = set(re.findall(rf"\b({'|'.join(LEVEL_WORDS)})\b", line))
        elif line.startswith("- fields:") and current.fields is None:
            current.fields = set(re.findall(r"`([^`]+)`", line))
        elif line.startswith("- repeats:") and current.repeats is None:
            current.repeats = line.split(":", 1)[1].split()[0]
    return events


def test_docs_journal_lists_every_event_the_daemon_can_log() -> None:
    collected = collect()
    assert not collected.problems, "\n".join(collected.problems)
    stale = sorted(set(FORWARDERS) - collected.forwarders)
    assert not stale, f"FORWARDERS names sites that no longer forward events: {stale}"
    strays = stray_names(collected)
    assert not strays, (
        "event-like names no collection rule reaches (log them with a literal name, or "
        "teach this test the new route):\n" + "\n".join(strays)
    )
    doc = read_doc(DOC.read_text(encoding="utf-8"))
    problems: list[str] = []
    for name in sorted(set(collected.events) - set(doc)):
        event = collected.events[name]
        problems.append(
            f"{name} ({'/'.join(sorted(event.levels))}, {event.sites[0]}) is logged but not "
            "in docs/journal.md: give it a ### `name` heading with its level and fields"
        )
    for name in sorted(set(doc) - set(collected.events)):
        problems.append(f"{name} is in docs/journal.md but nothing logs it any more")
    for name in sorted(set(doc) & set(collected.events)):
        event, entry = collected.events[name], doc[name]
        if entry.levels != event.levels:
            problems.append(
                f"{name}: documented level {sorted(entry.levels or [])}, logged at "
                f"{sorted(event.levels)} ({', '.join(event.sites)})"
            )
        repeats = {REPEATS[helper] for helper in event.helpers}
        if {entry.repeats} - {None} != repeats:
            shown = "no '- repeats:' line" if entry.repeats is None else repr(entry.repeats)
            problems.append(
                f"{name}: documented {shown}, expected "
                f"{' or '.join(map(repr, sorted(repeats))) or 'no repeats line'}"
            )
        if entry.fields is None:
            problems.append(f"{name}: no '- fields:' line")
        else:
            for extra in sorted(entry.fields - event.fields):
                problems.append(f"{name}: field {extra!r} is documented but never logged")
            for missing in sorted(event.fields - entry.fields):
                problems.append(f"{name}: field {missing!r} is logged but not documented")
    assert not problems, "docs/journal.md and the code disagree:\n" + "\n".join(problems)


def test_the_collector_reads_every_route_an_event_takes(tmp_path: Path) -> None:
    # The comparison above is only as good as the collection: one module per rule.
    (tmp_path / "a.py").write_text(
        "import logging\n"
        "log = get_logger('a')\n"
        "CONSTANT = 'a.from_constant'\n"
        "def f(x, e, events):\n"
        "    log.info('a.direct', zone=1, point=2)\n"
        "    log.exception('a.crashed')\n"
        "    log.info(CONSTANT)\n"
        "    (log.warning if x else log.info)('a.raised' if x else 'a.cleared', kind=1)\n"
        "    say = log.debug if x else log.info\n"
        "    say('a.refused', code=1)\n"
        "    log.log(logging.INFO if x else logging.ERROR, 'a.safe', confirmed=x)\n"
        "    events.problem(x, 'a.failed', 0.0, reason='r')\n"
        "    events.recovered(x, 'a.recovered', point=1)\n"
        "    events.event(x, 'a.answered', 0.0, topic='t')\n"
        "    fields = {'zone': 1, 'was': 2}\n"
        "    ZoneEvent('a.zone_back', 'info', fields)\n"
        "    ZoneEvent('a.lockout', 'warning' if x else 'info', {'until': 1})\n"
        "    getattr(log, e.level)(e.event, **e.fields)\n"
        "    math.log(2.0)\n"
        "    return {'a.kept_in_a_dict': 1}\n"
    )
    collected = collect(tmp_path)
    levels = {name: event.levels for name, event in collected.events.items()}
    assert levels == {
        "a.direct": {"info"}, "a.crashed": {"error"}, "a.from_constant": {"info"},
        "a.raised": {"warning"}, "a.cleared": {"info"}, "a.refused": {"debug", "info"},
        "a.safe": {"info", "error"}, "a.failed": {"warning"}, "a.recovered": {"info"},
        "a.answered": {"info"}, "a.zone_back": {"info"}, "a.lockout": {"warning", "info"},
    }, levels
    assert collected.events["a.direct"].fields == {"zone", "point"}
    assert collected.events["a.zone_back"].fields == {"zone", "was"}
    assert collected.events["a.answered"].fields == {"topic"}
    assert collected.events["a.failed"].helpers == {"problem"}
    assert collected.events["a.direct"].helpers == set()
    # the getattr forwarding site is not a listed one: it is reported, not skipped
    assert [p for p in collected.problems if "not a constant" in p], collected.problems
    # 'a.kept_in_a_dict' is event-shaped in a known area, yet logged by no rule
    assert stray_names(collected, tmp_path) == ["a.py:20: 'a.kept_in_a_dict'"]

    (tmp_path / "a.py").write_text("audit = get_logger('a')\naudit.info('a.hidden')\n")
    assert [p for p in collect(tmp_path).problems if "a logger bound to 'audit'" in p]


def test_the_doc_parser_reads_headings_levels_and_fields() -> None:
    doc = read_doc(
        "# Journal\n## Outputs\nSome words about `output.switched`.\n"
        "### `output.switched`\n- level: info\n- fields: `zone`, `point`, `on`\n\ntext\n"
        "### `source.lockout`\n- level: warning for max-starts, else info\n- fields: none\n"
        "### `modbus.read_failed`\n- level: warning\n- repeats: folded\n- fields: `link`\n"
    )
    assert set(doc) == {"output.switched", "source.lockout", "modbus.read_failed"}
    assert doc["modbus.read_failed"].repeats == "folded"
    assert doc["output.switched"].repeats is None
    assert doc["output.switched"].section == "Outputs"
    assert doc["output.switched"].levels == {"info"}
    assert doc["output.switched"].fields == {"zone", "point", "on"}
    assert doc["source.lockout"].levels == {"warning", "info"}
    assert doc["source.lockout"].fields == set()
