"""Guided diagnosis of faults simulated in ngspice (a general-purpose SPICE simulator).

For each case a part of a small board is opened, shorted or robbed of capacitance *in the SPICE
text* (``tests.ngspice_probe``: the part's lines deleted, a 1 Ω resistor across it, its
capacitance scaled; independent of ``fieldtool.core.diagnosis.faults``), and the technician's
loop is played: ``diagnose()`` on the readings so far names the next node; ngspice gives that
node's settled reading with the meter's input resistance on it (one run per probed node, from
the ideal-formula charge, settling checked by Aitken extrapolation as in the solver
cross-check); until the diagnosis needs no more probes or eight nodes are read. The injected
fault must then be the top suspect, or sit in an ambiguity group reported together with the top
suspect (the readings honestly cannot split them), and the readings must not be flagged as
fitting nothing. Fault dictionaries and simulate-before-test diagnosis: Bandler & Salama, Proc.
IEEE 73(8), 1985; tolerance-band ambiguity sets: Hochwald & Bastian, IEEE Trans. Circuits Syst.
26(7), 1979 (both from memory). Next probe by information gain: de Kleer & Williams, Artificial
Intelligence 32(1), 1987.

Why these boards: three stages at 10 kHz with 47 nF capacitors, a 100 kΩ load and a 100 kΩ
meter. A node left floating by an open diode relaxes only through the meter, the load and
leakage, with τ = R·C, i.e. R·C·f periods: here about 47 periods per capacitor, so every
reading settles within 800 periods (0.1–0.5 s of ngspice), where a 10 MΩ meter on microfarad
capacitors would need about 10⁵ periods a reading. The meter still pulls healthy nodes by
3–10 % here, so what is checked includes the dictionary's meter-in-place readings, not only
its unloaded ones. The AC-fed ladder is left out of this file: its dictionary alone takes about
30 s to build cold (a sine drive is integrated at 200 steps a period), beyond the file's CI
budget of about a minute.
"""

from __future__ import annotations

import pytest

from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.ranking import diagnose
from fieldtool.core.measurement import Measurement
from tests.conftest import make_profile, needs_ngspice
from tests.ngspice_probe import SpiceFault, metered_reading
from tests.readings import dc

MAX_PROBES = 8
SMALL = dict(
    capacitor={"farads": 47e-9, "esr_ohms": 0.05},
    load={"ohms": 100e3},
    meter={"input_ohms": 100e3},
)
BOARDS = {
    "dc-ladder": make_profile(board={"name": "ngspice-dc-ladder"}, **SMALL),
    "dickson": make_profile(board={"name": "ngspice-dickson", "topology": "dickson"}, **SMALL),
    # A stiff driver (1 Ω), microfarad capacitors and a 10 kΩ load: a short of tens of
    # milliohms reads differently from one of an ohm, so shorts are a range of resistances in
    # the dictionary. (With a single 1 Ω short, D1, C1 and C2 shorted at 30 mΩ were ranked as
    # other faults on this board.) Its shorted variants approach their steady state slowly at
    # first, so each ngspice reading runs at least 1600 periods; faults that leave nodes
    # floating (C1, C2 shorted) are left out: behind a 10 MΩ meter on 10 µF they drift for
    # minutes (τ = R·C), beyond any ngspice run here.
    "dc-ladder-stiff": make_profile(
        board={"name": "ngspice-dc-ladder-stiff", "stages": 4},
        drive={"source_ohms": 1.0},
        capacitor={"farads": 10e-6, "esr_ohms": 0.02},
        load={"ohms": 10e3},
    ),
}

MIN_PERIODS = {"dc-ladder-stiff": 1600}  # each ngspice reading runs at least this long

# (board, part, mode, severity: the capacitance left, or a short's ohms): open and short of
# each part class, and lost capacitance, in two topologies. Dc-ladder stage k: D(2k-1) in,
# D(2k) out, C(2k-1) flying, C(2k) reservoir. Dickson: D1..D4 in a chain, C1..C3 pump
# capacitors, C4 output capacitor.
CASES = [
    ("dc-ladder", "D2", "open", 1.0),
    ("dc-ladder", "D3", "open", 1.0),
    ("dc-ladder", "D6", "open", 1.0),
    ("dc-ladder", "D4", "short", 1.0),
    ("dc-ladder", "D5", "short", 1.0),
    ("dc-ladder", "C3", "open", 1.0),
    ("dc-ladder", "C4", "short", 1.0),
    ("dc-ladder", "C5", "short", 1.0),
    ("dc-ladder", "C5", "lowcap", 0.1),
    ("dc-ladder", "C2", "lowcap", 0.1),
    ("dickson", "D2", "open", 1.0),
    ("dickson", "D4", "open", 1.0),
    ("dickson", "D1", "short", 1.0),
    ("dickson", "D3", "short", 1.0),
    ("dickson", "C2", "open", 1.0),
    ("dickson", "C3", "open", 1.0),
    ("dickson", "C2", "short", 1.0),
    ("dickson", "C4", "short", 1.0),
    ("dickson", "C2", "lowcap", 0.1),
    # Shorts well below the driver's 1 Ω (the value in the last column, ohms).
    ("dc-ladder-stiff", "D1", "short", 0.03),
    ("dc-ladder-stiff", "C8", "short", 0.02),
]


def _case_id(board, ref, mode, severity):
    return f"{board}-{ref}-{mode}" + (f"={severity:g}" if severity != 1.0 else "")


@pytest.fixture(scope="module")
def dictionaries(dictionary_cache):
    """Each test board's fault dictionary, built once per session (shared cache folder)."""
    return {name: load_or_build(p, dictionary_cache) for name, p in BOARDS.items()}


@needs_ngspice
@pytest.mark.parametrize(
    "board, ref, mode, severity", CASES, ids=[_case_id(*getattr(c, "values", c)) for c in CASES]
)
def test_guided_probing_finds_the_ngspice_fault(board, ref, mode, severity, dictionaries, tmp_path):
    profile = BOARDS[board]
    d = dictionaries[board]
    circuit, params = build_circuit(profile)
    if mode == "short":
        fault = SpiceFault(ref, mode, ohms=severity)
    else:
        fault = SpiceFault(ref, mode, fraction=severity)
    readings: list[Measurement] = []
    result = diagnose(d, readings)
    while result.next_probe is not None and len(readings) < MAX_PROBES:
        node = result.next_probe
        assert node not in {r.at for r in readings}, f"{node} suggested twice"
        got = metered_reading(
            circuit, params, node, profile.meter_ohms, tmp_path, fault, MIN_PERIODS.get(board, 200)
        )
        readings.append(dc(node, got.volts))
        result = diagnose(d, readings)

    injected = f"{ref}:{mode}"
    top = result.top.key
    trail = ", ".join(f"{r.at}={r.value:.3f} V" for r in readings)
    ranked = ", ".join(f"{s.key} {s.probability:.2f}" for s in result.suspects[:4])
    where = f"readings {trail}; ranked {ranked}; groups {[a.members for a in result.ambiguity]}"
    assert readings, "the diagnosis asked for no reading at all"
    # Honest ambiguity: faults the readings taken cannot split are reported as a group
    # (tolerance-band ambiguity sets, Hochwald & Bastian 1979, from memory).
    with_top = [a.members for a in result.ambiguity if top in a.members]
    assert top == injected or any(injected in g for g in with_top), (
        f"{injected} is neither the top suspect nor ambiguous with it: {where}"
    )
    # Real single-fault readings must not be rejected by the χ² goodness-of-fit test.
    assert not result.fit.no_fit, f"readings flagged as fitting nothing: {result.fit.text}; {where}"
    # The suspects are every hypothesis, sorted, with probabilities summing to 1 (Bayes' rule).
    probs = [s.probability for s in result.suspects]
    assert probs == sorted(probs, reverse=True)
    assert abs(sum(probs) - 1.0) < 1e-9
