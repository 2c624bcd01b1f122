"""``roomloop report -c SITE [--zone Z] [--since 24h|7d|DATE] [--plot OUT.png]``: how zones did.

Per zone and day: control accuracy (EN 15500), cycles per hour, on-time, shortest
runs, energy (with ``heater_w``), minutes in fail-safe and of each point's faults,
from the site's history file or from ``--history FILE.csv`` (one zone, ``--zone``).
Exit codes: 0 ok; 1 no history to read; 2 a bad site file or CSV, an unknown zone,
a bad time, an unwritable plot path, or ``--plot`` without matplotlib.
"""

from __future__ import annotations

import argparse
import sys
from zoneinfo import ZoneInfo

from roomloop.cli.outputs import matplotlib_available, output_path_problem
from roomloop.config.loader import load_site
from roomloop.history.report import day_figures, format_report, tick_of
from roomloop.history.source import HistoryUnavailable, load_history, parse_bound
from roomloop.history.store import ZoneHistory

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
MATPLOTLIB_NEEDED = (
    "--plot needs matplotlib, which is not installed: pip install matplotlib "
    "(or pip install '.[plot]' in the roomloop checkout), or leave out --plot"
)


def _fail(message: str, code: int) -> int:
    print(f"roomloop report: {message}", file=sys.stderr)
    return code


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)  # ConfigError: the CLI front prints it, exit 2
    names = [z.name for z in site.zones]
    if args.zone is not None and args.zone not in names:
        return _fail(f"no zone {args.zone!r} in {args.config} (zones: {', '.join(names)})", 2)
    if args.history is not None and args.zone is None:
        return _fail("--history FILE.csv holds one zone: name it with --zone", EXIT_USAGE)
    if args.plot:
        problem = output_path_problem("--plot", args.plot, ".png")
        if problem:
            return _fail(problem, EXIT_USAGE)
        if not matplotlib_available():
            return _fail(MATPLOTLIB_NEEDED, EXIT_USAGE)
    tz = ZoneInfo(site.site.timezone)
    try:
        since = parse_bound(args.since, tz, "--since")
        until = parse_bound(args.until, tz, "--until")
    except ValueError as exc:
        return _fail(str(exc), EXIT_USAGE)
    zones = [args.zone] if args.zone is not None else names
    histories: list[tuple[str, ZoneHistory]] = []
    texts: list[str] = []
    missing: list[str] = []
    for name in zones:
        zone = site.zone(name)
        try:
            history = load_history(
                site,
                name,
                state_dir=args.state_dir,
                csv_path=args.history,
                since=since,
                until=until,
            )
        except HistoryUnavailable as exc:
            if args.zone is not None:
                return _fail(str(exc), EXIT_RUNTIME)
            missing.append(f"{name}: {exc}")
            continue
        days = day_figures(history, tz, heater_w=zone.heater_w)
        texts.append(
            format_report(name, zone.heating, days, units=site.site.units, tick_s=tick_of(history))
        )
        histories.append((f"zone {name} ({zone.heating})", history))
    if not histories:
        return _fail("no history of any zone: " + "; ".join(missing), EXIT_RUNTIME)
    print("\n\n".join(texts))
    for line in missing:
        print(f"(no history) {line}", file=sys.stderr)
    if args.plot:
        from roomloop.history.plot import PlotUnavailable, write_history_plot

        try:
            write_history_plot(histories, args.plot, tz=tz, units=site.site.units)
        except PlotUnavailable:
            return _fail(MATPLOTLIB_NEEDED, EXIT_USAGE)
        except (OSError, ValueError) as exc:
            return _fail(f"cannot write {args.plot}: {exc}", EXIT_RUNTIME)
    return EXIT_OK
