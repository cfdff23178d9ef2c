"""Board profiles: one TOML file per board type, validated into frozen dataclasses.

Units are SI and named in each key. Validation refuses unknown keys, missing keys, wrong types
and impossible values with one message naming the file, the key, what is wrong and what would
be right.
"""

from __future__ import annotations

import hashlib
import math
import tomllib
from pathlib import Path
from typing import Any

from fieldtool.core.circuit import ranges
from fieldtool.core.circuit.netlist import default_designators, default_nodes
from fieldtool.core.circuit.spec import (
    DEFAULT_SAFE_VOLTS,
    DIELECTRICS,
    DIODE_FAMILIES,
    ELECTROLYTIC_FROM_FARADS,
    POLARITIES,
    THERMAL_VOLTS_PER_KELVIN,
    WAVEFORMS,
    CapacitorSpec,
    DiodeSpec,
    Efforts,
    InstrumentSpec,
    LoadResistor,
    Profile,
)
from fieldtool.core.circuit.topologies import TOPOLOGIES
from fieldtool.core.errors import ProfileError, shown
from fieldtool.core.names import FILE_NAME_ALLOWED, TAG_ALLOWED, file_name_problem, tag_problem
from fieldtool.core.plausible import Range

BOARD_TARGET_WORDS = ("drive", "supply", "load")  # fault targets that are not parts
TEXT_MAX_CHARACTERS = 200  # a name or description is one line on screen

# ---------------------------------------------------------------------------------------------
# validation helpers


class _Table:
    """One TOML table being read: tracks which keys were used so unknown ones can be refused."""

    def __init__(self, path: str, name: str, data: Any) -> None:
        self.path, self.name = path, name
        if not isinstance(data, dict):
            self.fail(name, f"is a {type(data).__name__}, expected a table [{name}]")
        self.data: dict[str, Any] = data
        self.used: set[str] = set()

    def fail(self, key: str, what: str) -> None:
        where = f"{self.name}.{key}" if key != self.name else self.name
        raise ProfileError(f"{self.path}: [{where}] {what}")

    def has(self, key: str) -> bool:
        return key in self.data

    def number(
        self,
        key: str,
        default: float | None = None,
        *,
        limit: Range,
        required: bool = True,
        hint: str = "",
    ) -> float | None:
        """The number at ``key`` (or ``default``), refused unless ``limit`` holds it."""
        self.used.add(key)
        if key not in self.data:
            if default is not None or not required:
                return default
            self.fail(key, f"is missing: add `{key} = <number>`{hint}")
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            what = type(value).__name__
            self.fail(key, f"is {shown(value)} ({what}), expected a number{hint}")
        if isinstance(value, int) and abs(value) > 10**300:
            self.fail(key, f"is a {len(str(abs(value)))}-digit number, expected {limit.text()}")
        problem = limit.problem(float(value))
        if problem:
            self.fail(key, problem + hint)
        return float(value)

    def integer(self, key: str, *, minimum: int, maximum: int) -> int:
        """The whole number at ``key``, from ``minimum`` to ``maximum``."""
        self.used.add(key)
        expected = f"a whole number from {minimum} to {maximum}"
        if key not in self.data:
            self.fail(key, f"is missing: add `{key} = <{expected}>`")
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int):
            self.fail(key, f"is {shown(value)}, expected {expected}")
        if not minimum <= value <= maximum:
            self.fail(key, f"is {shown(value)}, expected {expected}")
        return int(value)

    def text(self, key: str, default: str | None = None, choices: tuple[str, ...] = ()) -> str:
        """The text at ``key`` (or ``default``), one of ``choices`` when given."""
        self.used.add(key)
        if key not in self.data:
            if default is not None:
                return default
            hint = f" (one of: {', '.join(choices)})" if choices else ""
            self.fail(key, f'is missing: add `{key} = "..."`{hint}')
        value = self.data[key]
        if not isinstance(value, str):
            self.fail(key, f"is {shown(value)}, expected text in quotes")
        if choices and value not in choices:
            self.fail(key, f"is {shown(value)}, expected one of: {', '.join(choices)}")
        if not choices and (len(value) > TEXT_MAX_CHARACTERS or not value.isprintable()):
            self.fail(
                key,
                f"is {shown(value)}, expected one line of at most {TEXT_MAX_CHARACTERS} characters",
            )
        return value

    def finish(self) -> None:
        unknown = sorted(set(self.data) - self.used)
        if unknown:
            known = ", ".join(sorted(self.used)) or "none"
            self.fail(unknown[0], f"is not a known key (known keys here: {known})")


def _diode(table: _Table, thermal_volts: float, base: DiodeSpec | None = None) -> DiodeSpec:
    t = table
    if t.has("forward_volts") or t.has("forward_amps"):
        if t.has("saturation_current_a"):
            t.fail(
                "saturation_current_a", "given together with forward_volts: use one or the other"
            )
        vf = t.number("forward_volts", limit=ranges.FORWARD_VOLTS)
        i_f = t.number(
            "forward_amps", limit=ranges.FORWARD_AMPS, hint=" (the current at forward_volts)"
        )
        n = t.number("emission_coefficient", 1.9, limit=ranges.EMISSION_COEFFICIENT)
        rs = t.number("series_ohms", 0.0, limit=ranges.DIODE_SERIES_OHMS)
        vj = vf - i_f * rs
        if vj <= 0:
            t.fail("series_ohms", "drops more than forward_volts at forward_amps: lower it")
        i_s = i_f / math.expm1(vj / (n * thermal_volts))
        if not ranges.SATURATION_CURRENT_A.contains(i_s):
            t.fail(
                "forward_volts",
                f"{vf:g} V at {i_f:g} A with emission_coefficient {n:g} means a saturation "
                f"current of {i_s:.3g} A, expected {ranges.SATURATION_CURRENT_A.text()} "
                f"({ranges.SATURATION_CURRENT_A.why}); a stack of junctions in one package is "
                "modelled with a larger emission_coefficient",
            )
    else:
        required = base is None
        i_s = t.number(
            "saturation_current_a",
            None if required else base.saturation_current_a,
            limit=ranges.SATURATION_CURRENT_A,
            hint=" (or give forward_volts and forward_amps)",
        )
        n = t.number(
            "emission_coefficient",
            None if required else base.emission_coefficient,
            limit=ranges.EMISSION_COEFFICIENT,
        )
        rs = t.number(
            "series_ohms", 0.0 if required else base.series_ohms, limit=ranges.DIODE_SERIES_OHMS
        )
    leak_default = 1e12 if base is None else 1.0 / base.leakage_siemens
    leak_ohms = t.number("leakage_ohms", leak_default, limit=ranges.LEAKAGE_OHMS)
    family = t.text("family", "general" if base is None else base.family, DIODE_FAMILIES)
    t.finish()
    return DiodeSpec(i_s, n, rs, 1.0 / leak_ohms, family)


def _capacitor(table: _Table, base: CapacitorSpec | None = None) -> CapacitorSpec:
    t = table
    farads = t.number(
        "farads",
        None if base is None else base.farads,
        limit=ranges.FARADS,
        hint=" (e.g. 4.7e-6 for 4.7 µF)",
    )
    tol = t.number(
        "tolerance",
        None if base is None else base.tolerance,
        limit=ranges.CAP_TOLERANCE,
    )
    esr = t.number("esr_ohms", 0.0 if base is None else base.esr_ohms, limit=ranges.ESR_OHMS)
    leak = t.number(
        "leakage_ohms", 1e10 if base is None else base.leakage_ohms, limit=ranges.LEAKAGE_OHMS
    )
    if base is None:
        t.used.add("stray_farads")  # read by the caller
        by_value = DIELECTRICS[0] if farads >= ELECTROLYTIC_FROM_FARADS else DIELECTRICS[1]
    else:
        by_value = base.dielectric
    dielectric = t.text("dielectric", by_value, DIELECTRICS)
    t.finish()
    return CapacitorSpec(farads, tol, esr, leak, dielectric)


def _instruments(meter: _Table, scope: _Table) -> InstrumentSpec:
    """The meter's AC, current and diode-test settings and the scope probe (defaults: spec)."""
    d = InstrumentSpec()
    m, s = meter, scope
    r = ranges
    spec = InstrumentSpec(
        ac_input_ohms=m.number("ac_input_ohms", d.ac_input_ohms, limit=r.METER_OHMS),
        ac_input_farads=m.number("ac_input_farads", d.ac_input_farads, limit=r.AC_INPUT_FARADS),
        ac_bandwidth_hz=m.number("ac_bandwidth_hz", d.ac_bandwidth_hz, limit=r.BANDWIDTH_HZ),
        ac_accuracy_percent=m.number(
            "ac_accuracy_percent", d.ac_accuracy_percent, limit=r.METER_PERCENT
        ),
        ac_accuracy_volts=m.number("ac_accuracy_volts", d.ac_accuracy_volts, limit=r.METER_VOLTS),
        burden_ohms=m.number(
            "burden_ohms", d.burden_ohms, limit=r.BURDEN_OHMS, hint=" (current range shunt)"
        ),
        current_accuracy_percent=m.number(
            "current_accuracy_percent", d.current_accuracy_percent, limit=r.METER_PERCENT
        ),
        current_accuracy_amps=m.number(
            "current_accuracy_amps", d.current_accuracy_amps, limit=r.CURRENT_ACCURACY_AMPS
        ),
        diode_test_amps=m.number(
            "diode_test_amps", d.diode_test_amps, limit=r.DIODE_TEST_AMPS, hint=" (e.g. 1e-3)"
        ),
        diode_test_volts=m.number(
            "diode_test_volts",
            d.diode_test_volts,
            limit=r.DIODE_TEST_VOLTS,
            hint=" (the diode test's open-circuit voltage, e.g. 3.0)",
        ),
        diode_accuracy_percent=m.number(
            "diode_accuracy_percent", d.diode_accuracy_percent, limit=r.METER_PERCENT
        ),
        diode_accuracy_volts=m.number(
            "diode_accuracy_volts", d.diode_accuracy_volts, limit=r.METER_VOLTS
        ),
        diode_settle_s=m.number("diode_settle_s", d.diode_settle_s, limit=r.SETTLE_S),
        probe_ohms=s.number("probe_ohms", d.probe_ohms, limit=r.METER_OHMS),
        probe_farads=s.number("probe_farads", d.probe_farads, limit=r.PROBE_FARADS),
        scope_accuracy_percent=s.number(
            "accuracy_percent", d.scope_accuracy_percent, limit=r.METER_PERCENT
        ),
        scope_accuracy_volts=s.number(
            "accuracy_volts", d.scope_accuracy_volts, limit=r.METER_VOLTS
        ),
    )
    m.finish()
    s.finish()
    return spec


def _efforts(path: str, data: Any) -> Efforts:
    """``[efforts]``: each measurement step's effort, relative to a DC reading (defaults: spec)."""
    d = Efforts()
    t = _Table(path, "efforts", data if data is not None else {})
    values = {
        name: t.number(name, getattr(d, name), limit=ranges.EFFORT)
        for name in Efforts.__dataclass_fields__
    }
    t.finish()
    return Efforts(**values)


MAX_TEST_LOADS = 8


def _test_loads(path: str, data: Any) -> tuple[LoadResistor, ...]:
    """``[test_loads] ohms = [...]`` and optionally ``rated_watts = [...]``, one per load."""
    if data is None:
        return ()
    t = _Table(path, "test_loads", data)
    example = "e.g. `ohms = [10e3, 100e3]`"
    ohms = _number_list(t, "ohms", example, ranges.TEST_LOAD_OHMS)
    if ohms is None:
        t.fail("ohms", f"is missing: list the test load resistances, {example}")
    if not 1 <= len(ohms) <= MAX_TEST_LOADS:
        t.fail("ohms", f"has {len(ohms)} values, expected 1 to {MAX_TEST_LOADS}; {example}")
    if len(set(ohms)) != len(ohms):
        t.fail("ohms", "lists a resistance twice; list each test load once")
    watts = _number_list(
        t, "rated_watts", "e.g. `rated_watts = [0.25, 0.5]`, one per load", ranges.RATED_WATTS
    )
    if watts is not None and len(watts) != len(ohms):
        t.fail("rated_watts", f"has {len(watts)} values for {len(ohms)} loads: give one per load")
    t.finish()
    rated = watts if watts is not None else [None] * len(ohms)
    return tuple(LoadResistor(o, w) for o, w in zip(ohms, rated, strict=True))


def _number_list(t: _Table, key: str, example: str, limit: Range) -> list[float] | None:
    """A list of numbers each within ``limit``, or None when the key is absent."""
    t.used.add(key)
    if key not in t.data:
        return None
    values = t.data[key]
    if not isinstance(values, list):
        t.fail(key, f"is {shown(values)}, expected a list of numbers; {example}")
    out = []
    for v in values:
        if isinstance(v, bool) or not isinstance(v, int | float):
            t.fail(key, f"holds {shown(v)}, expected numbers only; {example}")
        if isinstance(v, int) and abs(v) > 10**300:
            t.fail(key, f"holds {shown(v)}, expected {limit.text()}")
        problem = limit.problem(float(v))
        if problem:
            t.fail(key, f"holds a value that {problem}; {example}")
        out.append(float(v))
    return out


def _string_map(path: str, name: str, data: Any) -> dict[str, str]:
    """A table of short names (designators, test-point labels), each a valid tag."""
    if not isinstance(data, dict):
        raise ProfileError(f'{path}: [{name}] expected a table of names = "text"')
    for key, value in data.items():
        if not isinstance(value, str):
            raise ProfileError(
                f'{path}: [{name}.{key}] is {shown(value)}, expected a name in quotes ("TP3")'
            )
        problem = tag_problem(value)
        if problem:
            raise ProfileError(
                f"{path}: [{name}.{key}] {shown(value)} {problem}; use {TAG_ALLOWED}"
            )
    return dict(data)


def load_profile(path: str | Path) -> Profile:
    """Read and validate one profile file."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise ProfileError(
            f"{p}: no such file (give a .toml path, or a profile name: see 'fieldtool profiles')"
        ) from None
    except IsADirectoryError:
        raise ProfileError(f"{p}: is a folder, expected a .toml profile file") from None
    except OSError as exc:
        raise ProfileError(f"{p}: cannot be read ({exc.strerror})") from None
    return load_profile_bytes(raw, str(p))


def load_profile_bytes(raw: bytes, where: str) -> Profile:
    """Validate a profile from the bytes of its TOML file; ``where`` names it in messages."""
    try:
        text = raw.decode("utf-8-sig")  # a byte-order mark, as some editors save, is fine
    except UnicodeDecodeError:
        raise ProfileError(f"{where}: is not UTF-8 text; save it as UTF-8 TOML") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"{where}: is not valid TOML ({exc}); fix the line it names") from None
    except ValueError:  # Python refuses integers of thousands of digits
        raise ProfileError(
            f"{where}: holds a value TOML cannot read (a number thousands of digits long); "
            "fix that value"
        ) from None
    return profile_from_dict(data, where, hashlib.sha256(raw).hexdigest()[:16])


_SECTIONS = (
    "board",
    "supply",
    "drive",
    "diode",
    "capacitor",
    "load",
    "meter",
    "scope",
    "test_loads",
    "efforts",
    "bleeder",
    "designators",
    "labels",
    "overrides",
)


def profile_from_dict(data: dict[str, Any], path: str = "<profile>", digest: str = "") -> Profile:
    """Validate an already-parsed profile table."""
    for key in data:
        if key not in _SECTIONS:
            raise ProfileError(
                f"{path}: [{key}] is not a known section (known: {', '.join(_SECTIONS)})"
            )
    for section in ("board", "drive", "diode", "capacitor", "load"):
        if section not in data:
            raise ProfileError(f"{path}: [{section}] section is missing; add it (see README)")

    board = _Table(path, "board", data["board"])
    name = board.text("name")
    problem = file_name_problem(name)
    if problem:
        board.fail(
            "name",
            f"{shown(name)} {problem}; the name becomes the folder of this board type's "
            f"histories, so use {FILE_NAME_ALLOWED}",
        )
    description = board.text("description", "")
    topology = board.text("topology", choices=tuple(TOPOLOGIES))
    kind = TOPOLOGIES[topology]
    polarity = board.text("polarity", "positive", choices=POLARITIES)
    stages = board.integer("stages", minimum=ranges.STAGES[0], maximum=ranges.STAGES[1])
    temperature_c = board.number("temperature_c", 25.0, limit=ranges.TEMPERATURE_C)
    safe_volts = board.number("safe_volts", DEFAULT_SAFE_VOLTS, limit=ranges.SAFE_VOLTS)
    board.finish()
    if polarity not in kind.polarities:
        board.fail(
            "polarity", f"{polarity} is not supported for {topology} ({kind.words}); use dc-ladder"
        )
    thermal = THERMAL_VOLTS_PER_KELVIN * (temperature_c + 273.15)

    if not kind.dc_input:
        if "supply" in data:
            supply = _Table(path, "supply", data["supply"])
            supply_volts = supply.number("volts", 0.0, limit=ranges.SUPPLY_VOLTS)
            if supply_volts != 0.0:
                supply.fail("volts", f"must be 0 or absent for {topology} (it has no DC input)")
            supply_ohms = supply.number("source_ohms", 0.05, limit=ranges.SOURCE_OHMS)
            supply.finish()
        else:
            supply_volts, supply_ohms = 0.0, 0.05
    else:
        if "supply" not in data:
            raise ProfileError(f"{path}: [supply] section is missing; add `volts = <DC input>`")
        supply = _Table(path, "supply", data["supply"])
        supply_volts = supply.number("volts", limit=ranges.SUPPLY_VOLTS)
        supply_ohms = supply.number("source_ohms", 0.05, limit=ranges.SOURCE_OHMS)
        supply.finish()

    drive = _Table(path, "drive", data["drive"])
    drive_volts = drive.number(
        "volts", limit=ranges.DRIVE_VOLTS, hint=" (square-wave high level or AC peak)"
    )
    drive_low = drive.number("low_volts", 0.0, limit=ranges.DRIVE_LOW_VOLTS)
    if drive_low >= drive_volts:
        drive.fail("low_volts", f"is {drive_low:g}, expected below volts ({drive_volts:g})")
    frequency = drive.number("frequency_hz", limit=ranges.FREQUENCY_HZ)
    drive_ohms = drive.number(
        "source_ohms", limit=ranges.SOURCE_OHMS, hint=" (driver output resistance)"
    )
    waveform = drive.text("waveform", kind.waveforms[0], choices=WAVEFORMS)
    if waveform not in kind.waveforms:
        drive.fail(
            "waveform",
            f"{waveform} drive is not for {topology} ({', '.join(kind.waveforms)} only); "
            "a charge pump is clocked square",
        )
    edge = drive.number("edge_fraction", 0.01, limit=ranges.EDGE_FRACTION)
    drive_tol = drive.number("tolerance", 0.02, limit=ranges.DRIVE_TOLERANCE)
    drive.finish()

    diode = _diode(_Table(path, "diode", data["diode"]), thermal)
    cap_table = _Table(path, "capacitor", data["capacitor"])
    stray = cap_table.number(
        "stray_farads", 0.0, limit=ranges.STRAY_FARADS, hint=" (farads per node)"
    )
    capacitor = _capacitor(cap_table)

    load = _Table(path, "load", data["load"])
    if load.has("ohms") and load.has("amps"):
        load.fail("amps", "given together with ohms: a load is either ohms or amps")
    load_ohms = load.number("ohms", required=False, limit=ranges.LOAD_OHMS)
    load_amps = load.number("amps", required=False, limit=ranges.LOAD_AMPS)
    if load_ohms is None and load_amps is None:
        load.fail("ohms", "is missing: add `ohms = <resistance>` or `amps = <constant current>`")
    load.finish()

    bleeder_ohms = None
    if "bleeder" in data:
        bleeder = _Table(path, "bleeder", data["bleeder"])
        bleeder_ohms = bleeder.number(
            "ohms", limit=ranges.BLEEDER_OHMS, hint=" (resistor across the output)"
        )
        bleeder.finish()

    meter = _Table(path, "meter", data.get("meter", {}))
    meter_ohms = meter.number("input_ohms", 10e6, limit=ranges.METER_OHMS)
    meter_percent = meter.number("accuracy_percent", 0.5, limit=ranges.METER_PERCENT)
    meter_volts = meter.number("accuracy_volts", 0.01, limit=ranges.METER_VOLTS)
    meter_range = meter.number(
        "range_volts",
        required=False,
        limit=ranges.METER_RANGE_VOLTS,
        hint=" (the highest |V| it shows, or omit)",
    )
    instruments = _instruments(meter, _Table(path, "scope", data.get("scope", {})))
    test_loads = _test_loads(path, data.get("test_loads"))
    efforts = _efforts(path, data.get("efforts"))

    designators = _string_map(path, "designators", data.get("designators", {}))
    labels = _string_map(path, "labels", data.get("labels", {}))
    diode_over: dict[str, DiodeSpec] = {}
    cap_over: dict[str, CapacitorSpec] = {}
    overrides = data.get("overrides", {})
    if not isinstance(overrides, dict):
        raise ProfileError(f"{path}: [overrides] expected tables like [overrides.C4]")
    for ref, table in overrides.items():
        t = _Table(path, f"overrides.{ref}", table)
        if ref.startswith("D"):
            diode_over[ref] = _diode(t, thermal, diode)
        elif ref.startswith("C"):
            cap_over[ref] = _capacitor(t, capacitor)
        else:
            t.fail(ref, "expected a default designator such as D3 or C4")

    profile = Profile(
        path=path,
        name=name,
        description=description,
        topology=topology,
        polarity=polarity,
        stages=stages,
        supply_volts=supply_volts,
        supply_ohms=supply_ohms,
        drive_volts=drive_volts,
        drive_low_volts=drive_low,
        frequency_hz=frequency,
        drive_ohms=drive_ohms,
        waveform=waveform,
        edge_fraction=edge,
        diode=diode,
        capacitor=capacitor,
        load_ohms=load_ohms,
        load_amps=load_amps,
        bleeder_ohms=bleeder_ohms,
        meter_ohms=meter_ohms,
        meter_percent=meter_percent,
        meter_volts=meter_volts,
        temperature_c=temperature_c,
        safe_volts=safe_volts,
        stray_farads=stray,
        drive_tolerance=drive_tol,
        diode_overrides=diode_over,
        capacitor_overrides=cap_over,
        designators=designators,
        labels=labels,
        digest=digest,
        meter_range_volts=meter_range,
        instruments=instruments,
        test_loads=test_loads,
        efforts=efforts,
    )
    _check_names(profile)
    return profile


def _check_names(profile: Profile) -> None:
    """Designators and labels name one part or node each: every key on the board, no name
    meaning two things (a fault spec or a readings file would silently pick one)."""
    where = profile.path
    defaults = default_designators(profile)
    refs = set(defaults)
    for ref in [*profile.designators, *profile.diode_overrides, *profile.capacitor_overrides]:
        if ref not in refs:
            raise ProfileError(
                f"{where}: designator {shown(ref)} is not on this board "
                f"(it has {', '.join(sorted(refs, key=_ref_key))})"
            )
    shown_as = {ref: profile.designators.get(ref, ref) for ref in defaults}
    seen: dict[str, str] = {}
    for ref in defaults:
        name = shown_as[ref]
        if name.lower() in BOARD_TARGET_WORDS:
            key = f"[designators.{ref}]" if ref in profile.designators else f"part {ref}"
            raise ProfileError(
                f"{where}: {key} {shown(name)} is a board target's name ({name.lower()}); "
                "choose another designator"
            )
        other = seen.get(name.lower())
        if other is not None:
            renamed, first = (ref, other) if ref in profile.designators else (other, ref)
            what = f"[designators.{first}]" if first in profile.designators else f"part {first}"
            raise ProfileError(
                f"{where}: [designators.{renamed}] {shown(profile.designators[renamed])} is also "
                f"the name of {what}; each part needs its own designator (rename that one too, "
                "or drop this line)"
            )
        seen[name.lower()] = ref
    nodes = default_nodes(profile)
    labelled: dict[str, str] = {}
    for node, label in profile.labels.items():
        if node not in nodes:
            raise ProfileError(
                f"{where}: [labels] node {shown(node)} is not on this board "
                f"(nodes: {', '.join(nodes)})"
            )
        clash = next((n for n in nodes if n.lower() == label.lower() and n != node), None)
        if clash is not None:
            raise ProfileError(
                f"{where}: [labels.{node}] {shown(label)} is the name of node {clash}; a "
                "readings file naming it would mean either node: choose another label"
            )
        if label.lower() in labelled:
            raise ProfileError(
                f"{where}: [labels.{node}] {shown(label)} is also the label of "
                f"{labelled[label.lower()]}; each test point needs its own label"
            )
        labelled[label.lower()] = node


def _ref_key(ref: str) -> tuple[str, int]:
    return ref[0], int(ref[1:]) if ref[1:].isdigit() else 0
