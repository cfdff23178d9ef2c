"""The fault catalog: spec strings, what each mode does to the netlist, severity grids."""

import math

import numpy as np
import pytest

from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.diagnosis.faults import (
    Fault,
    apply_fault,
    catalog,
    describe,
    parse_fault,
)
from fieldtool.core.diagnosis.modes.capacitor_open import OPEN_FARADS
from fieldtool.core.diagnosis.modes.diode_open import OPEN_OHMS
from fieldtool.core.diagnosis.modes.diode_short import SHORT_OHMS
from fieldtool.core.errors import InputError
from fieldtool.core.units import format_si, parse_si
from tests.conftest import make_profile

PROFILE = make_profile(designators={"D3": "CR103"})
AC = make_profile(board={"topology": "ac-ladder"}, supply=None, drive={"volts": 10.0})


@pytest.mark.parametrize(
    "spec, fault",
    [
        ("D5:open", Fault("D5", "open")),
        ("C4:short", Fault("C4", "short")),
        ("c4:SHORT", Fault("C4", "short")),
        ("D5:short=50m", Fault("D5", "short", 0.05)),
        ("C4:short=20mΩ", Fault("C4", "short", 0.02)),
        (" C3:lowcap=0.3 ", Fault("C3", "lowcap", 0.3)),
        ("C3:lowcap=30%", Fault("C3", "lowcap", 0.3)),
        ("D2:leaky=47k", Fault("D2", "leaky", 47e3)),
        ("D2:leaky=2.2MΩ", Fault("D2", "leaky", 2.2e6)),
        ("D6:weak=220ohm", Fault("D6", "weak", 220.0)),
        ("C6:esr=1.5", Fault("C6", "esr", 1.5)),
        ("CR103:open", Fault("D3", "open")),
        ("D3:open", Fault("D3", "open")),
        ("drive:stuck-low", Fault("drive", "stuck-low")),
        ("DRIVE:stuck-high", Fault("drive", "stuck-high")),
        ("drive:low=0.7", Fault("drive", "low", 0.7)),
        ("supply:low=0.8", Fault("supply", "low", 0.8)),
        ("load:heavy=3", Fault("load", "heavy", 3.0)),
    ],
)
def test_specs_parse(spec, fault):
    assert parse_fault(spec, PROFILE) == fault


@pytest.mark.parametrize(
    "spec, message",
    [
        ("D5", "has no ':'"),
        ("D9:open", "fault target 'D9' is not on this board; parts: D1, D2, CR103"),
        ("D5:opne", "diode D5 has no fault mode 'opne'; its modes here: open, short, leaky, weak"),
        ("C1:weak=10", "capacitor C1 has no fault mode 'weak'"),
        ("D1:open=3", "mode open takes no severity"),
        ("C3:lowcap", "mode lowcap needs a severity as a fraction, e.g. C3:lowcap=0.3"),
        ("supply:low", "mode low needs a severity as a fraction, e.g. supply:low=0.3"),
        ("D2:leaky", "mode leaky needs a severity in ohms, e.g. D2:leaky="),
        ("C3:lowcap=1.5", "lowcap severity is 1.5, expected 0.001 or more and below 1"),
        ("C3:lowcap=1e-9", "below 0.001 it is gone: write open"),
        ("C3:lowcap=abc", "severity 'abc' is not a number"),
        ("D2:leaky=-5", "leaky severity is -5, expected above 100 Ω and at most 1e+18 Ω"),
        ("D2:leaky=47", "at 100 Ω or less a part is shorted: use short"),
        ("D5:short=0", "short severity is 0, expected 100 µΩ to 100 Ω"),
        ("C4:short=47k", "above 100 Ω a part leaks rather than shorts: use leaky"),
        ("C4:esr=1e300", "esr severity is 1e+300, expected 1 mΩ to 1 TΩ"),
        ("D4:weak=0", "weak severity is 0, expected 1 mΩ to 1 TΩ"),
        ("load:heavy=0.5", "heavy severity is 0.5, expected above 1× and at most 1000×"),
        ("load:heavy=1e6", "a thousand times the rated load is a short"),
        # Board targets read as "the drive", never "drive drive"; an unavailable mode says why.
        (
            "drive:missing",
            "the drive cannot be 'missing' on this board (the drive here is a square clock: "
            "try stuck-low or stuck-high); its modes here: stuck-low, stuck-high, low",
        ),
        ("drive:bogus", "the drive has no fault mode 'bogus'; its modes here:"),
        # A pasted wall of text is echoed cut short, with its length.
        ("D5:open=" + "9" * 100_000, "… (100008 characters)"),
    ],
)
def test_bad_specs_are_refused_with_what_and_how(spec, message):
    with pytest.raises(InputError) as err:
        parse_fault(spec, PROFILE)
    assert message in str(err.value)


def test_ac_ladder_has_missing_drive_and_no_supply():
    assert parse_fault("drive:missing", AC) == Fault("drive", "missing")
    with pytest.raises(InputError, match="stuck-low"):
        parse_fault("drive:stuck-low", AC)
    with pytest.raises(InputError) as err:
        parse_fault("supply:low=0.5", AC)
    assert str(err.value) == (
        "fault 'supply:low=0.5': the supply cannot be 'low' on this board (this board has no DC "
        "input); it has no fault modes on this board"
    )


def test_a_hypothesis_that_cannot_differ_from_healthy_is_left_out():
    """A fraction of 0 V is 0 V, and a heavier 0 A load draws nothing: such faults would leave
    every node as healthy, so they are neither ranked nor accepted in a spec."""
    zero_supply = make_profile(board={"polarity": "negative"}, supply={"volts": 0.0})
    no_load = make_profile(load={"ohms": None, "amps": 0.0})
    for profile, key, spec in (
        (zero_supply, "supply:low", "supply:low=0.5"),
        (no_load, "load:heavy", "load:heavy=3"),
    ):
        circuit, _ = build_circuit(profile)
        assert key not in {h.key for h in catalog(profile, circuit)}
        with pytest.raises(InputError, match="would change nothing"):
            parse_fault(spec, profile)
    circuit, _ = build_circuit(PROFILE)
    assert {"supply:low", "load:heavy"} <= {h.key for h in catalog(PROFILE, circuit)}


@pytest.mark.parametrize(
    "fault, spec",
    [
        # A fraction reads as a fraction, never in milli (0.3, not 300m); ohms keep SI prefixes.
        (Fault("C3", "lowcap", 0.3), "C3:lowcap=0.3"),
        (Fault("drive", "low", 0.75), "drive:low=0.75"),
        (Fault("load", "heavy", 3.0), "load:heavy=3"),
        (Fault("D2", "leaky", 47e3), "D2:leaky=47k"),
        (Fault("C6", "esr", 0.22), "C6:esr=220m"),
    ],
)
def test_specs_are_written_back_as_a_technician_writes_them(fault, spec):
    assert fault.spec(PROFILE) == spec
    assert parse_fault(spec, PROFILE) == fault


def test_grids_stay_inside_the_severities_a_spec_accepts():
    """An extreme board (1 Ω load: leak grid 0.1 Ω; 1 Hz and 10 pF: series grid 5e12 Ω) keeps
    every grid point inside what ``parse_fault`` would take."""
    extreme = make_profile(
        drive={"frequency_hz": 1.0}, capacitor={"farads": 1e-11}, load={"ohms": 1.0}
    )
    circuit, _ = build_circuit(extreme)
    for hyp in catalog(extreme, circuit):
        for fault in hyp.faults():
            if fault is not None and fault.severity is not None:
                assert parse_fault(fault.spec(extreme), extreme).mode == fault.mode


@pytest.mark.parametrize(
    "text, value",
    [
        ("47k", 47e3),
        ("2.2M", 2.2e6),
        ("220m", 0.22),
        ("1e-3", 1e-3),
        ("15%", 0.15),
        ("3 ohms", 3.0),
    ],
)
def test_si_numbers(text, value):
    assert parse_si(text) == pytest.approx(value)
    assert parse_si(format_si(value)) == pytest.approx(value, rel=1e-3)


def _changed(before, after) -> dict:
    out = {}
    for name in before.__dataclass_fields__:
        a, b = getattr(before, name), getattr(after, name)
        idx = np.argwhere(~np.isclose(a, b, rtol=0, atol=0))
        if len(idx):
            out[name] = [tuple(i) for i in idx]
    return out


def test_each_mode_changes_exactly_its_part():
    circuit, nominal = build_circuit(PROFILE)
    d5, c4 = circuit.diode_refs.index("D5"), circuit.cap_refs.index("C4")
    cases = {
        "D5:open": ({"d_rs": [(0, d5)]}, lambda p: p.d_rs[0, d5] == OPEN_OHMS),
        "D5:short": ({"d_gp": [(0, d5)]}, lambda p: p.d_gp[0, d5] == 1 / SHORT_OHMS),
        "D5:short=40m": ({"d_gp": [(0, d5)]}, lambda p: math.isclose(p.d_gp[0, d5], 25.0)),
        "D5:leaky=10k": ({"d_gp": [(0, d5)]}, lambda p: math.isclose(p.d_gp[0, d5], 1e-4 + 1e-12)),
        "D5:weak=100": ({"d_rs": [(0, d5)]}, lambda p: math.isclose(p.d_rs[0, d5], 100.568)),
        "C4:open": ({"c_f": [(0, c4)]}, lambda p: p.c_f[0, c4] == OPEN_FARADS),
        "C4:short": ({"c_gl": [(0, c4)]}, lambda p: p.c_gl[0, c4] == 1 / SHORT_OHMS),
        "C4:lowcap=0.25": ({"c_f": [(0, c4)]}, lambda p: math.isclose(p.c_f[0, c4], 4.7e-6 / 4)),
        "C4:esr=7": ({"c_esr": [(0, c4)]}, lambda p: p.c_esr[0, c4] == 7.0),
    }
    for spec, (where, check) in cases.items():
        after = apply_fault(circuit, nominal, parse_fault(spec, PROFILE), PROFILE)
        assert _changed(nominal, after) == where, spec
        assert check(after), spec


def test_board_level_modes():
    circuit, nominal = build_circuit(PROFILE)
    kinds = [s.kind for s in circuit.sources]
    drive, supply = kinds.index("square"), kinds.index("dc")
    stuck = apply_fault(circuit, nominal, Fault("drive", "stuck-low"), PROFILE)
    assert stuck.s_high[0, drive] == stuck.s_low[0, drive] == 0.0
    high = apply_fault(circuit, nominal, Fault("drive", "stuck-high"), PROFILE)
    assert high.s_low[0, drive] == high.s_high[0, drive] == 5.0
    low = apply_fault(circuit, nominal, Fault("supply", "low", 0.6), PROFILE)
    assert low.s_high[0, supply] == pytest.approx(3.0)
    heavy = apply_fault(circuit, nominal, Fault("load", "heavy", 3.0), PROFILE)
    o = circuit.output_node - 1
    assert heavy.g_shunt[0, o] == pytest.approx(3.0 / 22000.0)


def test_catalog_covers_every_part_and_mode():
    circuit, _ = build_circuit(PROFILE)
    hyps = catalog(PROFILE, circuit)
    keys = [h.key for h in hyps]
    assert keys[0] == "healthy"
    assert len(keys) == len(set(keys))
    for ref in circuit.diode_refs:
        assert {f"{ref}:{m}" for m in ("open", "short", "leaky", "weak")} <= set(keys)
    for ref in circuit.cap_refs:
        assert {f"{ref}:{m}" for m in ("open", "short", "lowcap", "esr", "leaky")} <= set(keys)
    graded = {h.key: h.severities for h in hyps}
    # Leak grid scaled to the 22 kΩ load; series grids to 1/(f·C) = 21.3 Ω.
    assert graded["D1:leaky"] == pytest.approx((220e3, 22e3, 2.2e3))
    assert graded["C1:esr"][0] == pytest.approx(0.5 / (1e4 * 4.7e-6))
    # Shorts as a range, mild to gross, 10 Ω down to 10 mΩ.
    for key in ("D1:short", "C1:short"):
        assert graded[key][0] == 10.0 and graded[key][-1] == 0.01
        assert all(a > b for a, b in zip(graded[key], graded[key][1:], strict=False))


def test_words_use_board_designators():
    assert describe(parse_fault("CR103:open", PROFILE), PROFILE) == "CR103 open"
    assert describe(Fault("C2", "lowcap", 0.3), PROFILE) == "C2 lost capacitance (30% left)"
    assert describe(Fault("D1", "leaky", 47e3), PROFILE) == "D1 leaky (reverse leakage) (47kΩ)"
    assert Fault("D3", "weak", 220.0).spec(PROFILE) == "CR103:weak=220"
    assert describe(Fault("C4", "short"), PROFILE) == "C4 shorted"
    assert describe(Fault("C4", "short", 0.03), PROFILE) == "C4 shorted (30mΩ)"
    assert Fault("D5", "short", 0.05).spec(PROFILE) == "D5:short=50m"
