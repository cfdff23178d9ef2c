"""A board's netlist as matrices' inputs, built from its profile and its topology.

A ``Circuit`` is the network (which element joins which nodes, with names and designators),
built generically from the topology's named connections (``fieldtool.core.circuit.topologies``,
where each topology's designators and nodes are described); a ``Params`` holds element values
for a batch of B variants of that one circuit, so the solver can run a healthy board, its
faults and its meter placements side by side. Node index 0 is ground; unknown node voltages
are indices 1..n.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Protocol

import numpy as np

from fieldtool.core.circuit.spec import CapacitorSpec, DiodeSpec, Profile
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.circuit.topologies.base import GROUND


@dataclass(frozen=True)
class Source:
    """An ideal voltage source behind a series resistance (a Norton equivalent)."""

    name: str
    node: int
    kind: str  # "dc" | "square" | "square-inverted" | "sine"


@dataclass(frozen=True)
class Circuit:
    """One board's network: nodes, elements and what the technician can probe."""

    node_names: tuple[str, ...]  # unknown nodes, index i+1 in full numbering
    diode_refs: tuple[str, ...]
    diode_nodes: np.ndarray  # (k, 2) anode, cathode
    cap_refs: tuple[str, ...]
    cap_nodes: np.ndarray  # (m, 2) positive, negative terminal
    stray_caps: int  # the last `stray_caps` capacitors are stray, not parts
    sources: tuple[Source, ...]
    output_node: int
    probe_nodes: tuple[int, ...]  # node indices (full numbering) a technician probes
    labels: dict[str, str]
    period_s: float
    edge_fraction: float
    polarity: int  # +1 or -1
    topology: str  # its name in fieldtool.core.circuit.topologies

    @property
    def n(self) -> int:
        return len(self.node_names)

    def node_index(self, name: str) -> int:
        """Full-numbering index of a node by name."""
        return self.node_names.index(name) + 1

    def name(self, index: int) -> str:
        """Name of a node by full-numbering index."""
        return "GND" if index == 0 else self.node_names[index - 1]


@dataclass(frozen=True)
class Params:
    """Element values for B variants of one circuit (every array has B rows)."""

    d_is: np.ndarray  # (B, k) saturation current
    d_nvt: np.ndarray  # (B, k) emission coefficient × thermal voltage
    d_rs: np.ndarray  # (B, k) series resistance
    d_gp: np.ndarray  # (B, k) parallel conductance (leakage, or a short)
    c_f: np.ndarray  # (B, m) capacitance
    c_esr: np.ndarray  # (B, m)
    c_gl: np.ndarray  # (B, m) parallel conductance across the terminals
    s_g: np.ndarray  # (B, s) source conductance
    s_high: np.ndarray  # (B, s) level when the waveform is 1 (DC: the voltage; sine: peak)
    s_low: np.ndarray  # (B, s) level when the waveform is 0
    g_shunt: np.ndarray  # (B, n) conductance from each node to ground (load, meter, bleeder)
    i_load: np.ndarray  # (B, n) constant current drawn from each node

    @property
    def batch(self) -> int:
        return self.d_is.shape[0]

    def take(self, rows) -> Params:
        """A sub-batch (or a repeat) of variants."""
        return Params(**{f: getattr(self, f)[rows] for f in self.__dataclass_fields__})

    def copy(self) -> Params:
        """A deep copy whose arrays may be changed."""
        return Params(**{f: getattr(self, f).copy() for f in self.__dataclass_fields__})


class Change(Protocol):
    """Anything that changes a board's element values, such as a catalogued fault."""

    def apply(self, circuit: Circuit, params: Params, profile: Profile) -> Params:
        """A copy of ``params`` (every row) with the change made."""
        ...


def stack(batches: list[Params]) -> Params:
    """Concatenate variant batches."""
    fields = Params.__dataclass_fields__
    return Params(**{f: np.concatenate([getattr(b, f) for b in batches]) for f in fields})


def default_designators(profile: Profile) -> list[str]:
    """Default reference designators of a board's diodes and capacitors."""
    return topology_of(profile).designators(profile.stages)


def default_nodes(profile: Profile) -> list[str]:
    """Names of the probeable nodes of a board."""
    return topology_of(profile).nodes(profile.stages)


def build_circuit(profile: Profile) -> tuple[Circuit, Params]:
    """The board's netlist and its nominal element values (a batch of one).

    Node numbers: the probeable nodes first in ladder order, then any other node the parts
    join, then the source nodes; ground is 0.
    """
    topology = topology_of(profile)
    layout = topology.layout(profile)
    probe_names = topology.nodes(profile.stages)
    names: list[str] = []

    def node(name: str) -> int:
        if name == GROUND:
            return 0
        if name not in names:
            names.append(name)
        return names.index(name) + 1

    for name in probe_names:
        node(name)
    for _, a, b in (*layout.diodes, *layout.capacitors):
        node(a)
        node(b)
    for _, name, _ in layout.sources:
        node(name)
    stray = [(f"Cs_{p}", p, GROUND) for p in layout.stray_nodes]
    pol = -1 if profile.polarity == "negative" else 1
    d_nodes = np.array(
        [[node(a), node(c)] if pol > 0 else [node(c), node(a)] for _, a, c in layout.diodes],
        dtype=np.intp,
    )
    all_caps = [*layout.capacitors, *stray]
    c_nodes = np.array([[node(p), node(q)] for _, p, q in all_caps], dtype=np.intp)
    circuit = Circuit(
        node_names=tuple(names),
        diode_refs=tuple(r for r, _, _ in layout.diodes),
        diode_nodes=d_nodes,
        cap_refs=tuple(r for r, _, _ in all_caps),
        cap_nodes=c_nodes,
        stray_caps=len(stray),
        sources=tuple(Source(nm, node(nd), kind) for nm, nd, kind in layout.sources),
        output_node=node(layout.output),
        probe_nodes=tuple(node(p) for p in probe_names),
        labels={p: profile.labels.get(p, "") for p in probe_names},
        period_s=profile.period_s,
        edge_fraction=profile.edge_fraction,
        polarity=pol,
        topology=topology.name,
    )
    return circuit, nominal_params(profile, circuit)


def _diode_spec(profile: Profile, ref: str) -> DiodeSpec:
    return profile.diode_overrides.get(ref, profile.diode)


def _cap_spec(profile: Profile, ref: str) -> CapacitorSpec:
    if ref.startswith("Cs_"):
        return CapacitorSpec(profile.stray_farads, 0.0, 0.0, 1e15)
    return profile.capacitor_overrides.get(ref, profile.capacitor)


def nominal_params(profile: Profile, circuit: Circuit) -> Params:
    """Nominal element values for one variant."""
    ds = [_diode_spec(profile, r) for r in circuit.diode_refs]
    cs = [_cap_spec(profile, r) for r in circuit.cap_refs]
    vt = profile.thermal_volts
    s_g, s_hi, s_lo = [], [], []
    for s in circuit.sources:
        if s.kind == "dc":
            s_g.append(1.0 / profile.supply_ohms)
            s_hi.append(profile.supply_volts)
            s_lo.append(profile.supply_volts)
        else:
            s_g.append(1.0 / profile.drive_ohms)
            s_hi.append(profile.drive_volts)
            s_lo.append(topology_of(profile).drive_low_level(profile))
    g_shunt = np.zeros(circuit.n)
    i_load = np.zeros(circuit.n)
    o = circuit.output_node - 1
    if profile.load_ohms is not None:
        g_shunt[o] += 1.0 / profile.load_ohms
    else:
        i_load[o] = profile.load_amps * circuit.polarity
    if profile.bleeder_ohms is not None:
        g_shunt[o] += 1.0 / profile.bleeder_ohms

    def row(values) -> np.ndarray:
        return np.asarray(values, dtype=float)[None, :]

    return Params(
        d_is=row([d.saturation_current_a for d in ds]),
        d_nvt=row([d.emission_coefficient * vt for d in ds]),
        d_rs=row([d.series_ohms for d in ds]),
        d_gp=row([d.leakage_siemens for d in ds]),
        c_f=row([c.farads for c in cs]),
        c_esr=row([c.esr_ohms for c in cs]),
        c_gl=row([1.0 / c.leakage_ohms for c in cs]),
        s_g=row(s_g),
        s_high=row(s_hi),
        s_low=row(s_lo),
        g_shunt=g_shunt[None, :],
        i_load=i_load[None, :],
    )


def with_meter(circuit: Circuit, params: Params, meter_ohms: float) -> Params:
    """Variants: row j has the meter on probe node j (params must be a batch of one)."""
    p = params.take(np.zeros(len(circuit.probe_nodes), dtype=np.intp)).copy()
    for j, node in enumerate(circuit.probe_nodes):
        p.g_shunt[j, node - 1] += 1.0 / meter_ohms
    return p


def scaled_load(circuit: Circuit, params: Params, factor: float) -> Params:
    """The same variants with the output load's current raised by ``factor``."""
    o = circuit.output_node - 1
    p = params.copy()
    p.g_shunt[:, o] *= factor
    p.i_load[:, o] *= factor
    return replace(p)
