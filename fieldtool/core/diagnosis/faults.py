"""The fault catalog: named ways a part or the board can fail, and how each changes the netlist.

A fault is written ``TARGET:MODE`` or ``TARGET:MODE=SEVERITY``, the target a diode or capacitor
designator as the board shows it (or the default one, D5, C4) or one of ``drive``, ``supply``,
``load``. Severities take SI prefixes (``47k``, ``2.2M``, ``220m``) and an optional unit.

===========  ==========  ===================================================  ==============
target       mode        meaning                                              severity
===========  ==========  ===================================================  ==============
diode        open        no conduction either way                             (none)
diode        short       the junction reads a few ohms both ways              (none)
diode        leaky       reverse leakage, as a resistance across the diode    ohms
diode        weak        forward drop raised, as extra series resistance     ohms
capacitor    open        lead or plate lost: a picofarad or so left           (none)
capacitor    short       dielectric broken down: a few ohms across            (none)
capacitor    lowcap      capacitance down to a fraction of its value          fraction left
capacitor    esr         equivalent series resistance raised to               ohms
capacitor    leaky       leakage, as a resistance across the capacitor        ohms
drive        stuck-low   square drive (both clocks of a Dickson pump) held low  (none)
drive        stuck-high  square drive held high                               (none)
drive        missing     AC input gone (ac-ladder)                             (none)
drive        low         drive swing down to a fraction                       fraction left
supply       low         DC input down to a fraction (dc-ladder, dickson)     fraction left
load         heavy       load current up by a factor                          factor
===========  ==========  ===================================================  ==============
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile, display_name
from fieldtool.core.errors import InputError
from fieldtool.core.units import format_si, parse_si

SHORT_OHMS = 1.0  # a failed-short diode or capacitor reads about an ohm (common practice)
OPEN_FARADS = 1e-12  # what is left of an open capacitor: pad and lead stray (common practice)
OPEN_OHMS = 1e12  # an open diode: in series with its junction, so no bias makes it conduct


@dataclass(frozen=True)
class Mode:
    """One catalogued failure mode: what it applies to, its severity unit and its wording."""

    name: str
    applies_to: str  # "diode" | "capacitor" | "drive" | "supply" | "load"
    unit: str | None  # None: no severity
    words: str


MODES: tuple[Mode, ...] = (
    Mode("open", "diode", None, "open"),
    Mode("short", "diode", None, "shorted"),
    Mode("leaky", "diode", "ohms", "leaky (reverse leakage)"),
    Mode("weak", "diode", "ohms", "weak (high forward drop)"),
    Mode("open", "capacitor", None, "open"),
    Mode("short", "capacitor", None, "shorted"),
    Mode("lowcap", "capacitor", "fraction", "lost capacitance"),
    Mode("esr", "capacitor", "ohms", "high ESR"),
    Mode("leaky", "capacitor", "ohms", "leaky"),
    Mode("stuck-low", "drive", None, "drive stuck low"),
    Mode("stuck-high", "drive", None, "drive stuck high"),
    Mode("missing", "drive", None, "AC input missing"),
    Mode("low", "drive", "fraction", "drive swing low"),
    Mode("low", "supply", "fraction", "supply low"),
    Mode("heavy", "load", "factor", "load heavier than rated"),
)
BOARD_TARGETS = ("drive", "supply", "load")


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
        return f"{target}:{self.mode}={format_si(self.severity)}"


def target_kind(target: str) -> str:
    """``diode``, ``capacitor`` or the board target itself."""
    if target in BOARD_TARGETS:
        return target
    return "diode" if target.startswith("D") else "capacitor"


def find_mode(kind: str, name: str) -> Mode | None:
    """The catalogued mode of that name for that kind of target, or None."""
    for m in MODES:
        if m.applies_to == kind and m.name == name:
            return m
    return None


def modes_for(profile: Profile, kind: str) -> tuple[Mode, ...]:
    """The modes that make sense for one kind of target on this board."""
    out = []
    for m in MODES:
        if m.applies_to != kind:
            continue
        if kind == "drive":
            ac = profile.topology == "ac-ladder"
            if (m.name == "missing") != ac and m.name != "low":
                continue
        if kind == "supply" and profile.topology == "ac-ladder":
            continue
        out.append(m)
    return tuple(out)


# --- spec strings ------------------------------------------------------------------------


def parse_fault(spec: str, profile: Profile) -> Fault:
    """Read a spec such as ``D5:open``, ``C3:lowcap=0.3`` or ``CR105:leaky=47k``."""
    text = spec.strip()
    usage = (
        "write TARGET:MODE or TARGET:MODE=SEVERITY, e.g. D5:open, C4:short, C3:lowcap=0.3, "
        "D2:leaky=47k, drive:stuck-low (see 'fieldtool inject --help')"
    )
    if ":" not in text:
        raise InputError(f"fault {spec!r} has no ':'; {usage}")
    target_text, _, rest = text.partition(":")
    mode_text, has_value, value_text = rest.partition("=")
    target = _resolve_target(target_text.strip(), profile)
    kind = target_kind(target)
    mode_name = mode_text.strip().lower()
    allowed = modes_for(profile, kind)
    mode = next((m for m in allowed if m.name == mode_name), None)
    if mode is None:
        names = ", ".join(m.name for m in allowed)
        raise InputError(
            f"fault {spec!r}: {kind} {target_text.strip()} has no mode "
            f"{mode_name!r} on this board; modes: {names}"
        )
    if mode.unit is None:
        if has_value:
            raise InputError(f"fault {spec!r}: mode {mode.name} takes no severity; drop '='")
        return Fault(target, mode.name)
    if not has_value:
        raise InputError(
            f"fault {spec!r}: mode {mode.name} needs a severity in {mode.unit}, "
            f"e.g. {target_text.strip()}:{mode.name}={_example(mode)}"
        )
    try:
        severity = parse_si(value_text)
    except ValueError:
        raise InputError(
            f"fault {spec!r}: severity {value_text.strip()!r} is not a number; "
            f"e.g. {_example(mode)} ({mode.unit})"
        ) from None
    _check_severity(spec, mode, severity)
    return Fault(target, mode.name, severity)


def _example(mode: Mode) -> str:
    return {"ohms": "47k", "fraction": "0.3", "factor": "3"}[mode.unit or "ohms"]


def _check_severity(spec: str, mode: Mode, value: float) -> None:
    if mode.unit == "ohms" and value <= 0:
        raise InputError(f"fault {spec!r}: {mode.name} needs a resistance above 0 ohms")
    if mode.unit == "fraction" and not 0 < value < 1:
        raise InputError(
            f"fault {spec!r}: {mode.name} needs the fraction left, between 0 and 1 (e.g. 0.3)"
        )
    if mode.unit == "factor" and value <= 1:
        raise InputError(f"fault {spec!r}: {mode.name} needs a factor above 1 (e.g. 3)")


def _resolve_target(text: str, profile: Profile) -> str:
    from fieldtool.core.circuit.netlist import default_designators

    if text.lower() in BOARD_TARGETS:
        return text.lower()
    refs = default_designators(profile)
    renamed = {v.lower(): k for k, v in profile.designators.items()}
    if text.lower() in renamed:
        return renamed[text.lower()]
    for ref in refs:
        if ref.lower() == text.lower():
            return ref
    shown = ", ".join(display_name(profile, r) for r in refs)
    raise InputError(
        f"fault target {text!r} is not on this board; parts: {shown}; "
        f"board targets: {', '.join(BOARD_TARGETS)}"
    )


# --- applying a fault to the netlist ------------------------------------------------------


def _drive_sources(circuit: Circuit) -> list[int]:
    return [i for i, s in enumerate(circuit.sources) if s.kind != "dc"]


def apply_fault(circuit: Circuit, params: Params, fault: Fault, profile: Profile) -> Params:
    """A copy of ``params`` (every row) with the fault applied."""
    p = params.copy()
    t, mode, sev = fault.target, fault.mode, fault.severity
    kind = target_kind(t)
    if kind == "diode":
        j = circuit.diode_refs.index(t)
        if mode == "open":
            p.d_rs[:, j] = OPEN_OHMS
            p.d_gp[:, j] = np.minimum(p.d_gp[:, j], 1e-12)
        elif mode == "short":
            p.d_gp[:, j] = 1.0 / SHORT_OHMS
        elif mode == "leaky":
            p.d_gp[:, j] += 1.0 / sev
        elif mode == "weak":
            p.d_rs[:, j] += sev
    elif kind == "capacitor":
        j = circuit.cap_refs.index(t)
        if mode == "open":
            p.c_f[:, j] = np.minimum(p.c_f[:, j], OPEN_FARADS)
        elif mode == "short":
            p.c_gl[:, j] = 1.0 / SHORT_OHMS
        elif mode == "lowcap":
            p.c_f[:, j] *= sev
        elif mode == "esr":
            p.c_esr[:, j] = sev
        elif mode == "leaky":
            p.c_gl[:, j] += 1.0 / sev
    elif kind == "drive":
        for i in _drive_sources(circuit):
            hi, lo = p.s_high[:, i].copy(), p.s_low[:, i].copy()
            if mode == "stuck-low":
                p.s_high[:, i] = lo
            elif mode == "stuck-high":
                p.s_low[:, i] = hi
            elif mode == "missing":
                p.s_high[:, i] = 0.0
                p.s_low[:, i] = 0.0
            elif mode == "low":
                if circuit.sources[i].kind == "sine" or profile.topology == "ac-ladder":
                    p.s_high[:, i] = hi * sev
                    p.s_low[:, i] = lo * sev
                else:
                    p.s_high[:, i] = lo + (hi - lo) * sev
    elif kind == "supply":
        for i, s in enumerate(circuit.sources):
            if s.kind == "dc":
                p.s_high[:, i] *= sev
                p.s_low[:, i] *= sev
    elif kind == "load":
        o = circuit.output_node - 1
        if profile.load_ohms is not None:
            p.g_shunt[:, o] += (sev - 1.0) / profile.load_ohms
        else:
            p.i_load[:, o] *= sev
    return p


# --- the catalog with severity grids ------------------------------------------------------


def ideal_output_volts(profile: Profile) -> float:
    """The no-load output of the ideal multiplier (for scaling severity grids)."""
    swing = profile.drive_volts - profile.drive_low_volts
    vd = 0.6
    n = profile.stages
    if profile.topology == "dickson":
        return profile.supply_volts - vd + n * (swing - vd)
    if profile.topology == "ac-ladder":
        return 2 * n * max(profile.drive_volts - vd, 0.1)
    return profile.supply_volts + n * max(swing - 2 * vd, 0.1)


def load_ohms_equivalent(profile: Profile) -> float:
    """The load as a resistance: the profile's ohms, or output volts over a constant current."""
    if profile.load_ohms is not None:
        return profile.load_ohms
    amps = profile.load_amps or 0.0
    return abs(ideal_output_volts(profile)) / amps if amps > 0 else 1e9


def severity_grid(profile: Profile, mode: Mode) -> tuple[float, ...]:
    """Severities the dictionary tries for one mode on this board (spanning mild to gross).

    Resistive grids are scaled to the board: leakage against the load resistance (a leak
    draws current like the load does), series resistance and ESR against the switching
    impedance 1/(f·C) of one capacitor, which sets the scale of a pump's per-stage losses
    (Seeman & Sanders, IEEE Trans. Power Electron. 23(2), 2008, slow-switching limit).
    """
    z_switch = 1.0 / (profile.frequency_hz * profile.capacitor.farads)
    r_load = load_ohms_equivalent(profile)
    if mode.unit is None:
        return (math.nan,)
    if mode.name == "leaky":
        return tuple(r_load * k for k in (10.0, 1.0, 0.1))
    if mode.name in ("weak", "esr"):
        return tuple(z_switch * k for k in (0.5, 5.0, 50.0))
    if mode.name == "lowcap":
        return (0.7, 0.5, 0.35, 0.2, 0.1, 0.05)
    if mode.name == "low":
        return (0.9, 0.75, 0.6, 0.45, 0.3)
    if mode.name == "heavy":
        return (1.5, 2.0, 3.0, 5.0, 10.0, 20.0)
    raise ValueError(mode.name)


@dataclass(frozen=True)
class Hypothesis:
    """One single-fault hypothesis, its severity marginalised over a grid (or healthy)."""

    key: str  # "healthy", "D5:open", "C3:lowcap", "drive:stuck-low"
    target: str | None  # default designator or board target; None when healthy
    mode: str
    severities: tuple[float, ...]  # nan for a mode without severity

    @property
    def kind(self) -> str:
        """What failed: ``healthy``, ``diode``, ``capacitor`` or a board target."""
        return "healthy" if self.target is None else target_kind(self.target)

    def faults(self) -> tuple[Fault | None, ...]:
        """The concrete faults (one per severity); None for healthy."""
        if self.target is None:
            return (None,)
        return tuple(
            Fault(self.target, self.mode, None if math.isnan(s) else s) for s in self.severities
        )


def catalog(profile: Profile, circuit: Circuit) -> tuple[Hypothesis, ...]:
    """Healthy plus every single fault this board can have, with its severity grid."""
    hyps = [Hypothesis("healthy", None, "healthy", (math.nan,))]
    for ref in circuit.diode_refs:
        for m in modes_for(profile, "diode"):
            hyps.append(Hypothesis(f"{ref}:{m.name}", ref, m.name, severity_grid(profile, m)))
    parts = circuit.cap_refs[: len(circuit.cap_refs) - circuit.stray_caps]
    for ref in parts:
        for m in modes_for(profile, "capacitor"):
            hyps.append(Hypothesis(f"{ref}:{m.name}", ref, m.name, severity_grid(profile, m)))
    for target in BOARD_TARGETS:
        for m in modes_for(profile, target):
            hyps.append(Hypothesis(f"{target}:{m.name}", target, m.name, severity_grid(profile, m)))
    return tuple(hyps)


def describe(fault: Fault | None, profile: Profile) -> str:
    """Plain words for a fault: ``D5 open``, ``C3 lost capacitance (30 % left)``."""
    if fault is None:
        return "healthy"
    m = find_mode(target_kind(fault.target), fault.mode)
    name = display_name(profile, fault.target)
    words = m.words if m else fault.mode
    if fault.target in BOARD_TARGETS:
        text = words
    else:
        text = f"{name} {words}"
    if fault.severity is not None and m is not None:
        if m.unit == "ohms":
            text += f" ({format_si(fault.severity)}Ω)"
        elif m.unit == "fraction":
            text += f" ({fault.severity:.0%} left)"
        elif m.unit == "factor":
            text += f" (×{fault.severity:g})"
    return text
