"""``fieldtool inject``, ``diagnose``, ``coverage`` and ``calibrate``: faults, ranking, what
each measurement kind can find, and fitting a profile."""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import tomllib
from datetime import UTC, datetime
from pathlib import Path

from fieldtool.commands.boards import PROFILE_HELP, profile_arg
from fieldtool.commands.expect import full_json as expectation_json
from fieldtool.commands.expect import full_text as expectation_text
from fieldtool.commands.output import check_out, write_whole
from fieldtool.commands.store import PRIORS_STORE_HELP, add_store_option, notice, store_of
from fieldtool.core.circuit.library import ProfileEntry, locate, user_profiles_dir
from fieldtool.core.circuit.profile import Profile, profile_from_dict
from fieldtool.core.circuit.profile_write import to_toml
from fieldtool.core.circuit.reading_range import reading_problem
from fieldtool.core.diagnosis.calibrate import calibrate
from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.core.diagnosis.dictionary_cache import default_cache_dir, load_or_build
from fieldtool.core.diagnosis.faults import describe, parse_fault
from fieldtool.core.diagnosis.priors import Priors
from fieldtool.core.diagnosis.ranking import Diagnosis, diagnose
from fieldtool.core.errors import InputError, ProfileError
from fieldtool.core.hazard import safety_line, signal_word
from fieldtool.core.measurement import DC
from fieldtool.core.readings import load_readings
from fieldtool.core.session import choose_priors, history_failures
from fieldtool.core.units import format_si
from fieldtool.core.words import count
from fieldtool.store import StoreAddress
from fieldtool.store.priors import store_failures

FAULT_HELP = (
    "TARGET:MODE[=SEVERITY], e.g. D5:open, C4:short, C3:lowcap=0.3 (fraction left), "
    "D2:leaky=47k (ohms), D6:weak=220 (ohms), C8:esr=22 (ohms), C2:leaky=1M, "
    "drive:stuck-low, drive:stuck-high, drive:missing (ac-ladder), drive:low=0.7, "
    "supply:low=0.8, load:heavy=3"
)

READINGS_HELP = (
    "Readings CSV, either header node,volts (optional ripple_vpp), or one reading a row with "
    "header measure,at,value (optional test_load_ohms), e.g. dc,S3,45.2 / ripple-pp,S3,31mV / "
    "ac-rms,S3,9mV / current,supply,0.35mA / dc-loaded,S6,72.9,10k / diode-test,D5,0.61. "
    "OL for overload."
)
READINGS_ARG = "CSV file: node,volts[,ripple_vpp] or measure,at,value[,test_load_ohms]"


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add the ``inject``, ``diagnose`` and ``calibrate`` subcommands."""
    inj = subparsers.add_parser(
        "inject",
        help="expected readings with one fault injected",
        description="What every node should read with the given fault (same output as expect).",
    )
    inj.add_argument("profile", help=PROFILE_HELP)
    inj.add_argument("--fault", required=True, help=FAULT_HELP)
    inj.add_argument("--json", action="store_true", help="one JSON object on stdout")
    inj.set_defaults(handler=run_inject)

    dia = subparsers.add_parser(
        "diagnose",
        help="rank the likely failed part from readings, and the next measurement to take",
        description=READINGS_HELP,
    )
    dia.add_argument("profile", help=PROFILE_HELP)
    dia.add_argument("--readings", required=True, help=READINGS_ARG)
    dia.add_argument("--logs", help="history folder whose confirmed repairs set the priors")
    add_store_option(dia, PRIORS_STORE_HELP)
    dia.add_argument("--cache", help="dictionary cache folder (default: $FIELDTOOL_CACHE)")
    dia.add_argument("--json", action="store_true", help="one JSON object on stdout")
    dia.set_defaults(handler=run_diagnose)

    cov = subparsers.add_parser(
        "coverage",
        help="which measurement kinds can find each catalogued fault on this board",
        description=(
            "For each catalogued fault and severity, the measurement kinds that tell it from a "
            "healthy board beyond 3x the spread, and the faults none can find."
        ),
    )
    cov.add_argument("profile", help=PROFILE_HELP)
    cov.add_argument("--cache", help="dictionary cache folder (default: $FIELDTOOL_CACHE)")
    cov.add_argument("--json", action="store_true", help="one JSON object on stdout")
    cov.set_defaults(handler=run_coverage)

    cal = subparsers.add_parser(
        "calibrate",
        help="fit drive swing and diode drop to readings from a known-good board",
        description="Least-squares fit to a golden board; writes a new profile.",
    )
    cal.add_argument("profile", help=PROFILE_HELP)
    cal.add_argument(
        "--readings", required=True, help="CSV of a known-good board's readings (DC is used)"
    )
    cal.add_argument("--out", required=True, help="where to write the fitted profile (.toml)")
    cal.add_argument("--force", action="store_true", help="overwrite --out if it exists")
    cal.add_argument(
        "--accept-poor-fit",
        action="store_true",
        help="write the fitted profile even when the readings do not look like a healthy board "
        "(a drive or diode drop far from the profile's, or nodes far off the fit)",
    )
    cal.add_argument("--json", action="store_true", help="one JSON object on stdout")
    cal.set_defaults(handler=run_calibrate)


# --- inject -------------------------------------------------------------------------------


def run_inject(args: argparse.Namespace) -> int:
    """Handle ``fieldtool inject``."""
    profile = profile_arg(args.profile)
    fault = parse_fault(args.fault, profile)
    if args.json:
        out = expectation_json(profile, fault)
        out["fault"] = fault.spec(profile)
        out["fault_words"] = describe(fault, profile)
        print(json.dumps(out, indent=2))
    else:
        print(f"INJECTED FAULT: {describe(fault, profile)} ({fault.spec(profile)})")
        print(expectation_text(profile, fault))
    return 0


# --- diagnose -----------------------------------------------------------------------------


def dictionary_for(profile: Profile, cache: str | None) -> FaultDictionary:
    """The profile's fault dictionary, with a progress bar on stderr while it is built."""
    folder = Path(cache) if cache else default_cache_dir(os.environ)
    if not sys.stderr.isatty():
        return load_or_build(profile, folder)
    from rich.console import Console
    from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

    with Progress(
        TextColumn("building the fault dictionary for {task.fields[board]}"),
        BarColumn(),
        TextColumn("{task.percentage:>3.0f} %"),
        TimeElapsedColumn(),
        console=Console(stderr=True),
        transient=True,
    ) as bar:
        task = bar.add_task("build", total=100, board=profile.name)
        return load_or_build(
            profile, folder, lambda done, total: bar.update(task, completed=100 * done / total)
        )


def priors_for(
    profile: Profile, d: FaultDictionary, logs: str | None, store: StoreAddress | None = None
) -> Priors:
    """Fleet priors from the store or the ``--logs`` history folder, or the published ones
    without either (a store that cannot be reached: the folder, with a notice on stderr)."""
    if logs and not Path(logs).is_dir():
        raise InputError(f"--logs {logs}: no such folder")
    if store is None:
        return choose_priors(profile, d.hypotheses, history_failures(logs) if logs else None)
    return choose_priors(profile, d.hypotheses, store_failures(store, logs, notice))


def run_diagnose(args: argparse.Namespace) -> int:
    """Handle ``fieldtool diagnose``."""
    profile = profile_arg(args.profile)
    d = dictionary_for(profile, args.cache)
    readings = load_readings(args.readings, d.nodes, d.labels, part_names(d), d.rails)
    result = diagnose(d, readings, priors_for(profile, d, args.logs, store_of(args)))
    if args.json:
        print(json.dumps(result.to_json(), indent=2))
    else:
        print(diagnosis_text(d, readings, result))
    return 0


def part_names(d: FaultDictionary) -> list[str]:
    """The diodes' designators as the board shows them, and their default ones."""
    return list(dict.fromkeys([*(d.part_name(r) for r in d.diodes), *d.diodes]))


def shown(value: float, unit: str) -> str:
    """A reading with a prefix a meter would show: 45.200 V, 31.0 mV, 350 µA."""
    for scale, prefix in ((1.0, ""), (1e-3, "m"), (1e-6, "µ")):
        if abs(value) >= scale or scale == 1e-6:
            return f"{value / scale:.4g} {prefix}{unit}"
    return f"{value:g} {unit}"


def reading_rows(d: FaultDictionary, readings) -> list[str]:
    """Each reading against its healthy band (every kind the dictionary predicts)."""
    lines = [f"{'reading':<28}{'value':>12}{'healthy band':>26}  verdict"]
    for r in readings:
        kind = r.quantity.name
        what = f"{r.at} {kind}" + (
            f" {format_si(r.condition('test_load_ohms'))}Ω" if r.quantity.conditions else ""
        )
        label = d.labels.get(r.at, "")
        what += f" ({label})" if label else ""
        if r.value is None:
            lines.append(f"{what:<28}{'OL':>12}{'':>26}  over range")
            continue
        value = shown(r.value, r.quantity.unit)
        try:
            band = d.channel_band(d.channel(r.at, kind, r.conditions))
        except InputError:
            lines.append(f"{what:<28}{value:>12}{'not predicted':>26}  see notes")
            continue
        if math.isnan(band.low):
            lines.append(f"{what:<28}{value:>12}{'not predicted':>26}")
            continue
        verdict = "in band" if band.contains(r.value) else ("LOW" if r.value < band.low else "HIGH")
        if reading_problem(d.profile, r):
            verdict = "not a reading of this board (wrong range or unit?)"
        unit = r.quantity.unit
        span = f"{shown(band.low, unit)} … {shown(band.high, unit)}"
        lines.append(f"{what:<28}{value:>12}{span:>26}  {verdict}")
    return lines


def highest_expected(d: FaultDictionary) -> float:
    """The highest DC any node of the healthy board reads, band included."""
    return max(max(abs(d.band(n).low), abs(d.band(n).high)) for n in d.nodes)


def next_lines(d: FaultDictionary, result: Diagnosis) -> list[str]:
    """What to measure next, with its caution under the board's signal word
    (``core.hazard``); or why nothing is left."""
    s = result.next_measurement
    if s is not None:
        lines = [f"next: {s.words} ({s.gain_bits:.2f} bits expected, effort {s.effort:g})"]
        if s.caution:
            word = signal_word(highest_expected(d), d.profile.safe_volts)
            lines.append(f"{word}: {s.caution}")
        return lines
    if result.top.probability >= 0.9 and not result.fit.no_fit:
        return [f"next: none needed; {result.top.words} at {result.top.probability:.0%}"]
    return ["next: no measurement left that would tell more; check suspects out of circuit"]


def diagnosis_text(d: FaultDictionary, readings, result: Diagnosis) -> str:
    """Readings against the healthy bands, the ranked suspects and the advice."""
    lines = [f"{d.profile.name}: {count(len(readings), 'reading')}", ""]
    lines += reading_rows(d, readings)
    lines.append("")
    if result.fit.no_fit:  # the reading that fits nothing leads
        # "NO FIT", not WARNING: that signal word is kept for the hazard (core.hazard).
        lines.append("NO FIT: " + result.fit.text)
        lines.append("most likely, if a single fault is to blame:")
    else:
        lines.append("most likely:")
    for s in result.suspects[:8]:
        bar = "#" * round(s.probability * 20)
        lines.append(f"  {s.probability:6.1%}  {bar:<20}  {s.words}")
    for a in result.ambiguity:
        lines.append(f"ambiguous: {a.text}")
    lines += next_lines(d, result)
    if not result.fit.no_fit:
        lines.append("fit: " + result.fit.text)
    lines += [f"note: {text}" for text in result.ignored]
    highest = highest_expected(d)
    dc = [r for r in readings if r.quantity == DC and reading_problem(d.profile, r) is None]
    overload = any(r.value is None for r in dc)
    read = [abs(r.value) for r in dc if r.value is not None]
    lines.append(safety_line(None if overload else max([highest, *read]), d.profile.safe_volts))
    return "\n".join(lines)


# --- coverage ----------------------------------------------------------------------------


def run_coverage(args: argparse.Namespace) -> int:
    """Handle ``fieldtool coverage``."""
    from fieldtool.core.diagnosis.coverage import coverage

    profile = profile_arg(args.profile)
    c = coverage(dictionary_for(profile, args.cache))
    if args.json:
        print(json.dumps(c.to_json(), indent=2))
    else:
        print(coverage_text(c))
    return 0


def coverage_text(c) -> str:
    """One line a fault and severity: the kinds that find it and where; then the ones none
    finds, said plainly."""
    from fieldtool.core.diagnosis.coverage import SIGMAS

    lines = [
        f"{c.board}: which measurements tell each fault from a healthy board "
        f"(beyond {SIGMAS:g}x the spread)",
        f"measurements this board allows: {', '.join(c.kinds)}",
        "",
    ]
    width = max((len(f.words) for f in c.faults), default=10) + 2
    for f in c.faults:
        found = [f"{k} ({f.where[k]})" for k in f.kinds()]
        lines.append(f"{f.words:<{width}}{', '.join(found) if found else '-- none'}")
    missing = c.unfindable()
    lines.append("")
    if missing:
        words = {f.key: f.words.split(" (")[0] for f in c.faults}
        lines.append(
            "No available measurement finds these at any severity: "
            + "; ".join(words[k] for k in missing)
            + ". Check those parts out of circuit."
        )
    else:
        lines.append("Every catalogued fault is found by some measurement at some severity.")
    for part, why in c.lift_one_leg.items():
        lines.append(f"{part}: in-circuit diode test tells nothing ({why}); lift one leg")
    return "\n".join(lines)


# --- calibrate ----------------------------------------------------------------------------


def run_calibrate(args: argparse.Namespace) -> int:
    """Handle ``fieldtool calibrate``."""
    out = Path(args.out)
    check_out("--out", out, force=args.force)
    entry = locate(args.profile, user_profiles_dir(os.environ))
    profile = entry.load()
    from fieldtool.core.circuit.netlist import build_circuit

    circuit, _ = build_circuit(profile)
    nodes = [circuit.name(i) for i in circuit.probe_nodes]
    readings = load_readings(args.readings, nodes, profile.labels)
    others = [r for r in readings if r.quantity != DC]
    result = calibrate(profile, readings)
    if result.problems and not args.accept_poor_fit:
        raise InputError(
            f"these readings do not look like a healthy {profile.name}: "
            f"{'; '.join(result.problems)}. Nothing was written. Calibrate from a board known to "
            "be good (diagnose this one first), or pass --accept-poor-fit to write it anyway"
        )
    text = fitted_toml(entry, profile, result, args.readings)
    write_whole("--out", out, text.encode("utf-8"))
    summary = {
        "out": str(out),
        "drive_volts": result.profile.drive_volts,
        "drive_scale": result.drive_scale,
        "diode_shift_volts": result.diode_shift_v,
        "supply_volts": result.profile.supply_volts if result.supply_scale else None,
        "rms_residual_volts": result.rms_volts,
        "chi2": result.chi2,
        "residuals": result.residuals,
        "iterations": result.iterations,
        "notes": list(result.notes) + _left_out(others),
        "problems": list(result.problems),
    }
    if args.json:
        print(json.dumps(summary, indent=2))
        return 0
    print(f"wrote {out}")
    print(
        f"drive {profile.drive_volts:g} → {result.profile.drive_volts:.4g} V; diode drop "
        f"{result.diode_shift_v * 1000:+.1f} mV",
        end="",
    )
    if result.supply_scale:
        print(f"; supply {profile.supply_volts:g} → {result.profile.supply_volts:.4g} V", end="")
    print(f"\nresidual {result.rms_volts * 1000:.1f} mV rms over {len(result.residuals)} nodes")
    for node, e in result.residuals.items():
        print(f"  {node:<6}{e * 1000:+9.1f} mV")
    for note in [*result.notes, *_left_out(others)]:
        print(f"note: {note}")
    for problem in result.problems:
        print(f"POOR FIT (written because of --accept-poor-fit): {problem}")
    return 0


def _left_out(others) -> list[str]:
    if not others:
        return []
    kinds = ", ".join(dict.fromkeys(r.quantity.name for r in others))
    left = count(len(others), "reading")
    return [f"calibration fits DC readings only; {left} of {kinds} left out"]


def fitted_toml(entry: ProfileEntry, original: Profile, result, readings_path: str) -> str:
    """The source profile's TOML with the fitted drive, diode and supply values."""
    source = entry.where
    try:
        data = tomllib.loads(entry.read_bytes().decode("utf-8-sig"))
    except (UnicodeDecodeError, tomllib.TOMLDecodeError) as exc:
        raise ProfileError(f"{source}: cannot re-read for writing ({exc})") from None
    fitted = result.profile
    data["drive"]["volts"] = fitted.drive_volts
    if result.supply_scale is not None:
        data["supply"]["volts"] = fitted.supply_volts
    _shift_diode(data["diode"], fitted.diode.saturation_current_a, result.diode_shift_v)
    for ref, spec in fitted.diode_overrides.items():
        table = data.get("overrides", {}).get(ref, {})
        if "saturation_current_a" in table or "forward_volts" in table:
            _shift_diode(table, spec.saturation_current_a, result.diode_shift_v)
    stamp = datetime.now(UTC).strftime("%Y-%m-%d %H:%M UTC")
    header = (
        f"Calibrated from {original.name} ({source}) with {readings_path} on {stamp}.\n"
        f"Drive ×{result.drive_scale:.4f}, diode drop {result.diode_shift_v * 1000:+.1f} mV, "
        f"residual {result.rms_volts * 1000:.1f} mV rms."
    )
    if result.problems:
        header += "\nPOOR FIT, written with --accept-poor-fit: " + "; ".join(result.problems)
    text = to_toml(data, header)
    try:  # refuse to write what would not load
        profile_from_dict(tomllib.loads(text), "the fitted profile")
    except ProfileError as exc:
        raise InputError(f"{exc.message}; nothing was written") from None
    return text


def _shift_diode(table: dict, saturation: float, shift: float) -> None:
    if "forward_volts" in table:
        table["forward_volts"] = float(table["forward_volts"]) + shift
    else:
        table["saturation_current_a"] = saturation
