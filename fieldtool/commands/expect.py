"""`fieldtool expect`: what every node of a board should read."""

from __future__ import annotations

import json
import math

from fieldtool.commands import expect_readouts
from fieldtool.commands.boards import PROFILE_HELP, profile_arg
from fieldtool.commands.expect_readouts import si as _si
from fieldtool.commands.options import number
from fieldtool.core.circuit.expect import Expectation, expect
from fieldtool.core.circuit.netlist import Change
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.ranges import LOAD_OHMS
from fieldtool.core.circuit.readouts.board import board_readouts
from fieldtool.core.hazard import safety_line


def register(subparsers) -> None:
    """Add the `expect` subcommand."""
    p = subparsers.add_parser(
        "expect",
        help="expected reading at every node of a board, and its safety figures",
        description=(
            "Expected DC reading (as the meter reads it) and ripple at every node; ripple on a "
            "scope, AC RMS, DC under the profile's test loads, the supply current and each "
            "diode's diode-test reading."
        ),
    )
    p.add_argument("profile", help=PROFILE_HELP)
    p.add_argument(
        "--load-ohms",
        type=number(LOAD_OHMS, "load"),
        metavar="OHMS",
        help="use this resistive load instead of the profile's (e.g. 470k)",
    )
    p.add_argument("--json", action="store_true", help="one JSON object on stdout")
    p.set_defaults(handler=run)


def run(args) -> int:
    """Handle `fieldtool expect`."""
    profile = profile_arg(args.profile)
    if args.load_ohms is not None:
        profile = profile.with_load_ohms(args.load_ohms)
    print(json.dumps(full_json(profile), indent=2) if args.json else full_text(profile))
    return 0


def full_json(profile: Profile, fault: Change | None = None) -> dict:
    """Everything `expect` knows of a board (optionally faulted), as one JSON object."""
    data = to_json(expect(profile, fault=fault))
    more = board_readouts(profile, fault=fault, spreads=False)  # expect shows no spreads
    for j, node in enumerate(data["nodes"]):
        node.update(expect_readouts.node_json(more, j))
    data.update(expect_readouts.board_json(more))
    return data


def full_text(profile: Profile, fault: Change | None = None) -> str:
    """Everything `expect` knows of a board (optionally faulted), as readable tables."""
    more = board_readouts(profile, fault=fault, spreads=False)  # expect shows no spreads
    return to_text(expect(profile, fault=fault)) + "\n" + expect_readouts.text(more)


def _num(x: float | None) -> float | None:
    return None if x is None or not math.isfinite(x) else float(x)


def to_json(e: Expectation) -> dict:
    """The JSON shape shared by `expect` and `inject`."""
    return {
        "profile": e.profile.name,
        "nodes": [
            {
                "node": n.node,
                "label": n.label,
                "volts": round(n.volts, 6),
                "ripple_vpp": round(n.ripple_vpp, 6),
                "unloaded_volts": round(n.unloaded_volts, 6),
                "min_volts": round(n.min_volts, 6),
                "max_volts": round(n.max_volts, 6),
                "meter_loading_matters": e.loading_matters(n),
            }
            for n in e.nodes
        ],
        "output_node": e.output_node,
        "output_volts": e.output_volts,
        "output_ripple_vpp": e.output_ripple_vpp,
        "supply_current_a": e.supply_current_a,
        "drive_current_a": e.drive_current_a,
        "efficiency": _num(e.efficiency),
        "output_ohms": _num(e.output_ohms),
        "startup_s": _num(e.startup_s),
        "discharge_s": _num(e.discharge_s),
        "safe_volts": e.safe_volts,
        "stored_energy_j": e.stored_energy_j,
        "converged": e.converged,
        "residual_volts": e.residual_volts,
    }


def _percent(x: float | None) -> str:
    return "n/a" if x is None or not math.isfinite(x) else f"{x:.1%}"


def _discharge(e: Expectation) -> str:
    """How long the board takes to fall below its safe level, in words."""
    if e.discharge_s is None or not math.isfinite(e.discharge_s):
        return f"no path found below {e.safe_volts:g} V: treat it as charged until measured"
    if e.discharge_s == 0:
        return f"already below {e.safe_volts:g} V"
    return f"below {e.safe_volts:g} V in {_si(e.discharge_s, 's')}"


def to_text(e: Expectation) -> str:
    """A readable table of nodes and the board figures."""
    p = e.profile
    lines = [
        f"{p.name}: {p.topology}, {p.polarity}, {p.stages} stages, drive {p.drive_volts:g} V "
        f"at {_si(p.frequency_hz, 'Hz')}, meter {_si(p.meter_ohms, 'Ω')}",
        "",
        f"{'node':<6}{'test pt':<9}{'expect DC':>12}{'ripple p-p':>13}   note",
    ]
    for n in e.nodes:
        note = f"meter pulls it {n.loading_volts:+.3g} V" if e.loading_matters(n) else ""
        lines.append(f"{n.node:<6}{n.label:<9}{n.volts:>10.3f} V{n.ripple_vpp:>11.4f} V   {note}")
    lines += [
        "",
        f"output {e.output_node}: {e.output_volts:.3f} V, ripple {_si(e.output_ripple_vpp, 'V')}"
        f" p-p, output impedance {_si(e.output_ohms, 'Ω')}",
        f"supply current {_si(e.supply_current_a, 'A')}, drive-rail current "
        f"{_si(e.drive_current_a, 'A')}, efficiency {_percent(e.efficiency)}",
        f"start-up to 90 %: {_si(e.startup_s, 's')} (estimate from the linearised period map)",
        f"stored energy {_si(e.stored_energy_j, 'J')}; after power-off, {_discharge(e)}",
        safety_line(max(abs(n.unloaded_volts) for n in e.nodes), e.safe_volts),
    ]
    return "\n".join(lines)
