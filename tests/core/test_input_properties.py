"""For any input, the profile loader and the fault-spec parser return a valid value or raise the
tool's own error, and nothing they accept crashes a computation later (Hypothesis).

The inputs are open-ended (anything a TOML file or a command line can hold), so these are
properties over generated input rather than tables: mutations of a valid profile with values of
every TOML type, raw bytes, and fault specs built from real and garbage pieces.
"""

import copy
import dataclasses
import math

import pytest
from hypothesis import HealthCheck, event, given, settings
from hypothesis import strategies as st

from fieldtool.core.circuit import ranges
from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.netlist import build_circuit, default_designators
from fieldtool.core.circuit.profile import load_profile_bytes, profile_from_dict
from fieldtool.core.circuit.spec import CapacitorSpec, DiodeSpec, Profile, display_name
from fieldtool.core.diagnosis.faults import MODES, catalog, parse_fault
from fieldtool.core.errors import FieldtoolError, InputError, ProfileError
from tests.conftest import BASE, PROFILES

# Every key a profile may hold, by section (the loader refuses others).
KEYS = {
    "board": ["name", "description", "topology", "polarity", "stages", "temperature_c"]
    + ["safe_volts"],
    "supply": ["volts", "source_ohms"],
    "drive": ["volts", "low_volts", "frequency_hz", "source_ohms", "waveform", "edge_fraction"]
    + ["tolerance"],
    "diode": ["saturation_current_a", "emission_coefficient", "series_ohms", "leakage_ohms"]
    + ["family", "forward_volts", "forward_amps"],
    "capacitor": ["farads", "tolerance", "esr_ohms", "leakage_ohms", "stray_farads"]
    + ["dielectric"],
    "load": ["ohms", "amps"],
    "bleeder": ["ohms"],
    "meter": ["input_ohms", "accuracy_percent", "accuracy_volts", "range_volts"],
    "labels": ["S0", "S1", "S2", "S3", "P1", "OUT"],
    "designators": ["D1", "D2", "D5", "D6", "C1", "C4"],
}

# Half the values are plausible for many keys, so accepted profiles are explored too.
plausible_values = st.one_of(
    st.floats(1e-3, 2e3),
    st.sampled_from([1e-6, 1e-9, 1e-12, 0.05, 0.2, 1.5, 1e7, "S5", "HV", "CR9"]),
)
toml_values = plausible_values | st.one_of(
    st.floats(allow_nan=True, allow_infinity=True),
    st.sampled_from([0.0, -0.0, 1e300, -1e300, 5e-324, 1e-300, 1e-11, 1e15, 1e18]),
    st.integers(-(10**400), 10**400),
    st.integers(-5, 50),
    st.text(max_size=30),
    st.sampled_from(["D6", "d6", "S1", "TP1", "drive", "x" * 500, "NUL", "a:b", "café"]),
    st.booleans(),
    st.lists(st.integers(), max_size=3),
    st.dictionaries(st.text(max_size=4), st.integers(), max_size=2),
)

mutations = st.lists(
    st.sampled_from([(s, k) for s, keys in KEYS.items() for k in keys]).flatmap(
        lambda sk: st.tuples(st.just(sk[0]), st.just(sk[1]), toml_values)
    ),
    min_size=1,
    max_size=3,
)


def _mutated(changes) -> dict:
    data = copy.deepcopy(BASE)
    for section, key, value in changes:
        table = data.setdefault(section, {})
        table[key] = value
    return data


def _floats(obj) -> list[float]:
    """Every float held by a profile, its part specs and overrides."""
    found = []
    for f in dataclasses.fields(obj):
        value = getattr(obj, f.name)
        if isinstance(value, float):
            found.append(value)
        elif isinstance(value, DiodeSpec | CapacitorSpec):
            found += _floats(value)
        elif isinstance(value, dict):
            for v in value.values():
                if isinstance(v, DiodeSpec | CapacitorSpec):
                    found += _floats(v)
    return found


def _check_accepted(profile: Profile) -> None:
    """What an accepted profile promises the rest of the tool."""
    assert all(math.isfinite(x) for x in _floats(profile))
    assert ranges.SUPPLY_VOLTS.contains(profile.supply_volts)
    assert ranges.DRIVE_VOLTS.contains(profile.drive_volts)
    assert ranges.FARADS.contains(profile.capacitor.farads)
    assert ranges.SATURATION_CURRENT_A.contains(profile.diode.saturation_current_a)
    shown = [display_name(profile, r).lower() for r in default_designators(profile)]
    assert len(shown) == len(set(shown)), "two parts share a name"
    labels = [label.lower() for label in profile.labels.values()]
    assert len(labels) == len(set(labels)), "two test points share a label"
    circuit, params = build_circuit(profile)
    for hyp in catalog(profile, circuit):
        for fault in hyp.faults():
            if fault is not None:
                assert parse_fault(fault.spec(profile), profile).key == fault.key


@settings(max_examples=600, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(mutations)
def test_profile_loader_accepts_only_what_the_tool_can_use(changes):
    try:
        profile = profile_from_dict(_mutated(changes), "<fuzz>")
    except ProfileError as exc:
        assert str(exc).startswith("<fuzz>: ")
        assert "\n" not in str(exc) and len(str(exc)) < 600
        event("refused")
        return
    event("accepted")
    _check_accepted(profile)


@settings(max_examples=200, deadline=None)
@given(
    st.sampled_from(PROFILES),
    st.integers(0, 4000),
    st.binary(max_size=40) | st.text(max_size=40).map(lambda t: t.encode("utf-8")),
)
def test_profile_bytes_cut_or_spliced_load_or_refuse(path, at, junk):
    raw = path.read_bytes()
    at %= len(raw) + 1
    for candidate in (raw[:at], raw[:at] + junk + raw[at:], junk):
        try:
            profile = load_profile_bytes(candidate, "fuzz.toml")
        except ProfileError as exc:
            assert str(exc).startswith("fuzz.toml: ")
            continue
        _check_accepted(profile)


# --- fault specs ---------------------------------------------------------------------------

BOARD = profile_from_dict(
    {**copy.deepcopy(BASE), "designators": {"D3": "CR103"}, "labels": {"S3": "HV"}}, "<board>"
)
targets = st.sampled_from(["D1", "d5", "CR103", "C4", "c6", "drive", "SUPPLY", "load", "D99"])
modes = st.sampled_from(sorted({m.name for m in MODES}) + ["OPEN", "", "bogus"])
severities = st.one_of(
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-(10**30), 10**30).map(str),
    st.sampled_from(["47k", "2.2MΩ", "30%", "0.3", "1e300", "1e-300", "nan", "-inf", "0", "3x"]),
    st.text(max_size=12),
    st.just("9" * 5000),
)


@settings(max_examples=400, deadline=None)
@given(targets, modes, st.none() | severities, st.sampled_from([":", "", "::", " : "]))
def test_fault_spec_parser_accepts_only_usable_faults(target, mode, severity, colon):
    spec = f"{target}{colon}{mode}" + ("" if severity is None else f"={severity}")
    try:
        fault = parse_fault(spec, BOARD)
    except InputError as exc:
        assert "\n" not in str(exc) and len(str(exc)) < 600
        return
    m = next(m for m in MODES if m.name == fault.mode and m.available(BOARD))
    if fault.severity is not None:
        assert m.severity_problem(fault.severity) is None
        assert m.severity_range.contains(fault.severity)
    again = parse_fault(fault.spec(BOARD), BOARD)  # written back to six figures
    assert again.key == fault.key
    if fault.severity is not None:
        assert again.severity == pytest.approx(fault.severity, rel=1e-5)


@settings(max_examples=400, deadline=None)
@given(st.text(max_size=60))
def test_fault_spec_parser_on_any_text(text):
    try:
        parse_fault(text, BOARD)
    except InputError:
        pass


# --- accepted values do not crash a computation ------------------------------------------------

extreme_boards = st.fixed_dictionaries(
    {
        "stages": st.integers(1, 3),
        "volts": st.sampled_from([0.5, 5.0, 1500.0]),
        "frequency_hz": st.sampled_from([1.0, 50.0, 1e4, 9.99e8]),
        "farads": st.sampled_from([1e-11, 1e-8, 4.7e-6, 1.0]),
        "load": st.sampled_from([{"ohms": 1.0}, {"ohms": 1e15}, {"amps": 0.0}, {"amps": 10.0}]),
        "source_ohms": st.sampled_from([1e-3, 1.0, 1e6]),
        "meter_ohms": st.sampled_from([1e3, 1e16]),
    }
)


@settings(max_examples=12, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(extreme_boards, st.data())
def test_any_accepted_profile_and_fault_solve_or_say_why(b, data):
    """Boards at the corners of every range: the solver returns finite numbers or a
    SolverError (the tool's own error), never a traceback or a warning (warnings are errors
    here), and so does one of the board's faults drawn at random."""
    load = {"ohms": None, "amps": None, **b["load"]}
    profile = profile_from_dict(_board_dict(b, load), "<corner>")
    circuit, _ = build_circuit(profile)
    hyps = [h for h in catalog(profile, circuit) if h.target is not None]
    fault = data.draw(st.sampled_from([None, *[f for h in hyps for f in h.faults()]]))
    try:
        e = expect(profile, fault=fault)
    except FieldtoolError:
        return
    numbers = [n.volts for n in e.nodes] + [e.output_volts, e.stored_energy_j]
    assert all(math.isfinite(x) for x in numbers)


def _board_dict(b, load) -> dict:
    data = copy.deepcopy(BASE)
    data["board"]["stages"] = b["stages"]
    data["supply"] = {"volts": b["volts"], "source_ohms": b["source_ohms"]}
    data["drive"] = {
        "volts": b["volts"],
        "frequency_hz": b["frequency_hz"],
        "source_ohms": b["source_ohms"],
    }
    data["capacitor"]["farads"] = b["farads"]
    data["load"] = {k: v for k, v in load.items() if v is not None}
    data["meter"] = {"input_ohms": b["meter_ohms"]}
    return data
