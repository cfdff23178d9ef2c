"""Each registered topology and fault mode keeps the promises the rest of the tool relies on.

Structural checks (no outside reference is needed for them); the circuits themselves are
checked against ngspice in test_ngspice_crosscheck.py and against closed forms in
test_formulas.py, fault by fault in test_faults.py and test_fault_ngspice.py.
"""

import math

import numpy as np
import pytest

from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import profile_from_dict
from fieldtool.core.circuit.solver import initial_state, steady_state
from fieldtool.core.circuit.topologies import TOPOLOGIES
from fieldtool.core.diagnosis.faults import catalog
from fieldtool.core.diagnosis.modes import MODES
from fieldtool.core.errors import ProfileError


def board(topology: str, stages: int = 3, **extra) -> dict:
    data = {
        "board": {"name": f"t-{topology}", "topology": topology, "stages": stages},
        "drive": {"volts": 10.0, "frequency_hz": 10e3, "source_ohms": 2.0},
        "diode": {"saturation_current_a": 2.52e-9, "emission_coefficient": 1.752},
        "capacitor": {"farads": 1e-6, "tolerance": 0.2},
        "load": {"ohms": 1e6},
    }
    if TOPOLOGIES[topology].dc_input:
        data["supply"] = {"volts": 5.0}
    for section, values in extra.items():
        data.setdefault(section, {}).update(values)
    return data


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
@pytest.mark.parametrize("stages", [1, 4])
def test_names_are_unique_and_every_part_is_connected(name, stages):
    topology = TOPOLOGIES[name]
    profile = profile_from_dict(board(name, stages))
    parts = topology.designators(stages)
    nodes = topology.nodes(stages)
    assert len(set(parts)) == len(parts) and len(set(nodes)) == len(nodes)
    layout = topology.layout(profile)
    assert [d for d, _, _ in layout.diodes] == topology.diodes(stages)
    assert [c for c, _, _ in layout.capacitors] == topology.capacitors(stages)
    joined = {n for _, a, b in (*layout.diodes, *layout.capacitors) for n in (a, b)}
    assert set(nodes) <= joined  # every probe node carries at least one part
    assert layout.output in nodes


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
def test_the_drawing_walks_every_probe_node_along_the_diode_chain(name):
    topology = TOPOLOGIES[name]
    chain = topology.chain(3)
    drawn = [c.node for c in chain if c.node != "GND"]
    assert drawn == topology.nodes(3)
    assert len(chain) == len(topology.diodes(3)) + 1  # diode k leaves cell k
    hung = {c.up for c in chain if c.up} | {c.down for c in chain if c.down}
    assert hung == set(topology.capacitors(3))


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
def test_the_start_charge_is_near_the_steady_state(name):
    """The ideal relations only have to put Newton near the answer: within a third of the
    largest capacitor voltage (a loose bound; the rule is common practice, no source)."""
    circuit, params = build_circuit(profile_from_dict(board(name)))
    x0 = initial_state(circuit, params)
    ss = steady_state(circuit, params)
    assert ss.converged.all()
    scale = np.abs(ss.period.x_start).max()
    assert np.abs(x0 - ss.period.x_start).max() < scale / 3


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
def test_a_topology_refuses_settings_it_cannot_have(name):
    topology = TOPOLOGIES[name]
    for polarity in ("positive", "negative"):
        data = board(name, board={"polarity": polarity})
        if polarity in topology.polarities:
            assert profile_from_dict(data).polarity == polarity
        else:
            with pytest.raises(ProfileError, match="polarity"):
                profile_from_dict(data)
    for waveform in ("square", "sine"):
        data = board(name, drive={"waveform": waveform})
        if waveform in topology.waveforms:
            assert profile_from_dict(data).waveform == waveform
        else:
            with pytest.raises(ProfileError, match="waveform"):
                profile_from_dict(data)


def test_every_mode_is_unique_and_its_grid_is_valid():
    seen = set()
    for mode in MODES:
        assert (mode.applies_to, mode.name) not in seen
        seen.add((mode.applies_to, mode.name))
        usable_somewhere = False
        for name in TOPOLOGIES:
            profile = profile_from_dict(board(name))
            if not mode.available(profile):
                continue
            usable_somewhere = True
            grid = mode.grid(profile)
            if mode.unit is None:
                assert len(grid) == 1 and math.isnan(grid[0])
            else:
                assert all(mode.severity_problem(g) is None for g in grid), mode.name
        assert usable_somewhere, mode.name


@pytest.mark.parametrize("name", sorted(TOPOLOGIES))
def test_the_catalog_names_every_part_and_only_modes_the_board_can_have(name):
    profile = profile_from_dict(board(name))
    circuit, _ = build_circuit(profile)
    hyps = catalog(profile, circuit)
    targets = {h.target for h in hyps if h.kind in ("diode", "capacitor")}
    assert targets == set(TOPOLOGIES[name].designators(3))
    assert all(
        next(m for m in MODES if m.applies_to == h.kind and m.name == h.mode).available(profile)
        for h in hyps
        if h.target is not None
    )
