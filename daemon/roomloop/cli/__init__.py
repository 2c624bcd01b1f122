"""The ``roomloop`` command line: check, simulate, probe, run, demo, history, report, tune.

Exit codes (DESIGN.md): 0 ok, 1 runtime failure, 2 usage or config error.
Each sub-command lives in its own module and is imported only when used, so
``roomloop check`` does not pay for pymodbus or aiomqtt.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import textwrap
from collections.abc import Callable, Sequence

from roomloop import __version__
from roomloop.errors import ConfigError, RoomloopError

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
HELP_WIDTH = 79
"""The raw (hand-wrapped) help texts stay within this many columns."""
HEATING_TYPES = ("forced-air", "hydronic", "underfloor", "electric", "steam")
"""``config.models.HeatingType`` (written out: the parser stays light to import; a test
keeps the two equal)."""
COOLING_TYPES = ("direct-expansion", "chilled-water")
"""``config.models.CoolingType``, written out likewise (a test keeps the two equal)."""
DEMO_HEATING = ("underfloor", "hydronic", "electric")
"""The demo site's zones' heating types, in its order (``demo/site.yaml``, written out
likewise; a test keeps the two equal)."""
DEMO_HOURS = (1.0, 48.0)
DEMO_MAX_SPEED = 3600.0
"""The demo's ranges for its help (``demo.timeline`` and ``demo.runner`` check them; a test
keeps them equal)."""

SAFETY = """\
safety: roomloop switches heating plant. Mains wiring is for qualified people
only. The plant's own limit and safety controls (boiler high-limit, overheat
cut-outs, frost thermostats) stay in place and wired as the maker says;
roomloop is not a safety device. Local codes and licensed practice prevail."""


class _Parser(argparse.ArgumentParser):
    """argparse that exits 2 with one line on a usage mistake (its default is 2 as well)."""

    def error(self, message: str) -> None:  # type: ignore[override]
        self.print_usage(sys.stderr)
        print(f"{self.prog}: error: {message}", file=sys.stderr)
        raise SystemExit(EXIT_USAGE)


def build_parser() -> argparse.ArgumentParser:
    parser = _Parser(
        prog="roomloop",
        # Wrapped by hand: RawDescriptionHelpFormatter (kept for the safety text) does not wrap.
        description=(
            "An anticipating on/off controller for heating zones: reads temperatures and\n"
            "switches relays over Modbus or MQTT, publishes to an MQTT broker, and predicts\n"
            "and tunes zones with a plant simulator."
        ),
        epilog=SAFETY,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    parser.add_argument("--version", action="version", version=f"roomloop {__version__}")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND", parser_class=_Parser)
    sub.required = True

    def add(name: str, help_text: str) -> argparse.ArgumentParser:
        return sub.add_parser(
            name,
            help=help_text,
            description=textwrap.fill(help_text, HELP_WIDTH),
            epilog=SAFETY,
            formatter_class=argparse.RawDescriptionHelpFormatter,
        )

    check = add("check", "validate a site file and print the resolved zones, points and links")
    check.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help="the site file")

    sim = add(
        "simulate", "run one zone's controller against a plant model on the standard protocol"
    )
    who = sim.add_mutually_exclusive_group(required=True)
    who.add_argument(
        "-c", "--config", metavar="SITE.yaml", help="take the zone from this site file"
    )
    who.add_argument(
        "--heating",
        metavar="TYPE",
        choices=HEATING_TYPES,
        help=(
            "simulate a zone with this heating type's defaults (no site needed): "
            + ", ".join(HEATING_TYPES)
        ),
    )
    who.add_argument(
        "--cooling",
        metavar="TYPE",
        choices=COOLING_TYPES,
        help=(
            "simulate a cooling-only zone with this cooling type's defaults (no site needed; "
            "implies --mode cool): " + ", ".join(COOLING_TYPES)
        ),
    )
    sim.add_argument("--zone", metavar="NAME", help="the zone to simulate (with -c)")
    sim.add_argument(
        "--mode",
        choices=["heat", "cool"],
        help=(
            "run the heating protocol on the heating call (heat, the default) or its cooling "
            "variant on the cooling call (cool; default with --cooling)"
        ),
    )
    sim.add_argument(
        "--plant",
        metavar="PLANT",
        help=(
            "a built-in plant (forced-air, hydronic, underfloor, electric, steam; the stress "
            "cases thick-slab, oversized-air; cooling: direct-expansion, chilled-water) or a "
            "plant YAML file (docs/plant-file.md); default: the built-in plant of the zone's "
            "heating type (cooling type with --mode cool)"
        ),
    )
    sim.add_argument(
        "--controller",
        default="anticipator",
        choices=["anticipator", "plain", "electromechanical", "time-proportional"],
        help="the controller to run (default: anticipator, roomloop's own)",
    )
    sim.add_argument("--seed", type=int, default=1, help="seed of the sensor noise (default 1)")
    sim.add_argument("--json", metavar="OUT.json", help="write the figures as JSON")
    sim.add_argument("--plot", metavar="OUT.png", help="write a plot (needs the 'plot' extra)")

    estate = add(
        "simulate-source",
        "run the zones sharing one heat source on the standard protocol, each also alone",
    )
    which = estate.add_mutually_exclusive_group(required=True)
    which.add_argument("-c", "--config", metavar="SITE.yaml", help="take the source from this site")
    which.add_argument(
        "--example", choices=["two-zone", "three-zone"], help="a built-in estate (no site needed)"
    )
    estate.add_argument("--source", metavar="NAME", help="the heat source to simulate (with -c)")
    estate.add_argument(
        "--actuator-s",
        type=float,
        metavar="S",
        help="how long the valves really take to open, 0-1800 s (default: the source's "
        "valve_opening_s with -c; 150 s radiator and 240 s manifold actuators with --example)",
    )
    estate.add_argument("--seed", type=int, default=1, help="seed of the sensor noise (default 1)")
    estate.add_argument("--json", metavar="OUT.json", help="write the figures as JSON")

    probe = add(
        "probe",
        "commissioning: read one point (or switch an output) and show raw and decoded values",
    )
    probe.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help="the site file")
    probe.add_argument("point", metavar="POINT", help="the point's name")
    probe.add_argument("--set", choices=["on", "off"], help="switch an output, then read it back")
    probe.add_argument("--yes", action="store_true", help="do not ask before switching an output")

    bms_map = add(
        "bms-map", "print the BMS face's register map, the document for the BMS contractor"
    )
    bms_map.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help="the site file")
    bms_map.add_argument("--csv", metavar="OUT.csv", help="also write the map as CSV")

    run = add("run", "the service: control every zone of a site and publish to the broker")
    run.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help="the site file")
    run.add_argument(
        "--state-dir",
        metavar="DIR",
        help=(
            "where runtime state is kept "
            "(default: the site's state_dir, or $STATE_DIRECTORY under systemd)"
        ),
    )

    demo = add(
        "demo", "run an invented three-zone site against simulated plants over real Modbus TCP"
    )
    demo.description = "\n\n".join(
        (
            demo.description or "",
            textwrap.fill(
                f"Its zones' heating types: {', '.join(DEMO_HEATING)}. Every heating type a "
                "site file can give a zone (heating: TYPE): "
                + ", ".join(HEATING_TYPES)
                + "; 'roomloop simulate --heating TYPE' runs one alone.",
                HELP_WIDTH,
            ),
        )
    )
    demo.add_argument(
        "--hours",
        type=float,
        default=8.0,
        help=f"simulated hours, {DEMO_HOURS[0]:g} to {DEMO_HOURS[1]:g} (default 8)",
    )
    demo.add_argument(
        "--speed",
        type=float,
        default=None,
        help=(
            f"simulated seconds per real second, above 0 and at most {DEMO_MAX_SPEED:g} "
            "(default: the run in about a minute)"
        ),
    )
    demo.add_argument(
        "--broker", metavar="HOST:PORT", help="also publish to this MQTT broker, as 'run' does"
    )
    demo.add_argument(
        "--plot", metavar="OUT.png", help="write a plot of every zone (needs the 'plot' extra)"
    )
    demo.add_argument(
        "--state-dir",
        metavar="DIR",
        help=(
            "keep the demo's history and state in DIR (new or empty; made if missing) with "
            "the site file as run, DIR/site.yaml, and print the 'roomloop report' and "
            "'roomloop tune' commands that read them (default: a temporary directory, "
            "removed at the end; 'tune' needs at least 24 simulated hours: --hours 30)"
        ),
    )
    _add_history_commands(add)
    return parser


SINCE_HELP = (
    "24h, 7d (counted back from the newest tick of the history, not from now), "
    "a date or date-time"
)
"""``--since`` of history, report and tune (:func:`roomloop.history.source.parse_bound`)."""


def _add_history_commands(add: Callable[[str, str], argparse.ArgumentParser]) -> None:
    """history, report, tune: the zone history the service keeps, and what is learnt from it."""

    def site_zone(cmd: argparse.ArgumentParser, zone_required: bool) -> None:
        cmd.add_argument("-c", "--config", required=True, metavar="SITE.yaml", help="the site file")
        cmd.add_argument("--zone", required=zone_required, metavar="NAME", help="the zone")
        cmd.add_argument(
            "--state-dir", metavar="DIR", help="where the history is (default: as for 'run')"
        )

    hist = add("history", "export a zone's history (what the service recorded) as CSV")
    site_zone(hist, True)
    hist.add_argument("--since", metavar="WHEN", help=SINCE_HELP + ", or POSIX s")
    hist.add_argument("--until", metavar="WHEN", help="same forms as --since")
    hist.add_argument(
        "--csv", required=True, metavar="OUT.csv", help="the file to write ('-': stdout)"
    )

    report = add("report", "per zone and day: control accuracy, cycles, on-time, energy, faults")
    site_zone(report, False)
    report.add_argument("--since", metavar="WHEN", help=SINCE_HELP)
    report.add_argument("--until", metavar="WHEN", help="same forms as --since")
    report.add_argument("--history", metavar="FILE.csv", help="read this CSV (needs --zone)")
    report.add_argument("--plot", metavar="OUT.png", help="write a plot (needs matplotlib)")

    tune = add("tune", "identify a zone's plant from its history and recommend its tuning")
    site_zone(tune, True)
    tune.add_argument("--since", metavar="WHEN", help=SINCE_HELP)
    tune.add_argument("--history", metavar="FILE.csv", help="read this CSV instead")
    tune.add_argument("--write-plant", metavar="OUT.yaml", help="write the identified plant file")
    tune.add_argument(
        "--no-recommend", action="store_true", help="identify only (skip the tuning search)"
    )


_COMMANDS = {
    "check": "roomloop.cli.check",
    "simulate": "roomloop.cli.simulate",
    "simulate-source": "roomloop.cli.simulate_source",
    "probe": "roomloop.cli.probe",
    "run": "roomloop.cli.run",
    "demo": "roomloop.cli.demo",
    "bms-map": "roomloop.cli.bms_map",
    "history": "roomloop.cli.history",
    "report": "roomloop.cli.report",
    "tune": "roomloop.cli.tune",
}


def main(argv: Sequence[str] | None = None) -> int:
    """Parse, dispatch, and turn every error a user can cause into a clear line and an exit code."""
    args = build_parser().parse_args(argv)
    try:
        module = importlib.import_module(_COMMANDS[args.command])
        code: int = module.main(args)
        return code
    except ConfigError as exc:
        for problem in exc.problems:
            print(str(problem), file=sys.stderr)
        return EXIT_USAGE
    except RoomloopError as exc:
        print(f"roomloop {args.command}: {exc}", file=sys.stderr)
        return EXIT_RUNTIME
    except KeyboardInterrupt:
        print(f"roomloop {args.command}: interrupted", file=sys.stderr)
        return 130
