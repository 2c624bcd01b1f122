"""``roomloop tune -c SITE --zone Z [--history FILE.csv] [--write-plant OUT.yaml]``.

Identifies the zone's plant from its history (:mod:`roomloop.plant.identify`, scipy
from the optional ``tune`` extra), reports the fitted parameters with their
uncertainty, the RMS residual and a verdict on the data, optionally writes the plant
file ``simulate --plant`` reads, and runs the standard protocol on the identified
plant over candidate tunings, printing today's tuning and the best side by side with
the site-file lines to paste.
Exit codes: 0 ok; 1 no history (none, or a damaged history file), or the data cannot
support an identification, or the fit is poor or unphysical (the reason is printed; no plant
file, no recommendation); 2 a bad site file or CSV, an unknown zone, numpy/scipy missing.
"""

from __future__ import annotations

import argparse
import dataclasses
import importlib.util
import math
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

    from roomloop.plant.identify import to_plant_spec, unphysical

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
    suffix = "-identified"  # a plant's name, like a zone's, has at most 64 characters
    spec = to_plant_spec(
        fit, name=zone.name[: 64 - len(suffix)] + suffix,
        resolution_k=series.resolution_k or 0.1,
    )
    problems = unphysical(spec)
    if problems:  # simulate --plant would refuse such a file: neither it nor a tuning
        raise Refused(
            "no plant file and no recommendation from an unphysical fit: "
            + "; ".join(problems)
            + " (simulate --plant refuses such a plant). These data do not show a room "
            "being heated: does the temperature follow the relay within seconds (a sensor "
            "on the heater, or readings not from this zone)?",
            EXIT_RUNTIME,
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
    from roomloop.plant.identify import history_hours_text

    print(
        f"zone {zone.name} ({zone.heating}): {history_hours_text(history)}, "
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
    """Today's tuning against the best candidate on the identified plant. A loss to outdoors
    the data do not determine is spanned (:data:`LOSS_FACTORS`): the recommendation must hold
    over the whole span."""
    loss_undetermined = "H" in fit.undetermined()
    if not fit.determined:
        print(
            "the prediction below uses the fitted values of the undetermined parameters: "
            "indicative only"
        )
    print(
        recommend(
            site, zone_name, spec, span_loss=loss_undetermined, heater_known=fit.heater_known
        )
    )


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


GAINS_K = (1.5, 2.5, 3.5)
"""Anticipator gains tried (K): the range of the heating-type presets."""
CYCLE_RATE_SHARES = (0.5, 0.75, 1.0)
"""Cycle rates tried, as shares of the heating type's cap on cycles per hour."""
DROOP_TIMES_S = (3600.0, 10800.0)
WORTH_CHANGING = 0.02
"""A candidate must beat today's score (about K of control accuracy) by this much to be
recommended: less is within what the plant's identification can tell apart."""
DIFFERENTIALS_K = (0.3, 0.5, 0.8)
"""Differentials tried (K) besides today's. Not below 0.3 K: with a 0.1 K transmitter step a
narrower band switches on the sensor's steps (common practice, no source)."""


LOSS_FACTORS = (1 / 3, 3.0)
"""A loss to outdoors the data do not determine is spanned from a third of the fitted one to
three times it (a fit without the outdoor temperature was seen 2.6 times too high:
roomloop.plant.identify.CONFOUNDED_WITHOUT_OUTDOOR). The protocol's loads are shares of the
heater's output, so the loss enters only through how the room's loss changes with its
temperature (the set-back and the recovery): the figures move little over the span."""


@dataclasses.dataclass(frozen=True)
class Recommendation:
    """The protocol's overall figures for today's tuning and the best candidate found."""

    today: Any
    best: Any
    today_settings: Any
    settings: Any
    """The best candidate's ZoneSettings (``today_settings`` itself when nothing beat it)."""
    tried: int
    spans: tuple[tuple[Any, Any], ...] = ()
    """With the loss to outdoors spanned: (today, best) figures at each of
    :data:`LOSS_FACTORS` times the fitted loss."""
    own_time_constant: bool = False
    """The site file sets the anticipator's time constant itself (else it is derived from
    the cycle rate): the lines to paste must then set the candidate's too."""

    @property
    def changes(self) -> bool:
        return self.settings is not self.today_settings


def search_tuning(
    site: object, zone_name: str, spec: object, *, span_loss: bool = False
) -> Recommendation:
    """The standard protocol on ``spec`` over candidate tunings, best by the runner's score.

    A coordinate search, cheap enough for a Pi: gain x cycle rate x droop time at today's
    differential, then the differential at the best of those (the anticipator's time
    constant follows the cycle rate, gain and differential), then the gain again at a
    changed differential. A candidate must leave the cycle room for the minimum on and off
    times, and its gain must exceed its differential (the anticipator alone cycles the relay).
    With ``span_loss`` (the loss to outdoors not determined) the best is run again at each of
    :data:`LOSS_FACTORS` times the loss, and it is recommended only if it beats today's
    tuning there too.
    """
    from roomloop.core.sizing import time_constant_for_cycle_rate

    base, run = _protocol_runner(site, zone_name, spec)
    cap = float(base.max_cycles_per_hour)
    today_score, today = run(base)
    best: list[Any] = [today_score, today, base]
    tried = 1
    seen: set[tuple[float, float, float, float]] = set()
    if base.anticipator_gain_k > base.differential_k and math.isclose(
        base.anticipator_time_constant_s,
        time_constant_for_cycle_rate(
            base.cycle_rate_cph, base.anticipator_gain_k, base.differential_k
        ),
    ):  # today's tuning is a grid point: already run
        seen.add((base.anticipator_gain_k, base.cycle_rate_cph, base.droop_time_s,
                  base.differential_k))

    def consider(gain: float, cph: float, droop: float, d: float) -> None:
        nonlocal tried
        key = (gain, cph, droop, d)
        if key in seen or gain <= d or base.min_on_s + base.min_off_s > 3600.0 / cph:
            return
        seen.add(key)
        cand = dataclasses.replace(
            base, anticipator_gain_k=gain, cycle_rate_cph=cph, differential_k=d,
            anticipator_time_constant_s=time_constant_for_cycle_rate(cph, gain, d),
            droop_time_s=droop,
        )
        score, figures = run(cand)
        tried += 1
        if score < best[0] - 1e-9:
            best[:] = [score, figures, cand]

    rates = sorted({max(1.0, round(cap * f)) for f in CYCLE_RATE_SHARES})
    for gain in GAINS_K:
        for cph in rates:
            for droop in DROOP_TIMES_S if base.droop_compensation else (base.droop_time_s,):
                consider(gain, cph, droop, base.differential_k)

    def current() -> tuple[float, float, float, float]:
        s = best[2]
        return (s.anticipator_gain_k, s.cycle_rate_cph, s.droop_time_s, s.differential_k)

    gain, cph, droop, _ = current()
    for d in sorted({*DIFFERENTIALS_K, base.differential_k}):
        consider(gain, cph, droop, d)
    _, cph, droop, d = current()
    if d != base.differential_k:
        for gain in GAINS_K:
            consider(gain, cph, droop, d)
    if today_score - best[0] < WORTH_CHANGING:
        best[:] = [today_score, today, base]
    spans: list[tuple[Any, Any]] = []
    if span_loss:
        holds = True
        for factor in LOSS_FACTORS:
            _, run_there = _protocol_runner(site, zone_name, _with_loss(spec, factor))
            today_there = run_there(base)
            best_there = today_there if best[2] is base else run_there(best[2])
            holds = holds and best_there[0] <= today_there[0]
            spans.append((today_there[1], best_there[1]))
        if not holds:  # better only at the fitted loss: not a recommendation
            best[:] = [today_score, today, base]
            spans = [(t, t) for t, _ in spans]
    zone = site.zone(zone_name)  # type: ignore[attr-defined]
    own = zone.origins.get("anticipator_time_constant_s") == "file"
    return Recommendation(today, best[1], base, best[2], tried, tuple(spans), own)


def _with_loss(spec: Any, factor: float) -> Any:
    """``spec`` with its loss to outdoors scaled by ``factor``."""
    room = spec.room.model_copy(update={"loss_w_per_k": spec.room.loss_w_per_k * factor})
    return spec.model_copy(update={"room": room})


def recommend(
    site: object, zone_name: str, spec: Any, *, span_loss: bool = False,
    heater_known: bool = True,
) -> str:
    """The standard protocol on the identified plant: today's tuning and the best candidate
    side by side, and the site-file lines to paste."""
    found = search_tuning(site, zone_name, spec, span_loss=span_loss)
    return recommendation_text(
        found, zone_name, loss_w_per_k=spec.room.loss_w_per_k, heater_known=heater_known
    )


def recommendation_text(
    found: Recommendation, zone_name: str, *, loss_w_per_k: float | None = None,
    heater_known: bool = True,
) -> str:
    """Today's figures and the recommendation's side by side, and the lines to paste; with
    the loss spanned, each figure as its range over the span. Without ``heater_known`` (the
    zone has no ``heater_w``: the plant's heat is on a nominal scale) no energy figure."""
    today, o_best, s_best = found.today, found.best, found.settings
    rows = [
        f"predicted on the identified plant (standard protocol, true room air; "
        f"{found.tried} tunings tried):",
    ]
    if found.spans:
        low, high = (f * (loss_w_per_k or float("nan")) for f in LOSS_FACTORS)
        rows.append(
            "the loss to outdoors is not determined: each figure is its range over losses "
            f"from {low:.3g} to {high:.3g} W/K (a third of the fitted one to three times it), "
            "and a recommendation must beat today's tuning over all of them"
        )
    width = 14 if found.spans else 10
    rows.append(f"{'':<24} {'today':>{width}} {'recommended':>{width + 2}}")

    def cell(fmt: str, key: str, figures: list[Any]) -> str:
        values = sorted(getattr(f, key) for f in figures)
        low, high = fmt.format(values[0]), fmt.format(values[-1])
        return low if low == high else f"{low}..{high}"

    for label, key, fmt in (
        ("control accuracy K", "control_accuracy_k", "{:.2f}"),
        ("recovery overshoot K", "overshoot_k", "{:+.2f}"),
        ("cycles per hour", "cycles_per_hour", "{:.1f}"),
        ("energy kWh", "energy_kwh", "{:.2f}"),
    ):
        today_cell = cell(fmt, key, [today, *(t for t, _ in found.spans)])
        best_cell = cell(fmt, key, [o_best, *(b for _, b in found.spans)])
        if key == "energy_kwh" and not heater_known:
            today_cell = best_cell = "-"
        rows.append(f"{label:<24} {today_cell:>{width}} {best_cell:>{width + 2}}")
    if not heater_known:
        rows.append(
            "no energy figure: the zone has no heater_w, so the identified plant's heat is "
            "on a nominal scale, not the heater's own (give the zone its heater_w)"
        )
    if not found.changes:
        rows.append(
            "today's tuning is as good as the best candidate (within "
            f"{WORTH_CHANGING:g} K): nothing to change"
        )
        return "\n".join(rows)
    rows += [
        "site-file lines to paste (zone " + zone_name + "):",
        "    tuning:",
        f"      differential_k: {s_best.differential_k:g}",
        f"      anticipator_gain_k: {s_best.anticipator_gain_k:g}",
        f"      cycle_rate_cph: {s_best.cycle_rate_cph:g}",
    ]
    if found.own_time_constant:  # the site's own would override the one this cycle rate needs
        rows.append(
            f"      anticipator_time_constant_s: {s_best.anticipator_time_constant_s:.6g}"
        )
    if s_best.droop_compensation:
        rows.append(f"      droop_time_s: {s_best.droop_time_s:g}")
    return "\n".join(rows)
