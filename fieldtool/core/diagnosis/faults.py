"""Faults: one catalogued way a part or the board failed, written as a spec and applied to a
netlist; the catalog of single-fault hypotheses a board can have.

A fault is written ``TARGET:MODE`` or ``TARGET:MODE=SEVERITY``, the target a diode or capacitor
designator as the board shows it (or the default one, D5, C4) or one of ``drive``, ``supply``,
``load``. Severities take SI prefixes (``47k``, ``2.2M``, ``220m``) and an optional unit. What
each mode means, where it can happen and what it does to the netlist lives in its own module
under ``fieldtool.core.diagnosis.modes``; the README's fault catalog lists them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile, display_name
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.diagnosis.modes import BOARD_TARGETS, MODES, FaultMode, find_mode, modes_for
from fieldtool.core.errors import InputError, shown
from fieldtool.core.units import format_si, parse_si

__all__ = [
    "BOARD_TARGETS",
    "MODES",
    "Fault",
    "FaultMode",
    "Hypothesis",
    "apply_fault",
    "catalog",
    "describe",
    "find_mode",
    "modes_for",
    "parse_fault",
    "target_kind",
]


@dataclass(frozen=True)
class Fault:
    """One fault: a default designator (or board target), a mode and its severity."""

    target: str  # default designator "D5", "C4", or "drive" | "supply" | "load"
    mode: str
    severity: float | None = None

    @property
    def key(self) -> str:
        """The hypothesis this fault belongs to, severity left out: ``D5:open``."""
        return f"{self.target}:{self.mode}"

    def apply(self, circuit: Circuit, params: Params, profile: Profile) -> Params:
        """A copy of ``params`` (every row) with this fault made."""
        return apply_fault(circuit, params, self, profile)

    def spec(self, profile: Profile | None = None) -> str:
        """The fault as a spec string, with the board's designator where it has one."""
        target = display_name(profile, self.target) if profile else self.target
        if self.severity is None:
            return f"{target}:{self.mode}"
        mode = next((m for m in MODES if m.name == self.mode and m.unit), None)
        value = mode.format_severity(self.severity) if mode else format_si(self.severity)
        return f"{target}:{self.mode}={value}"


def target_kind(target: str, profile: Profile) -> str:
    """``diode``, ``capacitor`` or the board target itself, for a default designator."""
    if target in BOARD_TARGETS:
        return target
    topology = topology_of(profile)
    if target in topology.diodes(profile.stages):
        return "diode"
    if target in topology.capacitors(profile.stages):
        return "capacitor"
    raise KeyError(target)


# --- spec strings ------------------------------------------------------------------------


def parse_fault(spec: str, profile: Profile) -> Fault:
    """Read a spec such as ``D5:open``, ``C3:lowcap=0.3`` or ``CR105:leaky=47k``."""
    text = spec.strip()
    echo = shown(text)
    usage = (
        "write TARGET:MODE or TARGET:MODE=SEVERITY, e.g. D5:open, C4:short, C3:lowcap=0.3, "
        "D2:leaky=47k, drive:stuck-low (see 'fieldtool inject --help')"
    )
    if ":" not in text:
        raise InputError(f"fault {echo} has no ':'; {usage}")
    target_text, _, rest = text.partition(":")
    mode_text, has_value, value_text = rest.partition("=")
    target = _resolve_target(target_text.strip(), profile)
    kind = target_kind(target, profile)
    mode_name = mode_text.strip().lower()
    mode = find_mode(kind, mode_name)
    if mode is None or not mode.available(profile):
        raise InputError(f"fault {echo}: {_no_such_mode(kind, target, mode_name, profile)}")
    if mode.unit is None:
        if has_value:
            raise InputError(f"fault {echo}: mode {mode.name} takes no severity; drop '='")
        return Fault(target, mode.name)
    if not has_value and mode.default_severity is not None:
        return Fault(target, mode.name)  # the mode's typical severity (a short's ohm)
    if not has_value:
        raise InputError(
            f"fault {echo}: mode {mode.name} needs a severity "
            f"{'in ohms' if mode.unit == 'ohms' else f'as a {mode.unit}'}, "
            f"e.g. {display_name(profile, target)}:{mode.name}={mode.example}"
        )
    try:
        severity = parse_si(value_text)
    except ValueError:
        raise InputError(
            f"fault {echo}: severity {shown(value_text.strip())} is not a number; "
            f"e.g. {mode.example} ({mode.unit})"
        ) from None
    problem = mode.severity_problem(severity)
    if problem:
        raise InputError(f"fault {echo}: {problem}")
    return Fault(target, mode.name, severity)


def _no_such_mode(kind: str, target: str, name: str, profile: Profile) -> str:
    """Why a target has no mode of that name on this board, and what it has."""
    who = f"the {kind}" if kind in BOARD_TARGETS else f"{kind} {display_name(profile, target)}"
    mode = find_mode(kind, name)
    why = mode.unavailable(profile) if mode is not None else None
    here = ", ".join(m.name for m in modes_for(profile, kind))
    has = f"its modes here: {here}" if here else "it has no fault modes on this board"
    if why:
        return f"{who} cannot be {name!r} on this board ({why}); {has}"
    return f"{who} has no fault mode {shown(name)}; {has}"


def _resolve_target(text: str, profile: Profile) -> str:
    if text.lower() in BOARD_TARGETS:
        return text.lower()
    refs = topology_of(profile).designators(profile.stages)
    renamed = {v.lower(): k for k, v in profile.designators.items()}
    if text.lower() in renamed:
        return renamed[text.lower()]
    for ref in refs:
        if ref.lower() == text.lower():
            return ref
    shown_refs = ", ".join(display_name(profile, r) for r in refs)
    raise InputError(
        f"fault target {shown(text)} is not on this board; parts: {shown_refs}; "
        f"board targets: {', '.join(BOARD_TARGETS)}"
    )


# --- applying a fault to the netlist ------------------------------------------------------


def mode_of(fault: Fault, profile: Profile) -> FaultMode:
    """The catalogued mode a fault names (KeyError when the catalog has none)."""
    mode = find_mode(target_kind(fault.target, profile), fault.mode)
    if mode is None:
        raise KeyError(fault.key)
    return mode


def apply_fault(circuit: Circuit, params: Params, fault: Fault, profile: Profile) -> Params:
    """A copy of ``params`` (every row) with the fault applied."""
    p = params.copy()
    mode_of(fault, profile).apply(circuit, p, fault.target, fault.severity, profile)
    return p


# --- the catalog with severity grids ------------------------------------------------------


@dataclass(frozen=True)
class Hypothesis:
    """One single-fault hypothesis, its severity marginalised over a grid (or healthy)."""

    key: str  # "healthy", "D5:open", "C3:lowcap", "drive:stuck-low"
    target: str | None  # default designator or board target; None when healthy
    mode: str
    severities: tuple[float, ...]  # nan for a mode without severity
    kind: str  # "healthy", "diode", "capacitor" or the board target

    def faults(self) -> tuple[Fault | None, ...]:
        """The concrete faults (one per severity); None for healthy."""
        if self.target is None:
            return (None,)
        return tuple(
            Fault(self.target, self.mode, None if math.isnan(s) else s) for s in self.severities
        )


def catalog(profile: Profile, circuit: Circuit) -> tuple[Hypothesis, ...]:
    """Healthy plus every single fault this board can have, with its severity grid."""
    hyps = [Hypothesis("healthy", None, "healthy", (math.nan,), "healthy")]
    parts = circuit.cap_refs[: len(circuit.cap_refs) - circuit.stray_caps]
    targets = [
        *((ref, "diode") for ref in circuit.diode_refs),
        *((ref, "capacitor") for ref in parts),
        *((t, t) for t in BOARD_TARGETS),
    ]
    for target, kind in targets:
        for m in modes_for(profile, kind):
            hyps.append(Hypothesis(f"{target}:{m.name}", target, m.name, _grid(m, profile), kind))
    return tuple(hyps)


def _grid(mode: FaultMode, profile: Profile) -> tuple[float, ...]:
    """The mode's severity grid, kept inside the severities a spec may name (an extreme board
    can scale a grid point past them), without repeats."""
    limit = mode.severity_range
    if limit is None:
        return mode.grid(profile)
    kept: list[float] = []
    for value in mode.grid(profile):
        inside = min(max(value, limit.low), limit.high)
        if not limit.contains(inside):  # an open end: step 0.1 % inside it, so the value
            step = 1e-3  # survives being written to six figures and read back
            if inside <= limit.low:
                inside = limit.low + max(abs(limit.low), 1e-12) * step
            else:
                inside = limit.high - max(abs(limit.high), 1e-12) * step
        if inside not in kept:
            kept.append(inside)
    return tuple(kept)


def describe(fault: Fault | None, profile: Profile) -> str:
    """Plain words for a fault: ``D5 open``, ``C3 lost capacitance (30% left)``."""
    if fault is None:
        return "healthy"
    m = find_mode(target_kind(fault.target, profile), fault.mode)
    words = m.words if m else fault.mode
    text = (
        words if fault.target in BOARD_TARGETS else f"{display_name(profile, fault.target)} {words}"
    )
    if fault.severity is not None and m is not None:
        text += " " + m.severity_words(fault.severity, format_si(fault.severity))
    return text
