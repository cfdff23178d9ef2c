"""``fieldtool`` (start screen), ``fieldtool probe`` and ``fieldtool demo``: the terminal UI."""

from __future__ import annotations

import argparse
import os
import random
import sys
import tempfile
from collections.abc import Callable
from pathlib import Path

from fieldtool.commands.boards import PROFILE_HELP, login_name, profile_arg
from fieldtool.commands.meters import BAUD
from fieldtool.commands.options import SEED, technician
from fieldtool.commands.store import PRIORS_STORE_HELP, add_store_option, store_of
from fieldtool.core import history as hist
from fieldtool.core.circuit.library import user_profiles_dir
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.coverage import coverage
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.faults import Fault, catalog
from fieldtool.core.errors import InputError
from fieldtool.meters.settings import PROTOCOLS, MeterSettings, load_settings, with_overrides

DEMO_PROFILE = "tidegauge-apd-bias"  # a shipped profile, by name
FINDABLE_SIGMAS = 3.0  # a fault is findable where a reading moves beyond 3× its spread
Findable = Callable[[Fault], bool]


def register(subparsers: argparse._SubParsersAction) -> None:
    """Add ``probe``, ``demo`` and ``tui``; with no subcommand at all, open the start screen."""
    common = _common(f"history folder (default: ${hist.ENV_VAR}, else ./logs)")

    tui = subparsers.add_parser("tui", parents=[common], help="open the start screen")
    tui.add_argument("--settings", help="meter settings TOML file")
    tui.set_defaults(handler=run_start)

    probe = subparsers.add_parser(
        "probe", parents=[common], help="open the probing screen for one board"
    )
    probe.add_argument("profile", help=PROFILE_HELP)
    probe.add_argument("--board", required=True, help="the board's serial")
    probe.add_argument("--port", help="meter port or URL (omit to type readings)")
    probe.add_argument("--protocol", choices=PROTOCOLS)
    probe.add_argument("--baud", type=BAUD, help="serial speed (default 9600, or the settings')")
    probe.add_argument("--settings", help="meter settings TOML file")
    choice = probe.add_mutually_exclusive_group()
    choice.add_argument("--resume", action="store_true", help="resume an unfinished session")
    choice.add_argument("--new", action="store_true", help="start a new session without asking")
    probe.set_defaults(handler=run_probe)

    demo_logs = (
        "history folder for the practice boards (default: fieldtool-demo in the system's "
        "temporary folder, so practice stays out of your real histories)"
    )
    demo = subparsers.add_parser(
        "demo",
        parents=[_common(demo_logs, store=False)],
        help="practise on an invented board with a hidden fault",
        description="Practise on an invented demo board with a simulated meter and a hidden "
        "fault: follow the next-node hints, name the part, record the repair and see whether "
        "you found it. Each --seed hides a different fault.",
    )
    demo.add_argument("--seed", type=SEED, default=1, help="which hidden fault (default 1)")
    demo.add_argument(
        "--profile",
        default=DEMO_PROFILE,
        help=f"board profile for the demo (default {DEMO_PROFILE})",
    )
    demo.set_defaults(handler=run_demo, demo_logs=True)

    # argparse keeps one defaults table per parser and shares it with this argument group:
    # with no subcommand the start screen opens; a subcommand's own handler replaces it.
    subparsers.container.set_defaults(handler=run_default)


def _common(logs_help: str, store: bool = True) -> argparse.ArgumentParser:
    """The options every terminal-UI command takes."""
    common = argparse.ArgumentParser(add_help=False)
    common.add_argument("--logs", metavar="DIR", help=logs_help)
    common.add_argument(
        "--technician",
        type=technician,
        help="your name or initials for the history (default: your login name; the start "
        "screen can change it)",
    )
    common.add_argument("--cache", metavar="DIR", help="fault dictionary cache folder")
    if store:
        add_store_option(common, PRIORS_STORE_HELP)
    return common


def run_default(args: argparse.Namespace) -> int:
    """``fieldtool`` alone opens the start screen."""
    if getattr(args, "command", None):
        raise InputError(f"'{args.command}' needs a subcommand; see 'fieldtool {args.command} -h'")
    return run_start(args)


def _settings(args: argparse.Namespace) -> MeterSettings:
    base = load_settings(args.settings) if getattr(args, "settings", None) else MeterSettings()
    return with_overrides(
        base, protocol=getattr(args, "protocol", None), baud=getattr(args, "baud", None)
    )


def _logs(args: argparse.Namespace) -> Path:
    if getattr(args, "demo_logs", False) and not args.logs:
        return Path(tempfile.gettempdir()) / "fieldtool-demo"
    return hist.resolve_logs_dir(getattr(args, "logs", None), os.environ)


def _run(args: argparse.Namespace, request=None, settings: MeterSettings | None = None) -> int:
    from fieldtool.tui.app import make_app

    logs = _logs(args)
    app = make_app(
        logs_dir=logs,
        request=request,
        profiles_dir=user_profiles_dir(os.environ),
        cache_dir=getattr(args, "cache", None),
        technician=getattr(args, "technician", None) or login_name(),
        settings=settings,
        # practice boards never read or feed a real fleet's store
        store=None if getattr(args, "demo_logs", False) else store_of(args),
    )
    app.run()
    if app.writer_left_unsaved:
        where = f"; kept in {app.rescued_to}" if app.rescued_to else "; they are lost"
        print(
            f"fieldtool: {app.writer_left_unsaved} history records could not be saved to "
            f"{logs}{where}",
            file=sys.stderr,
        )
        return 2
    return int(app.return_code or 0)


def run_start(args: argparse.Namespace) -> int:
    """The start screen."""
    return _run(args, None, _settings(args))


def run_probe(args: argparse.Namespace) -> int:
    """Straight to one board's probing screen."""
    from fieldtool.tui.app import SessionRequest
    from fieldtool.tui.meter_strip import MeterChoice

    profile = profile_arg(args.profile)
    serial = hist.check_name(args.board)
    settings = _settings(args)
    meter = (
        MeterChoice("port", args.port, settings) if args.port else MeterChoice(settings=settings)
    )
    resume = True if args.resume else (False if args.new else None)
    return _run(args, SessionRequest(profile, serial, meter, resume=resume), settings)


def demo_fault(profile: Profile, seed: int, findable: Findable | None = None) -> Fault:
    """A fault drawn from the board's catalog by the seed, at the grosser end of its grid,
    among those ``findable`` says the board's measurements can find (all, without it)."""
    rng = random.Random(seed)
    circuit, _ = build_circuit(profile)
    hyps = [h for h in catalog(profile, circuit) if h.target is not None]
    if findable is not None:
        hyps = [h for h in hyps if any(findable(f) for f in h.faults())]
    hyp = rng.choice(hyps)
    faults = hyp.faults()
    gross = [f for f in faults[len(faults) // 2 :] if findable is None or findable(f)]
    return rng.choice(gross or [f for f in faults if findable(f)])


def demo_findable(profile: Profile, cache_dir: str | None = None) -> Findable:
    """Which faults the demo may hide: those the board's measurement kinds can find, per
    ``coverage`` of the board's fault dictionary (built and cached on first use)."""
    cover = coverage(load_or_build(profile, cache_dir=cache_dir))
    return lambda fault: cover.findable(fault.key, fault.severity)


def run_demo(args: argparse.Namespace) -> int:
    """An invented board with the simulated meter and a hidden fault."""
    from fieldtool.tui.app import SessionRequest
    from fieldtool.tui.meter_strip import MeterChoice

    profile = profile_arg(args.profile)
    fault = demo_fault(profile, args.seed, demo_findable(profile, getattr(args, "cache", None)))
    meter = MeterChoice("simulated", fault=fault, seed=args.seed)
    serial = f"DEMO-{args.seed:04d}"
    request = SessionRequest(profile, serial, meter, resume=None, demo_fault=fault)
    code = _run(args, request, MeterSettings())
    print(f"fieldtool: demo history in {_logs(args)} (board {serial})")
    return code
