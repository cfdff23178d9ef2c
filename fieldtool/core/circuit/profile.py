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
    InstrumentSpec,
    LoadResistor,
    Profile,
)
from fieldtool.core.circuit.topologies import TOPOLOGIES
from fieldtool.core.errors import ProfileError

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
        positive: bool = False,
        minimum: float | None = None,
        below: float | None = None,
        required: bool = True,
        hint: str = "",
    ) -> float | None:
        self.used.add(key)
        if key not in self.data:
            if default is not None or not required:
                return default
            self.fail(key, f"is missing: add `{key} = <number>`{hint}")
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int | float):
            self.fail(key, f"is {value!r} ({type(value).__name__}), expected a number{hint}")
        value = float(value)
        if not math.isfinite(value):
            self.fail(key, f"is {value!r}, expected a finite number{hint}")
        if positive and value <= 0:
            self.fail(key, f"is {value:g}, expected a number greater than 0{hint}")
        if minimum is not None and value < minimum:
            self.fail(key, f"is {value:g}, expected at least {minimum:g}{hint}")
        if below is not None and value >= below:
            self.fail(key, f"is {value:g}, expected less than {below:g}{hint}")
        return value

    def integer(self, key: str, *, minimum: int, maximum: int) -> int:
        self.used.add(key)
        if key not in self.data:
            self.fail(key, f"is missing: add `{key} = <whole number from {minimum} to {maximum}>`")
        value = self.data[key]
        if isinstance(value, bool) or not isinstance(value, int):
            self.fail(key, f"is {value!r}, expected a whole number from {minimum} to {maximum}")
        if not minimum <= value <= maximum:
            self.fail(key, f"is {value}, expected a whole number from {minimum} to {maximum}")
        return int(value)

    def text(self, key: str, default: str | None = None, choices: tuple[str, ...] = ()) -> str:
        self.used.add(key)
        if key not in self.data:
            if default is not None:
                return default
            hint = f" (one of: {', '.join(choices)})" if choices else ""
            self.fail(key, f'is missing: add `{key} = "..."`{hint}')
        value = self.data[key]
        if not isinstance(value, str):
            self.fail(key, f"is {value!r}, expected text in quotes")
        if choices and value not in choices:
            self.fail(key, f"is {value!r}, expected one of: {', '.join(choices)}")
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
        vf = t.number("forward_volts", positive=True, below=5.0)
        i_f = t.number("forward_amps", positive=True, hint=" (the current at forward_volts)")
        n = t.number("emission_coefficient", 1.9, positive=True, below=10.0)
        rs = t.number("series_ohms", 0.0, minimum=0.0)
        vj = vf - i_f * rs
        if vj <= 0:
            t.fail("series_ohms", "drops more than forward_volts at forward_amps: lower it")
        i_s = i_f / math.expm1(vj / (n * thermal_volts))
    else:
        required = base is None
        i_s = t.number(
            "saturation_current_a",
            None if required else base.saturation_current_a,
            positive=True,
            below=1.0,
            hint=" (or give forward_volts and forward_amps)",
        )
        n = t.number(
            "emission_coefficient",
            None if required else base.emission_coefficient,
            positive=True,
            below=10.0,
        )
        rs = t.number("series_ohms", 0.0 if required else base.series_ohms, minimum=0.0)
    leak_default = 1e12 if base is None else 1.0 / base.leakage_siemens
    leak_ohms = t.number("leakage_ohms", leak_default, positive=True)
    family = t.text("family", "general" if base is None else base.family, DIODE_FAMILIES)
    t.finish()
    return DiodeSpec(i_s, n, rs, 1.0 / leak_ohms, family)


def _capacitor(table: _Table, base: CapacitorSpec | None = None) -> CapacitorSpec:
    t = table
    farads = t.number(
        "farads",
        None if base is None else base.farads,
        positive=True,
        below=10.0,
        hint=" (e.g. 4.7e-6 for 4.7 µF)",
    )
    tol = t.number(
        "tolerance",
        None if base is None else base.tolerance,
        minimum=0.0,
        below=1.0,
        hint=" (a fraction: 0.2 means ±20 %)",
    )
    esr = t.number("esr_ohms", 0.0 if base is None else base.esr_ohms, minimum=0.0)
    leak = t.number("leakage_ohms", 1e10 if base is None else base.leakage_ohms, positive=True)
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
    spec = InstrumentSpec(
        ac_input_ohms=m.number("ac_input_ohms", d.ac_input_ohms, positive=True),
        ac_input_farads=m.number("ac_input_farads", d.ac_input_farads, minimum=0.0, below=1e-6),
        ac_bandwidth_hz=m.number("ac_bandwidth_hz", d.ac_bandwidth_hz, positive=True),
        ac_accuracy_percent=m.number(
            "ac_accuracy_percent", d.ac_accuracy_percent, minimum=0.0, below=50.0
        ),
        ac_accuracy_volts=m.number("ac_accuracy_volts", d.ac_accuracy_volts, minimum=0.0),
        burden_ohms=m.number(
            "burden_ohms", d.burden_ohms, minimum=0.0, below=1e6, hint=" (current range shunt)"
        ),
        current_accuracy_percent=m.number(
            "current_accuracy_percent", d.current_accuracy_percent, minimum=0.0, below=50.0
        ),
        current_accuracy_amps=m.number(
            "current_accuracy_amps", d.current_accuracy_amps, minimum=0.0
        ),
        diode_test_amps=m.number(
            "diode_test_amps", d.diode_test_amps, positive=True, below=0.1, hint=" (e.g. 1e-3)"
        ),
        diode_test_volts=m.number(
            "diode_test_volts",
            d.diode_test_volts,
            positive=True,
            below=20.0,
            hint=" (the diode test's open-circuit voltage, e.g. 3.0)",
        ),
        diode_accuracy_percent=m.number(
            "diode_accuracy_percent", d.diode_accuracy_percent, minimum=0.0, below=50.0
        ),
        diode_accuracy_volts=m.number("diode_accuracy_volts", d.diode_accuracy_volts, minimum=0.0),
        diode_settle_s=m.number("diode_settle_s", d.diode_settle_s, positive=True),
        probe_ohms=s.number("probe_ohms", d.probe_ohms, positive=True),
        probe_farads=s.number("probe_farads", d.probe_farads, minimum=0.0, below=1e-6),
        scope_accuracy_percent=s.number(
            "accuracy_percent", d.scope_accuracy_percent, minimum=0.0, below=50.0
        ),
        scope_accuracy_volts=s.number("accuracy_volts", d.scope_accuracy_volts, minimum=0.0),
    )
    m.finish()
    s.finish()
    return spec


MAX_TEST_LOADS = 8


def _test_loads(path: str, data: Any) -> tuple[LoadResistor, ...]:
    """``[test_loads] ohms = [...]`` and optionally ``rated_watts = [...]``, one per load."""
    if data is None:
        return ()
    t = _Table(path, "test_loads", data)
    example = "e.g. `ohms = [10e3, 100e3]`"
    ohms = _number_list(t, "ohms", example)
    if ohms is None:
        t.fail("ohms", f"is missing: list the test load resistances, {example}")
    if not 1 <= len(ohms) <= MAX_TEST_LOADS:
        t.fail("ohms", f"has {len(ohms)} values, expected 1 to {MAX_TEST_LOADS}; {example}")
    if len(set(ohms)) != len(ohms):
        t.fail("ohms", "lists a resistance twice; list each test load once")
    watts = _number_list(t, "rated_watts", "e.g. `rated_watts = [0.25, 0.5]`, one per load")
    if watts is not None and len(watts) != len(ohms):
        t.fail("rated_watts", f"has {len(watts)} values for {len(ohms)} loads: give one per load")
    t.finish()
    rated = watts if watts is not None else [None] * len(ohms)
    return tuple(LoadResistor(o, w) for o, w in zip(ohms, rated, strict=True))


def _number_list(t: _Table, key: str, example: str) -> list[float] | None:
    """A list of positive finite numbers, or None when the key is absent."""
    t.used.add(key)
    if key not in t.data:
        return None
    values = t.data[key]
    if not isinstance(values, list):
        t.fail(key, f"is {values!r}, expected a list of numbers; {example}")
    out = []
    for v in values:
        ok = not isinstance(v, bool) and isinstance(v, int | float)
        if not ok or not math.isfinite(v) or v <= 0:
            t.fail(key, f"holds {v!r}, expected positive numbers only; {example}")
        out.append(float(v))
    return out


def _string_map(path: str, name: str, data: Any) -> dict[str, str]:
    if not isinstance(data, dict) or not all(isinstance(v, str) for v in data.values()):
        raise ProfileError(f'{path}: [{name}] expected a table of names = "text"')
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
        data = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise ProfileError(f"{where}: is not UTF-8 text; save it as UTF-8 TOML") from None
    except tomllib.TOMLDecodeError as exc:
        raise ProfileError(f"{where}: is not valid TOML ({exc}); fix the line it names") from None
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
    description = board.text("description", "")
    topology = board.text("topology", choices=tuple(TOPOLOGIES))
    kind = TOPOLOGIES[topology]
    polarity = board.text("polarity", "positive", choices=POLARITIES)
    stages = board.integer("stages", minimum=1, maximum=40)
    temperature_c = board.number("temperature_c", 25.0, minimum=-60.0, below=200.0)
    safe_volts = board.number("safe_volts", DEFAULT_SAFE_VOLTS, positive=True)
    board.finish()
    if polarity not in kind.polarities:
        board.fail(
            "polarity", f"{polarity} is not supported for {topology} ({kind.words}); use dc-ladder"
        )
    thermal = THERMAL_VOLTS_PER_KELVIN * (temperature_c + 273.15)

    if not kind.dc_input:
        if "supply" in data:
            supply = _Table(path, "supply", data["supply"])
            supply_volts = supply.number("volts", 0.0)
            if supply_volts != 0.0:
                supply.fail("volts", f"must be 0 or absent for {topology} (it has no DC input)")
            supply_ohms = supply.number("source_ohms", 0.05, positive=True)
            supply.finish()
        else:
            supply_volts, supply_ohms = 0.0, 0.05
    else:
        if "supply" not in data:
            raise ProfileError(f"{path}: [supply] section is missing; add `volts = <DC input>`")
        supply = _Table(path, "supply", data["supply"])
        supply_volts = supply.number("volts", minimum=0.0)
        supply_ohms = supply.number("source_ohms", 0.05, positive=True)
        supply.finish()

    drive = _Table(path, "drive", data["drive"])
    drive_volts = drive.number("volts", positive=True, hint=" (square-wave high level or AC peak)")
    drive_low = drive.number("low_volts", 0.0)
    if drive_low >= drive_volts:
        drive.fail("low_volts", f"is {drive_low:g}, expected below volts ({drive_volts:g})")
    frequency = drive.number("frequency_hz", positive=True, below=1e9)
    drive_ohms = drive.number("source_ohms", positive=True, hint=" (driver output resistance)")
    waveform = drive.text("waveform", kind.waveforms[0], choices=WAVEFORMS)
    if waveform not in kind.waveforms:
        drive.fail(
            "waveform",
            f"{waveform} drive is not for {topology} ({', '.join(kind.waveforms)} only); "
            "a charge pump is clocked square",
        )
    edge = drive.number("edge_fraction", 0.01, positive=True, below=0.25)
    drive_tol = drive.number("tolerance", 0.02, minimum=0.0, below=0.5)
    drive.finish()

    diode = _diode(_Table(path, "diode", data["diode"]), thermal)
    cap_table = _Table(path, "capacitor", data["capacitor"])
    stray = cap_table.data.get("stray_farads", 0.0)
    if isinstance(stray, bool) or not isinstance(stray, int | float) or stray < 0:
        cap_table.fail("stray_farads", f"is {stray!r}, expected a number ≥ 0 (farads per node)")
    capacitor = _capacitor(cap_table)

    load = _Table(path, "load", data["load"])
    if load.has("ohms") and load.has("amps"):
        load.fail("amps", "given together with ohms: a load is either ohms or amps")
    load_ohms = load.number("ohms", required=False, positive=True)
    load_amps = load.number("amps", required=False, minimum=0.0)
    if load_ohms is None and load_amps is None:
        load.fail("ohms", "is missing: add `ohms = <resistance>` or `amps = <constant current>`")
    load.finish()

    bleeder_ohms = None
    if "bleeder" in data:
        bleeder = _Table(path, "bleeder", data["bleeder"])
        bleeder_ohms = bleeder.number("ohms", positive=True, hint=" (resistor across the output)")
        bleeder.finish()

    meter = _Table(path, "meter", data.get("meter", {}))
    meter_ohms = meter.number("input_ohms", 10e6, positive=True)
    meter_percent = meter.number("accuracy_percent", 0.5, minimum=0.0, below=50.0)
    meter_volts = meter.number("accuracy_volts", 0.01, minimum=0.0)
    meter_range = meter.number(
        "range_volts", required=False, positive=True, hint=" (the highest |V| it shows, or omit)"
    )
    instruments = _instruments(meter, _Table(path, "scope", data.get("scope", {})))
    test_loads = _test_loads(path, data.get("test_loads"))

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
        stray_farads=float(stray),
        drive_tolerance=drive_tol,
        diode_overrides=diode_over,
        capacitor_overrides=cap_over,
        designators=designators,
        labels=labels,
        digest=digest,
        meter_range_volts=meter_range,
        instruments=instruments,
        test_loads=test_loads,
    )
    _check_names(profile)
    return profile


def _check_names(profile: Profile) -> None:
    refs = set(default_designators(profile))
    for ref in [*profile.designators, *profile.diode_overrides, *profile.capacitor_overrides]:
        if ref not in refs:
            raise ProfileError(
                f"{profile.path}: designator {ref!r} is not on this board "
                f"(it has {', '.join(sorted(refs, key=_ref_key))})"
            )
    nodes = set(default_nodes(profile))
    for node in profile.labels:
        if node not in nodes:
            raise ProfileError(
                f"{profile.path}: [labels] node {node!r} is not on this board "
                f"(nodes: {', '.join(default_nodes(profile))})"
            )


def _ref_key(ref: str) -> tuple[str, int]:
    return ref[0], int(ref[1:]) if ref[1:].isdigit() else 0
