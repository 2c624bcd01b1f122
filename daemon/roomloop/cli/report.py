"""``roomloop report -c SITE [--zone Z] [--since 24h|7d|DATE] [--plot OUT.png]``: how zones did.

Per zone and day: control accuracy (EN 15500), cycles per hour, on-time, shortest
runs, energy (with ``heater_w``), minutes in fail-safe and of each point's faults,
from the site's history file or from ``--history FILE.csv`` (one zone, ``--zone``).
Exit codes: 0 ok; 1 no history to read (none, or a damaged history file); 2 a bad
site file or CSV, an unknown zone, a bad time, an unwritable plot path, or ``--plot``
without matplotlib.
"""

from __future__ import annotations

import argparse
import sys
from zoneinfo import ZoneInfo

from roomloop.cli.history import time_window
from roomloop.cli.outputs import matplotlib_available, output_path_problem
from roomloop.cli.refusal import Refused
from roomloop.config.loader import load_site
from roomloop.config.models import Site
from roomloop.history.report import day_figures, format_report, tick_of
from roomloop.history.source import Bound, HistoryUnavailable, HistoryUnreadable, load_history
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
    try:
        return _report(args, site)
    except Refused as refused:
        return _fail(refused.message, refused.code)


def _report(args: argparse.Namespace, site: Site) -> int:
    """Check the options, read each zone's history, print the figures, draw the plot."""
    names = [z.name for z in site.zones]
    _check_options(args, names)
    tz = ZoneInfo(site.site.timezone)
    since, until = time_window(args, tz)
    zones = [args.zone] if args.zone is not None else names
    histories, texts, missing = _read_zones(
        args, site, zones, tz=tz, since=since, until=until
    )
    if not histories:
        raise Refused("no history of any zone: " + "; ".join(missing), EXIT_RUNTIME)
    print("\n\n".join(texts))
    for line in missing:
        print(f"(no history) {line}", file=sys.stderr)
    if args.plot:
        _write_plot(histories, args.plot, tz, site.site.units)
    return EXIT_OK


def _check_options(args: argparse.Namespace, names: list[str]) -> None:
    """Refuse, before any history is read, what the options get wrong (all usage errors)."""
    if args.zone is not None and args.zone not in names:
        raise Refused(
            f"no zone {args.zone!r} in {args.config} (zones: {', '.join(names)})", EXIT_USAGE
        )
    if args.history is not None and args.zone is None:
        raise Refused("--history FILE.csv holds one zone: name it with --zone", EXIT_USAGE)
    if args.plot:
        problem = output_path_problem("--plot", args.plot, ".png")
        if problem:
            raise Refused(problem, EXIT_USAGE)
        if not matplotlib_available():
            raise Refused(MATPLOTLIB_NEEDED, EXIT_USAGE)


def _read_zones(
    args: argparse.Namespace,
    site: Site,
    zones: list[str],
    *,
    tz: ZoneInfo,
    since: Bound,
    until: Bound,
) -> tuple[list[tuple[str, ZoneHistory]], list[str], list[str]]:
    """Each zone's history and report text, and a line for each zone without history.

    A zone named with ``--zone`` and without history stops the report; among all the
    site's zones, one without history is only named (the others are still reported). A
    history file that cannot be read stops it too: no zone of it could be read.
    """
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
        except HistoryUnreadable as exc:
            raise Refused(str(exc), EXIT_RUNTIME) from None
        except HistoryUnavailable as exc:
            if args.zone is not None:
                raise Refused(str(exc), EXIT_RUNTIME) from None
            missing.append(f"{name}: {exc}")
            continue
        days = day_figures(history, tz, heater_w=zone.heater_w)
        texts.append(
            format_report(name, zone.heating, days, units=site.site.units, tick_s=tick_of(history))
        )
        histories.append((f"zone {name} ({zone.heating})", history))
    return histories, texts, missing


def _write_plot(
    histories: list[tuple[str, ZoneHistory]], path: str, tz: ZoneInfo, units: str
) -> None:
    """The plot, drawn after the text is out (matplotlib imported only now)."""
    from roomloop.history.plot import PlotUnavailable, write_history_plot

    try:
        write_history_plot(histories, path, tz=tz, units=units)
    except PlotUnavailable:
        raise Refused(MATPLOTLIB_NEEDED, EXIT_USAGE) from None
    except (OSError, ValueError) as exc:
        raise Refused(f"cannot write {path}: {exc}", EXIT_RUNTIME) from None
