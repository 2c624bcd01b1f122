"""``roomloop tune -c SITE --zone Z [--history FILE.csv] [--write-plant OUT.yaml]``.

Identifies the zone's plant from its history (:mod:`roomloop.plant.identify`, scipy
from the optional ``tune`` extra), reports the fitted parameters with their
uncertainty, the RMS residual and a verdict on the data, optionally writes the plant
file ``simulate --plant`` reads, and runs the standard protocol on the identified
plant over candidate tunings, printing today's tuning and the best side by side with
the site-file lines to paste.
Exit codes: 0 ok; 1 no history (none, or a damaged history file), or the data cannot
support an identification, or the fit is poor (the reason is printed; no plant file, no
recommendation); 2 a bad site file or CSV, an unknown zone, numpy/scipy missing.
"""

from __future__ import annotations

import argparse
import dataclasses
import importlib.util
import sys
from collections.abc import Callable
from typing import TYPE_CHECKING, Any

from roomloop.cli.outputs import output_path_problem
from roomloop.cli.refusal import Refused
from roomloop.config.loader import load_site
from roomloop.config.models import Site, Zone
from roomloop.history.source import HistoryUnavailable, load_history, parse_bound
from roomloop.history.store import ZoneHistory

if TYPE_CHECKING:
    from zoneinfo import ZoneInfo

    from roomloop.plant.identify import Fit, Series
    from roomloop.plant.spec import PlantSpec

EXIT_OK = 0
EXIT_RUNTIME = 1
EXIT_USAGE = 2
SCIPY_MISSING = (
    "tune needs numpy and scipy, which are not installed: pip install 'roomloop[tune]' "
    "(or pip install '.[tune]' in the roomloop checkout)"
)
GOOD_RMS_K = 0.15
POOR_RMS_K = 0.3
PARAM_TEXT = {
    "Ce": ("emitter capacity", "J/K"),
    "Ke": ("emitter conductance", "W/K"),
    "Cr": ("room capacity", "J/K"),
    "H": ("loss to outdoors", "W/K"),
    "Cm": ("mass capacity", "J/K"),
    "Km": ("mass conductance", "W/K"),
    "tau_s": ("sensor lag", "s"),
    "delay_s": ("transport delay", "s"),
}


def _fail(message: str, code: int) -> int:
    print(f"roomloop tune: {message}", file=sys.stderr)
    return code


def _have_scipy() -> bool:
    try:
        return all(importlib.util.find_spec(m) is not None for m in ("numpy", "scipy"))
    except ValueError:
        return False


def main(args: argparse.Namespace) -> int:
    site = load_site(args.config)  # ConfigError: the CLI front prints it, exit 2
    try:
        return _tune(args, site)
    except Refused as refused:
        return _fail(refused.message, refused.code)


def _tune(args: argparse.Namespace, site: Site) -> int:
    """Identify the zone's plant, then write its plant file and recommend its tuning."""
    _check_options(args, site)
    # numpy and scipy are known to be there from here on (roomloop.plant.identify needs them)
    from zoneinfo import ZoneInfo

    from roomloop.plant.identify import to_plant_spec

    zone = site.zone(args.zone)
    tz = ZoneInfo(site.site.timezone)
    history = _history(args, site, tz)
    fit, tried, series = _identify(history, zone)
    _print_fit(zone, history, fit, tried)
    if fit.rms_k >= POOR_RMS_K:
        raise Refused(
            f"no plant file and no recommendation from a poor fit (RMS {fit.rms_k:.3f} K, "
            f"at least {POOR_RMS_K:g} K): the model does not describe this zone's history "
            "(a window left open, another heat source, a sensor far from the room air?)",
            EXIT_RUNTIME,
        )
    spec = to_plant_spec(
        fit, name=f"{zone.name}-identified", resolution_k=series.resolution_k or 0.1
    )
    if args.write_plant:
        source = args.history or f"the history of site {site.name}"
        _write_plant(args.write_plant, spec, fit, source)
    if not args.no_recommend:
        _print_recommendation(site, zone.name, spec, fit)
    return EXIT_OK


def _check_options(args: argparse.Namespace, site: Site) -> None:
    """Refuse, before any history is read, what cannot work (all usage errors)."""
    names = [z.name for z in site.zones]
    if args.zone not in names:
        raise Refused(
            f"no zone {args.zone!r} in {args.config} (zones: {', '.join(names)})", EXIT_USAGE
        )
    if args.write_plant:
        problem = output_path_problem("--write-plant", args.write_plant)
        if problem:
            raise Refused(problem, EXIT_USAGE)
    if not _have_scipy():
        raise Refused(SCIPY_MISSING, EXIT_USAGE)


def _history(args: argparse.Namespace, site: Site, tz: ZoneInfo) -> ZoneHistory:
    """The zone's history since ``--since``, from the site's history file or ``--history``."""
    try:
        since = parse_bound(args.since, tz, "--since")
    except ValueError as exc:
        raise Refused(str(exc), EXIT_USAGE) from None
    try:
        return load_history(
            site, args.zone, state_dir=args.state_dir, csv_path=args.history, since=since
        )
    except HistoryUnavailable as exc:
        raise Refused(str(exc), EXIT_RUNTIME) from None


def _identify(history: ZoneHistory, zone: Zone) -> tuple[Fit, list[Fit], Series]:
    """The fit, every structure tried, and the series fitted; data that cannot support an
    identification is a runtime error, with the reason."""
    from roomloop.plant.identify import IdentificationRefused, identify

    try:
        return identify(history, heater_w=zone.heater_w, heating=zone.heating)
    except IdentificationRefused as exc:
        raise Refused(f"refused: {exc}", EXIT_RUNTIME) from None


def _print_fit(zone: Zone, history: ZoneHistory, fit: Fit, tried: list[Fit]) -> None:
    """What was fitted: the data, the structures tried, each parameter with its spread,
    the time constants, the residual with a verdict, and the fit's notes."""
    hours = (history.time[-1] - history.time[0]) / 3600.0
    print(
        f"zone {zone.name} ({zone.heating}): {hours:.1f} h of history, "
        f"{'with' if fit.outdoor else 'without'} outdoor temperature"
        + ("" if fit.outdoor else " (an unknown load is fitted instead)")
    )
    print(
        "structures tried: "
        + ", ".join(f"{f.structure} (RMS {f.rms_k:.3f} K)" for f in tried)
        + f"; chosen: {fit.structure}"
    )
    if not fit.heater_known:
        print(f"heater_w not set: capacities and conductances on a {fit.heater_w:.0f} W scale")
    for key, value in fit.params.items():
        label, unit = PARAM_TEXT[key]
        sd = fit.rel_sd[key]
        spread = f"+- {sd:.0f} s" if key == "delay_s" else f"+- {100 * sd:.0f} %"
        flag = "  (not determined)" if key in fit.undetermined() else ""
        if key in fit.confounded:  # its spread would pass for a precision it does not have
            spread, flag = "+- ?", "  (not determined without the outdoor temperature)"
        print(f"  {label:<20} {value:>12.4g} {unit:<4} {spread}{flag}")
    loose = "H" in fit.undetermined()
    taus = ", ".join(
        f"{k} {v / 3600:.2f} h" + (" (not determined)" if k == "building" and loose else "")
        for k, v in fit.node_time_constants_s().items()
    )
    print(f"  time constants: {taus}")
    print(f"RMS residual {fit.rms_k:.3f} K over {fit.points} points; verdict: {_verdict(fit)}")
    for note in fit.notes:
        if not note.endswith("evaluations"):
            print(f"note: {note}")


def _verdict(fit: Fit) -> str:
    poor = fit.rms_k >= POOR_RMS_K
    return (
        "good" if fit.determined and fit.rms_k < GOOD_RMS_K
        else "poor: do not trust this plant" if poor
        else "fair: the fit follows the data, but some parameters are not determined"
        if not fit.determined
        else "fair"
    )


def _write_plant(path: str, spec: PlantSpec, fit: Fit, source: str) -> None:
    """The identified plant as the plant file ``simulate --plant`` reads."""
    from roomloop.plant.identify import plant_yaml

    try:
        with open(path, "w", encoding="utf-8") as out:
            out.write(plant_yaml(spec, fit, source))
    except OSError as exc:
        raise Refused(f"cannot write {path}: {exc.strerror or exc}", EXIT_RUNTIME) from None
    print(f"plant written to {path} (roomloop simulate --plant reads it)")
    if not fit.determined:
        print(
            f"the plant file's {_undetermined_text(fit)} are not determined by these data "
            "(its header says so): what simulate predicts from them is indicative only"
        )


def _undetermined_text(fit: Fit) -> str:
    return ", ".join(PARAM_TEXT[key][0] for key in fit.undetermined())


def _print_recommendation(site: Site, zone_name: str, spec: PlantSpec, fit: Fit) -> None:
    """Today's tuning against the best candidate on the identified plant, unless the loss to
    outdoors, which the protocol's loads rest on, is not determined."""
    if "H" in fit.undetermined():
        print(
            "no recommendation: the loss to outdoors is not determined by these data, and the "
            "standard protocol's loads (its outdoor temperatures) rest on it; "
            + ("more history with program changes" if fit.outdoor else "the outdoor temperature")
            + " would determine it"
        )
        return
    if not fit.determined:
        print(
            "the prediction below uses the fitted values of the undetermined parameters: "
            "indicative only"
        )
    print(recommend(site, zone_name, spec))


def _protocol_runner(
    site: object, zone_name: str, spec: object
) -> tuple[Any, Callable[[Any], tuple[float, Any]]]:
    """The zone's protocol settings, and a run of the standard protocol on ``spec`` for given
    settings: (score, overall figures). As 'simulate -c SITE --zone Z' runs it: the zone's
    own set points and input points (the controller judges its points by name: a reading
    under another name would be none, and the zone would run in fail-safe)."""
    from roomloop.core.controller import ZoneController
    from roomloop.core.settings import ZoneSettings
    from roomloop.plant.protocol import protocol_settings, run_protocol

    zone = ZoneSettings.from_site(site, zone_name)  # type: ignore[arg-type]
    base = protocol_settings(zone, comfort_c=zone.comfort_c, economy_c=zone.economy_c)
    names = [p.name for p in base.inputs]
    cap = float(base.max_cycles_per_hour)

    def run(settings: ZoneSettings) -> tuple[float, Any]:
        result = run_protocol(
            ZoneController(settings), spec,  # type: ignore[arg-type]
            sensor_names=names, comfort_c=zone.comfort_c, economy_c=zone.economy_c,
        )
        o = result.overall
        over = max(0.0, o.cycles_per_hour - cap)
        return o.control_accuracy_k + 0.3 * max(0.0, o.overshoot_k) + over, o

    return base, run


def today_on(site: object, zone_name: str, spec: object) -> Any:
    """The overall figures of the zone's tuning today on ``spec`` (the recommendation's
    'today' column)."""
    base, run = _protocol_runner(site, zone_name, spec)
    return run(base)[1]


def recommend(site: object, zone_name: str, spec: object) -> str:
    """The standard protocol on the identified plant: today's tuning and candidates."""
    from roomloop.core.sizing import time_constant_for_cycle_rate

    base, run = _protocol_runner(site, zone_name, spec)
    cap = float(base.max_cycles_per_hour)
    today_score, today = run(base)
    best = (today_score, today, base)
    d = base.differential_k
    for gain in (1.5, 2.5, 3.5):
        if gain <= d:
            continue
        for cph in sorted({max(1.0, round(cap * f)) for f in (0.5, 0.75, 1.0)}):
            if base.min_on_s + base.min_off_s > 3600.0 / cph:
                continue
            for droop in (3600.0, 10800.0):
                tau = time_constant_for_cycle_rate(cph, gain, d)
                cand = dataclasses.replace(
                    base, anticipator_gain_k=gain, cycle_rate_cph=cph,
                    anticipator_time_constant_s=tau, droop_time_s=droop,
                )
                score, o = run(cand)
                if score < best[0] - 1e-9:
                    best = (score, o, cand)
    _, o_best, s_best = best
    rows = [
        "predicted on the identified plant (standard protocol, true room air):",
        f"{'':<24} {'today':>10} {'recommended':>12}",
    ]
    for label, key, fmt in (
        ("control accuracy K", "control_accuracy_k", "{:.2f}"),
        ("recovery overshoot K", "overshoot_k", "{:+.2f}"),
        ("cycles per hour", "cycles_per_hour", "{:.1f}"),
        ("energy kWh", "energy_kwh", "{:.2f}"),
    ):
        rows.append(
            f"{label:<24} {fmt.format(getattr(today, key)):>10} "
            f"{fmt.format(getattr(o_best, key)):>12}"
        )
    if s_best is base:
        rows.append("today's tuning is already the best of the candidates: nothing to change")
        return "\n".join(rows)
    rows += [
        "site-file lines to paste (zone " + zone_name + "):",
        "    tuning:",
        f"      differential_k: {s_best.differential_k:g}",
        f"      anticipator_gain_k: {s_best.anticipator_gain_k:g}",
        f"      cycle_rate_cph: {s_best.cycle_rate_cph:g}",
        f"      droop_time_s: {s_best.droop_time_s:g}",
    ]
    return "\n".join(rows)
