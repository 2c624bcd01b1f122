"""``roomloop demo [--hours H] [--speed X] [--broker HOST:PORT] [--plot OUT.png]
[--state-dir DIR]``.

An invented three-zone site (``roomloop/demo/site.yaml``) runs against
simulated plants that an in-process pymodbus server exposes over real Modbus
TCP on a free loopback port; the real service controls them on a simulated
clock (default: 8 simulated hours at 480x, about a minute). On a terminal the
zones are shown live, one line each, redrawn about once a second with plain
ANSI cursor movement; otherwise plain lines are printed (events as they happen,
the zones every 1/16 of the run). The service's own warnings go to the same
place. At the end: a summary table per zone, and with ``--plot`` a PNG. With
``--state-dir DIR`` the service's history and state stay in DIR (which must be new or
empty), beside the site file as run (``DIR/site.yaml``), and the demo ends by printing
the ``roomloop report`` and ``roomloop tune`` commands that read them.

Ctrl-C (SIGINT), SIGTERM or SIGHUP stops the demo cleanly: the service puts every
output in its safe state (the coils are read back from the plant server and
shown), the summary covers what ran, and the exit code is 0, like ``roomloop
run`` stopping on a signal (a Ctrl-C while Python is still starting, before
anything runs, is the command line's plain ``interrupted``, 130). At the end
the demo also checks end to end that each coil followed the service's
decisions and warns when it did not. Exit codes: 0 ran (to the end or until stopped);
1 the demo could not run, an output was not in its safe state at the stop, or the
plot could not be written after all; 2 a bad option (a --plot path whose folder is
missing or not writable, or not .png, or --plot without matplotlib; a --state-dir that
is not a directory, not empty or cannot be made: refused before the run).

Test hook (not for users, see DEVELOPERS.md): ``ROOMLOOP_CLOCK=virtual`` runs the
demo on a virtual clock, as fast as the CPU allows, instead of pacing it at
``--speed`` (the status rows keep their simulated spacing).
"""

from __future__ import annotations

import argparse
import asyncio
import logging
import os
import shlex
import shutil
import signal
import sys
import zoneinfo
from collections.abc import MutableMapping, Sequence
from pathlib import Path
from typing import Any, TextIO

import structlog

from roomloop.cli.outputs import MATPLOTLIB_MISSING, matplotlib_available, output_path_problem
from roomloop.cli.refusal import Refused
from roomloop.clock import AutojumpLoop, Clock
from roomloop.demo.runner import (
    DEFAULT_SPEED,
    KEPT_SITE,
    MAX_SPEED,
    STATUS_HEADER,
    DemoError,
    DemoOptions,
    DemoResult,
    demo_site_timezone,
    run_demo,
)
from roomloop.demo.summary import clock_text, format_summary
from roomloop.demo.timeline import MAX_HOURS, MIN_HOURS
from roomloop.history.store import history_path
from roomloop.log import ConsoleRenderer, configure_logging

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
CLOCK_ENV = "ROOMLOOP_CLOCK"
PLAIN_STATUS_BLOCKS = 16
"""Plain output shows the zones this many times over a run (at least every 5 simulated min)."""

TUNE_MIN_HOURS = 24.0
"""``roomloop tune``'s least history (``plant.identify.MIN_HOURS``; not imported here: numpy)."""

CSI = "\x1b["


def _fail(message: str, code: int) -> int:
    print(f"roomloop demo: {message}", file=sys.stderr)
    return code


def parse_broker(text: str) -> tuple[str, int]:
    """``HOST:PORT`` (``[::1]:1883`` for an IPv6 address); ``ValueError`` with the reason."""
    host, sep, port_text = text.rpartition(":")
    if not sep or not host or not port_text:
        raise ValueError(f"--broker {text!r}: give HOST:PORT, e.g. 127.0.0.1:1883")
    host = host.removeprefix("[").removesuffix("]")
    try:
        port = int(port_text)
    except ValueError:
        raise ValueError(f"--broker {text!r}: the port {port_text!r} is not a number") from None
    if not 1 <= port <= 65535:
        raise ValueError(f"--broker {text!r}: the port must be 1 to 65535")
    return host, port


class LogLines:
    """A text stream for the service's log while the live view owns the terminal."""

    def __init__(self) -> None:
        self.lines: list[str] = []
        self._partial = ""

    def write(self, text: str) -> int:
        self._partial += text
        *done, self._partial = self._partial.split("\n")
        self.lines.extend(line for line in done if line)
        return len(text)

    def flush(self) -> None:
        return None

    def isatty(self) -> bool:
        return False

    def take(self) -> list[str]:
        lines, self.lines = self.lines, []
        return lines


class TerminalView:
    """The zones as a block of lines kept at the bottom, events and warnings scrolling above."""

    def __init__(self, out: TextIO, log_lines: LogLines) -> None:
        self.out = out
        self.log_lines = log_lines
        self._block: list[str] = []
        self._drawn = 0
        self.out.write(f"{CSI}?25l")  # hide the cursor while redrawing

    def _width(self) -> int:
        return max(40, shutil.get_terminal_size((100, 24)).columns - 1)

    def _erase(self) -> None:
        if self._drawn:
            self.out.write(f"{CSI}{self._drawn}F{CSI}J")
            self._drawn = 0

    def _draw(self) -> None:
        width = self._width()
        for line in self.log_lines.take():
            self.out.write(line[:width] + "\n")
        for line in self._block:
            self.out.write(line[:width] + "\n")
        self._drawn = len(self._block)
        self.out.flush()

    def event(self, at: float, text: str) -> None:
        self._erase()
        self.out.write(text + "\n")
        self._draw()

    def status(self, at: float, header: str, rows: Sequence[str]) -> None:
        self._erase()
        self._block = [*header.split("\n"), *rows]
        self._draw()

    def close(self) -> None:
        self._erase()
        self._draw()
        self.out.write(f"{CSI}?25h")
        self.out.flush()


class PlainView:
    """Plain lines for a pipe or a file: events as they come, the zones every ``interval_s``."""

    def __init__(self, out: TextIO, interval_s: float) -> None:
        self.out = out
        self.interval_s = interval_s
        self._due: float | None = None

    def event(self, at: float, text: str) -> None:
        self.out.write(text + "\n")
        self.out.flush()

    def status(self, at: float, header: str, rows: Sequence[str]) -> None:
        if self._due is None:
            self.out.write(f"{'':8}{STATUS_HEADER}\n")
            self._due = at
        if at < self._due:
            return
        stamp = header.split("simulated ", 1)[-1][:5]
        for row in rows:
            self.out.write(f"[{stamp}] {row}\n")
        self.out.flush()
        while self._due <= at:
            self._due += self.interval_s

    def close(self) -> None:
        self.out.flush()


class SimulatedStamp:
    """A structlog processor: the service's events carry the demo's simulated clock time."""

    def __init__(self, tz_name: str) -> None:
        self.clock: Clock | None = None
        self.tz = zoneinfo.ZoneInfo(tz_name)

    def set_clock(self, clock: Clock) -> None:
        self.clock = clock

    def __call__(
        self, _logger: Any, _name: str, event_dict: MutableMapping[str, Any]
    ) -> MutableMapping[str, Any]:
        if self.clock is not None:
            event_dict["timestamp"] = f"[{clock_text(self.clock.now(), self.tz)}]"
        return event_dict


SHOWN_INFO = frozenset({"modbus.read_recovered", "modbus.point_recovered"})
"""The info events the demo shows beside the warnings: the end of a folded failure, with how
long it lasted and how many reads failed (the warnings in between are only reminders)."""


def _warnings_and_recoveries(
    _logger: Any, _name: str, event_dict: MutableMapping[str, Any]
) -> MutableMapping[str, Any]:
    if event_dict.get("level") in ("debug", "info") and event_dict.get("event") not in SHOWN_INFO:
        raise structlog.DropEvent
    return event_dict


def configure_demo_logging(stream: Any, stamp: SimulatedStamp) -> None:
    """The service's warnings and errors as readable lines stamped with simulated time.

    (``roomloop.log.configure_logging`` stamps wall-clock time, which would contradict
    the demo's simulated clock on every line.)
    """
    configure_logging("warning", "console", stream=stream)
    structlog.configure(
        processors=[
            structlog.contextvars.merge_contextvars,
            structlog.processors.add_log_level,
            _warnings_and_recoveries,
            stamp,
            structlog.processors.format_exc_info,
            ConsoleRenderer(colors=False),
        ],
        wrapper_class=structlog.make_filtering_bound_logger(logging.INFO),
        logger_factory=structlog.WriteLoggerFactory(file=stream),
        cache_logger_on_first_use=False,
    )


async def _run(options: DemoOptions, view: TerminalView | PlainView) -> DemoResult:
    stop = asyncio.Event()
    loop = asyncio.get_running_loop()

    def on_signal(name: str) -> None:
        if not stop.is_set():
            view.event(0.0, f"{name}: stopping the demo (outputs to their safe state)")
        stop.set()

    # SIGHUP (the terminal closed) stops it the same careful way as Ctrl-C and SIGTERM.
    signals = {signal.SIGINT: "Ctrl-C", signal.SIGTERM: "SIGTERM", signal.SIGHUP: "SIGHUP"}
    for signum, name in signals.items():
        loop.add_signal_handler(signum, on_signal, name)
    try:
        return await run_demo(options, view, stop)
    finally:
        for signum in signals:
            loop.remove_signal_handler(signum)


def _report(result: DemoResult, out: TextIO) -> bool:
    """Print how the run ended, the outputs at the stop and the summary; True if outputs safe."""
    site = result.site
    tz = zoneinfo.ZoneInfo(site.site.timezone)
    hours = result.simulated_s / 3600
    if result.completed:
        out.write(
            f"\ndemo finished: {hours:.1f} simulated h in {result.real_s:.0f} s "
            f"({result.simulated_s / max(result.real_s, 1e-9):.0f}x)\n"
        )
    else:
        out.write(
            f"\ndemo stopped early: {hours:.1f} of {result.timeline.hours:g} simulated h "
            f"in {result.real_s:.0f} s\n"
        )
    relays = ", ".join(
        f"{zone} {'on' if on else 'off'}" for zone, on in result.relays_at_stop.items()
    )
    for name, (enable, pump) in result.sources_at_stop.items():
        relays += f", {name} {'on' if enable else 'off'}, its pump {'on' if pump else 'off'}"
    safe = result.outputs_safe
    verdict = "every output in its safe state" if safe else "NOT every output in its safe state"
    out.write(f"outputs at stop (coils read from the plant server): {relays}: {verdict}\n\n")
    for zone in result.relays_at_stop:
        off_s = result.relay_disagreement_s(zone)
        if off_s > 0:
            out.write(
                f"WARNING: {zone}'s relay differed from the service's decision for "
                f"{off_s / 60:.0f} simulated min (an output write lost or undone)\n"
            )
    comfort = result.site.zones[0].setpoints.comfort
    stopped_at = None if result.completed else result.timeline.start + result.simulated_s
    out.write(format_summary(result.summaries, result.timeline, tz, comfort, stopped_at) + "\n")
    for source in result.sources.values():
        out.write(source.summary(hours) + "\n")
    out.flush()
    return safe


def state_dir_problem(path: str) -> str | None:
    """Why ``--state-dir`` cannot take the demo's history (None: it can; made if missing)."""
    target = Path(path)
    if target.exists() and not target.is_dir():
        return f"--state-dir {path}: not a directory"
    if target.is_dir():
        if any(target.iterdir()):
            return (
                f"--state-dir {path}: not empty (the demo starts a fresh site; give a new "
                "or empty directory)"
            )
    else:
        try:
            target.mkdir(parents=True)
        except OSError as exc:
            return f"--state-dir {path}: cannot make it: {exc.strerror or exc}"
    if not os.access(target, os.W_OK | os.X_OK):
        return f"--state-dir {path}: not writable"
    return None


def kept_history_text(result: DemoResult, state_dir: str) -> str:
    """Where the kept history is and the exact commands that read it."""
    site_file = shlex.quote(str(Path(state_dir) / KEPT_SITE))
    hours = result.simulated_s / 3600.0
    lines = [
        f"history and state kept in {state_dir} "
        f"({history_path(state_dir, result.site.name).name}, {hours:.1f} simulated h); "
        "read them with:",
        f"  roomloop report -c {site_file}",
    ]
    lines += [f"  roomloop tune -c {site_file} --zone {z.name}" for z in result.site.zones]
    if hours < TUNE_MIN_HOURS:
        lines.append(
            f"  ('tune' needs at least {TUNE_MIN_HOURS:g} h of history: it will say so; "
            "run the demo with --hours 30 for one it can identify)"
        )
    return "\n".join(lines) + "\n"


def main(args: argparse.Namespace) -> int:
    try:
        return _demo(args)
    except Refused as refused:
        return _fail(refused.message, refused.code)


def _demo(args: argparse.Namespace) -> int:
    """Check the options, run the demo, report how it ended, then draw the plot."""
    options, stamp = _options(args)
    out = sys.stdout
    view = _view(out, stamp, options.hours)
    try:
        with asyncio.Runner(loop_factory=AutojumpLoop if options.virtual else None) as runner:
            result = runner.run(_run(options, view))
    except DemoError as exc:
        view.close()
        raise Refused(str(exc), EXIT_RUNTIME) from None
    view.close()
    configure_logging("warning", "console", stream=sys.stderr)
    safe = _report(result, out)
    if options.state_dir is not None:
        out.write("\n" + kept_history_text(result, options.state_dir))
        out.flush()
    code = EXIT_OK if safe else EXIT_RUNTIME
    if args.plot:
        _write_plot(result, args.plot)
        out.write(f"plot written to {args.plot}\n")
    return code


def _options(args: argparse.Namespace) -> tuple[DemoOptions, SimulatedStamp]:
    """The run's options, every one checked before anything runs, and the log lines' stamp
    (it learns the demo's clock when the run makes it)."""
    hours = float(args.hours)
    if not MIN_HOURS <= hours <= MAX_HOURS:
        raise Refused(f"--hours must be {MIN_HOURS:g} to {MAX_HOURS:g}", EXIT_USAGE)
    speed = float(args.speed) if args.speed is not None else DEFAULT_SPEED
    if not 0 < speed <= MAX_SPEED:
        raise Refused(f"--speed must be above 0 and at most {MAX_SPEED:g}", EXIT_USAGE)
    broker = _broker(args.broker)
    if args.plot:
        _check_plot(args.plot)
    state_dir = _state_dir(getattr(args, "state_dir", None))
    clock_kind = os.environ.get(CLOCK_ENV, "paced")
    if clock_kind not in ("paced", "virtual"):
        raise Refused(f"{CLOCK_ENV}={clock_kind!r} is not 'paced' or 'virtual'", EXIT_USAGE)
    stamp = SimulatedStamp(demo_site_timezone())
    options = DemoOptions(
        hours=hours,
        speed=speed,
        broker=broker,
        on_clock=stamp.set_clock,
        virtual=clock_kind == "virtual",
        state_dir=state_dir,
    )
    return options, stamp


def _broker(text: str | None) -> tuple[str, int] | None:
    """``--broker`` as (host, port), or None without it."""
    if not text:
        return None
    try:
        return parse_broker(text)
    except ValueError as exc:
        raise Refused(str(exc), EXIT_USAGE) from None


def _check_plot(path: str) -> None:
    """The plot is drawn after the whole run: its path and matplotlib are checked before."""
    problem = output_path_problem("--plot", path, ".png")
    if problem:
        raise Refused(problem, EXIT_USAGE)
    if not matplotlib_available():
        raise Refused(MATPLOTLIB_MISSING, EXIT_USAGE)


def _state_dir(path: str | None) -> str | None:
    """``--state-dir`` made absolute once it can take the history (made if missing), or None
    without it."""
    if path is None:
        return None
    problem = state_dir_problem(path)
    if problem:
        raise Refused(problem, EXIT_USAGE)
    return os.path.abspath(path)


def _view(out: TextIO, stamp: SimulatedStamp, hours: float) -> TerminalView | PlainView:
    """The live view on a terminal (the service's log lines scroll above it), plain lines
    otherwise; the service's log goes to the same place."""
    if out.isatty():
        log_lines = LogLines()
        configure_demo_logging(log_lines, stamp)
        return TerminalView(out, log_lines)
    configure_demo_logging(out, stamp)
    return PlainView(out, max(300.0, hours * 3600 / PLAIN_STATUS_BLOCKS))


def _write_plot(result: DemoResult, path: str) -> None:
    """The plot of every zone (matplotlib imported only now); a failure is a runtime error."""
    from roomloop.demo.plot import PlotUnavailable, write_demo_plot

    try:
        write_demo_plot(result, path)
    except PlotUnavailable:
        raise Refused(MATPLOTLIB_MISSING, EXIT_RUNTIME) from None
    except OSError as exc:
        raise Refused(f"cannot write {path}: {exc.strerror or exc}", EXIT_RUNTIME) from None
    except ValueError as exc:  # matplotlib refusing the file, should the check miss a case
        raise Refused(f"cannot write {path}: {exc}", EXIT_RUNTIME) from None
