"""A meter simulated from the core engine, for practice and tests without hardware.

It plays every kind of reading on one board (healthy, or with a hidden fault), and the board
itself: the tool can switch it off and on (``set_board``). The truth is the core's:

- **DC volts** at a node: the as-read expectation, ``expect(profile, fault)``: the DC average
  with the meter's input resistance on that node.
- **The other kinds** (``core.circuit.readouts.board_readouts`` for the same board): ripple
  peak to peak on a scope, AC volts on a true-RMS meter, the supply lead's or the driver
  rail's current through the meter's burden, DC volts under a test load on the output (the
  load clipped on with ``set_board``), and with the board off the diode test across each diode
  (forward, red lead on the anode; OL where the meter shows it).
- **The board off**: every node has been discharged (the technician did, before verifying),
  so volts read 0 V and currents 0 A; a diode test on a powered board shows OL (its test
  current cannot hold the part against the running pump: a reading that means nothing).

On top of it, what a technician sees:

- **Settling.** Before the probe lands the node sits at its unloaded value; the meter's input
  resistance then pulls it to the as-read value with the node's time constant
  τ_node = (R_th ∥ R_meter)·C_node. From the two steady states (a Thevenin divider)
  R_th ∥ R_meter = R_meter·(1 − V_read/V_unloaded); C_node is the capacitance joined to the
  node, the neighbouring stages counted as AC ground (an estimate). τ_node is milliseconds on a
  healthy ladder and seconds on a node stranded behind an open diode, where the reading creeps;
  it is capped at ``NODE_TAU_CAP_S``. A diode test climbs from 0 V as the capacitors around
  the part charge: exponentially, reaching the meter's accuracy of its final value at the
  settle time the core predicts. The display follows as a first-order lag with the meter's own
  time constant, starting from the previous reading (0 at switch-on); the other kinds follow
  the lag alone.
- **Noise**: Gaussian, σ = ``noise_fraction`` × the instrument's stated accuracy at that value
  (the DC meter's, the AC range's, the current range's, the diode test's, the scope's).
- **Lifted probe**: the display falls to 0 with the meter's time constant and shows its offset
  noise (a diode test with open leads shows OL).
- **Range**: volts beyond ``[meter] range_volts`` of the profile read overload (never without).

The probe goes on a node (or its test point), on a supply rail (``supply``, or ``drive`` where
the driver has its own rail: the meter in series with it) or across a diode (its designator).
Each ``read()`` takes the meter's measurement time; with a fixed seed and an injected clock and
sleep, a sequence of probe placements and reads is reproducible.
"""

from __future__ import annotations

import math
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from fieldtool import __version__
from fieldtool.core.circuit.expect import Expectation, expect
from fieldtool.core.circuit.netlist import build_circuit, default_nodes
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.readouts import BoardReadouts, accuracy_sigma, board_readouts
from fieldtool.core.circuit.readouts.current import rail_sources, supply_index
from fieldtool.core.circuit.readouts.spread import RECT
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.faults import Fault, apply_fault, catalog, parse_fault
from fieldtool.core.measurement import QUANTITIES, Measurement, Quantity
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterDisconnected, UnknownNode
from fieldtool.meters.modes import AC_VOLTS, DC_AMPS, DC_VOLTS, DIODE, PEAK_TO_PEAK, mode_of

# Common practice, no source: a handheld or bench meter on autorange shows a steady DC reading
# about 1–2 s after the probes land; a first-order lag of 0.3 s is within 1 % after 1.4 s.
METER_TAU_S = 0.3
# Common practice, no source: a technician waits seconds, not minutes, for a reading. A real node
# stranded behind an open diode can creep for far longer (10 MΩ × 4.7 µF ≈ 47 s).
NODE_TAU_CAP_S = 5.0
# Common practice, no source: handheld meters update 2–5 times a second; a bench meter at
# 10 power-line cycles takes 0.2 s per reading.
READING_INTERVAL_S = 0.25
# Common practice, no source: reading-to-reading scatter is well inside a meter's accuracy
# figure, which also covers gain and offset errors that do not change between readings.
NOISE_FRACTION = 0.1
GROUND = "GND"
SUPPLY, DRIVE = "supply", "drive"  # the rails a meter can go in series with


def step_response(
    t: float, start: float, target: float, creep: float, tau_node: float, tau_meter: float
) -> float:
    """Display value ``t`` seconds after the probe lands.

    The node is ``target + creep·exp(−t/τ_node)``; the display is a first-order lag of it
    (time constant ``tau_meter``) that starts at ``start``.
    """
    if t <= 0:
        return start
    node_part = creep * math.exp(-t / tau_node) if tau_node > 0 else 0.0
    if tau_meter <= 0:
        return target + node_part
    lag = math.exp(-t / tau_meter)
    if tau_node <= 0 or creep == 0.0:
        return target + (start - target) * lag
    if abs(tau_node - tau_meter) <= 1e-6 * tau_meter:
        return target + (start - target) * lag + creep * (t / tau_meter) * lag
    a = creep * tau_node / (tau_node - tau_meter)
    return target + a * math.exp(-t / tau_node) + (start - target - a) * lag


@dataclass(frozen=True)
class NodeFacts:
    """What the simulation needs about one reading: where it goes (as read), where the node
    starts before the probe lands (unloaded), how fast it gets there (τ_node), and whether
    the meter shows OL there."""

    volts: float  # in the reading's unit (volts or amps)
    unloaded_volts: float
    tau_node_s: float
    overload: bool = False


@dataclass(frozen=True)
class _Landing:
    """The probe's current position and the display value when it got there."""

    node: str | None
    t0: float
    start: float
    facts: NodeFacts


_LIFTED = NodeFacts(0.0, 0.0, 0.0)
_OPEN_LEADS = NodeFacts(0.0, 0.0, 0.0, overload=True)


def climb_time_constant(volts: float, accuracy: float, settle_s: float) -> float:
    """τ of a reading climbing as V·(1 − e^(−t/τ)) that is within ``accuracy`` of V at
    ``settle_s``: τ = settle_s / ln(V/accuracy); ``settle_s`` itself where V is within the
    accuracy from the start."""
    if not np.isfinite(settle_s) or settle_s <= 0:
        return 0.0 if settle_s <= 0 else NODE_TAU_CAP_S
    ratio = abs(volts) / accuracy if accuracy > 0 else 0.0
    return settle_s / math.log(ratio) if ratio > math.e else settle_s


def node_time_constant(
    volts: float, unloaded_volts: float, meter_ohms: float, farads: float
) -> float:
    """τ_node = R_meter·(1 − V_read/V_unloaded)·C_node, uncapped; 0 where nothing creeps."""
    if unloaded_volts == 0.0 or farads <= 0:
        return 0.0
    fraction = 1.0 - volts / unloaded_volts
    if not 0.0 < fraction <= 1.0:
        return 0.0  # the meter did not pull the node towards 0 V: no linear divider to read
    return meter_ohms * fraction * farads


def random_fault(profile: Profile, seed: int) -> Fault | None:
    """A fault drawn from the board's catalog (healthy included) for practice; None: healthy."""
    circuit, _ = build_circuit(profile)
    hypotheses = catalog(profile, circuit)
    rng = np.random.default_rng((seed, 1))  # its own stream: the meter noise stays as seeded
    faults = hypotheses[int(rng.integers(len(hypotheses)))].faults()
    return faults[int(rng.integers(len(faults)))]


class SimulatedMeter(Meter):
    """A meter on a simulated board: ``place_probe``, ``set_quantity``, ``set_board``, then
    ``read`` as any meter.

    Args:
        profile: the board.
        fault: a ``Fault``, a fault spec such as ``"D5:open"``, or None for a healthy board.
        seed: seed of the noise generator.
        clock: seconds, monotonic; tests pass a fake one (and its ``sleep``).
        sleep: how a reading waits out the measurement time.
        reading_interval_s: measurement time of one ``read()``.
        noise_fraction: noise σ as a fraction of the instrument's stated accuracy.
        meter_tau_s: the meter's own display time constant.
        expectation: an already solved ``expect(profile, fault=fault)`` to reuse.
        readouts: an already solved ``board_readouts(profile, fault=fault)`` to reuse.
    """

    places_probe = True
    plays_board = True
    source_kind = "simulated"
    quantities = frozenset(QUANTITIES)

    def __init__(
        self,
        profile: Profile,
        fault: Fault | str | None = None,
        seed: int = 0,
        clock: Callable[[], float] = time.monotonic,
        *,
        sleep: Callable[[float], None] = time.sleep,
        reading_interval_s: float = READING_INTERVAL_S,
        noise_fraction: float = NOISE_FRACTION,
        meter_tau_s: float = METER_TAU_S,
        expectation: Expectation | None = None,
        readouts: BoardReadouts | None = None,
    ) -> None:
        super().__init__("simulated meter")
        self.profile = profile
        self.fault = parse_fault(fault, profile) if isinstance(fault, str) else fault
        self.clock = clock
        self.sleep = sleep
        self.reading_interval_s = reading_interval_s
        self.noise_fraction = noise_fraction
        self.meter_tau_s = meter_tau_s
        self.range_volts = profile.meter_range_volts
        self.identity = f"FIELDTOOL,SIMULATED-METER,{profile.name},{__version__}"
        circuit, _ = build_circuit(profile)
        self.nodes: tuple[str, ...] = tuple(default_nodes(profile))
        self.rails: tuple[str, ...] = (SUPPLY,) * (supply_index(circuit) is not None) + (
            DRIVE,
        ) * bool(rail_sources(circuit))
        self.diodes: tuple[str, ...] = tuple(circuit.diode_refs)
        self.powered = True
        self.test_load_ohms: float | None = None
        self._rng = np.random.default_rng(seed)
        self._lock = threading.Lock()
        self._given = expectation
        self._solved: tuple[Expectation, dict[str, NodeFacts]] | None = None
        self._readouts: dict[tuple[float, ...] | None, BoardReadouts] = {}
        if readouts is not None:
            self._readouts[None] = readouts
        self._landing = _Landing(None, clock(), 0.0, _LIFTED)
        self._closed = False

    # -- the board ------------------------------------------------------------------------

    @property
    def expectation(self) -> Expectation:
        """The core's as-read expectation for this board and fault (solved once, on first use)."""
        return self._solve()[0]

    def _board(self) -> dict[str, NodeFacts]:
        return self._solve()[1]

    def _solve(self) -> tuple[Expectation, dict[str, NodeFacts]]:
        with self._lock:
            if self._solved is None:
                expectation = self._given or expect(self.profile, fault=self.fault)
                self._solved = expectation, self._node_facts(expectation)
            return self._solved

    def readouts(self, test_load_ohms: tuple[float, ...] | None = None) -> BoardReadouts:
        """The readings beyond DC volts of this board and fault (each solved once, on first
        use; ``test_load_ohms`` None for the profile's test loads)."""
        with self._lock:
            if test_load_ohms not in self._readouts:
                self._readouts[test_load_ohms] = board_readouts(
                    self.profile, fault=self.fault, spreads=False, test_load_ohms=test_load_ohms
                )
            return self._readouts[test_load_ohms]

    def _node_facts(self, expectation: Expectation) -> dict[str, NodeFacts]:
        circuit, params = build_circuit(self.profile)
        if self.fault is not None:
            params = apply_fault(circuit, params, self.fault, self.profile)
        facts = {GROUND: _LIFTED}
        for n in expectation.nodes:
            i = circuit.node_index(n.node)
            joined = (circuit.cap_nodes[:, 0] == i) | (circuit.cap_nodes[:, 1] == i)
            farads = float(params.c_f[0, joined].sum())
            tau = node_time_constant(n.volts, n.unloaded_volts, self.profile.meter_ohms, farads)
            facts[n.node] = NodeFacts(n.volts, n.unloaded_volts, min(tau, NODE_TAU_CAP_S))
        return facts

    def _facts(self, at: str | None) -> NodeFacts:
        """What the meter in its present mode sees at ``at`` on the board as it is now."""
        mode = mode_of(self.quantity)
        if at is None or at == GROUND:
            return _OPEN_LEADS if mode is DIODE else _LIFTED
        is_node, is_rail, is_diode = at in self.nodes, at in self.rails, at in self.diodes
        if mode is DIODE:
            return self._diode_facts(at) if is_diode and not self.powered else _OPEN_LEADS
        if not self.powered:
            return _LIFTED  # discharged: 0 V on every node, no current in any lead
        if mode is DC_AMPS:
            return self._rail_facts(at) if is_rail else _LIFTED
        if not is_node:
            return _LIFTED
        if mode is DC_VOLTS and self.test_load_ohms is not None:
            ohms = self.test_load_ohms
            r = self._loaded(ohms)
            j = r.powered.nodes.index(at)
            i = r.powered.test_load_ohms.index(ohms)
            return self._steady(float(r.powered.dc_loaded[0, i, j]))
        if mode is DC_VOLTS:
            return self._board()[at]
        r = self.readouts().powered
        j = r.nodes.index(at)
        if mode is AC_VOLTS:
            return self._steady(float(r.ac_rms[0, j]))
        if mode is PEAK_TO_PEAK:
            return self._steady(float(r.ripple_pp[0, j]))
        return _LIFTED

    @staticmethod
    def _steady(value: float) -> NodeFacts:
        return NodeFacts(value, value, 0.0) if np.isfinite(value) else _LIFTED

    def _loaded(self, ohms: float) -> BoardReadouts:
        profile_loads = self.readouts()
        if ohms in profile_loads.powered.test_load_ohms:
            return profile_loads
        return self.readouts((ohms,))

    def _rail_facts(self, rail: str) -> NodeFacts:
        r = self.readouts().powered
        amps = r.supply_amps[0] if rail == SUPPLY else r.rail_amps[0]
        return self._steady(float(amps))

    def _diode_facts(self, ref: str) -> NodeFacts:
        d = self.readouts().diodes
        k = d.diodes.index(ref)
        if d.over_range[0, k, 0]:
            return _OPEN_LEADS
        volts = float(d.volts[0, k, 0])
        accuracy = float(accuracy_sigma(self.profile, "diode-test", volts)) / RECT
        tau = climb_time_constant(volts, accuracy, float(d.settle_s[0, k, 0]))
        return NodeFacts(volts, 0.0, min(tau, NODE_TAU_CAP_S))

    def resolve(self, name: str) -> str:
        """The place for a node name or test-point label (``s3``, ``TP3``, ``gnd``), a rail
        (``supply``, ``drive``) or a diode (``D5`` or the board's own designator), any case."""
        wanted = name.strip().lower()
        for place in (*self.nodes, GROUND, *self.rails, *self.diodes):
            if place.lower() == wanted:
                return place
        for node, label in self.profile.labels.items():
            if label.lower() == wanted:
                return node
        for ref in self.diodes:
            if display_name(self.profile, ref).lower() == wanted:
                return ref
        raise UnknownNode(
            f"no node, test point, rail or diode '{name.strip()}' on this board; {self.places()}"
        )

    def places(self) -> str:
        """Every place the probe can go, in words."""
        nodes = ", ".join(self.describe_node(n) for n in self.nodes)
        diodes = ", ".join(display_name(self.profile, d) for d in self.diodes)
        rails = ", ".join(self.rails) or "none"
        return f"nodes: {nodes}; rails: {rails}; diodes: {diodes}"

    def describe_node(self, node: str) -> str:
        """A place in words: a node with its test-point label (``S2 (TP3)``), a rail, a
        diode with its board designator where the board renames it."""
        if node in self.rails:
            return f"the {node} {'lead' if node == SUPPLY else 'rail'}"
        if node in self.diodes:
            shown = display_name(self.profile, node)
            return f"diode {shown}" + (f" ({node})" if shown != node else "")
        label = self.profile.labels.get(node)
        return f"{node} ({label})" if label else node

    # -- the probe, the mode and the board ------------------------------------------------

    @property
    def probe(self) -> str | None:
        """Where the probe is, or None when it is lifted."""
        return self._landing.node

    def place_probe(self, at: str | None) -> None:
        """Put the probe on a place (see ``resolve``) or lift it (None)."""
        where = None if at is None else self.resolve(at)
        self._land(where)

    def set_quantity(
        self, quantity: Quantity, conditions: tuple[tuple[str, float], ...] = ()
    ) -> None:
        """Turn the dial to ``quantity``; the reading settles again from where the display
        stood. (The test load itself is on the board: ``set_board``.)"""
        super().set_quantity(quantity, conditions)
        self._land(self._landing.node)

    def set_board(self, powered: bool, test_load_ohms: float | None = None) -> None:
        """Switch the simulated board on or off (off: discharged, as the checklist asks), with
        a test load of ``test_load_ohms`` clipped from the output to ground (None: none)."""
        self.powered = powered
        self.test_load_ohms = test_load_ohms
        self._land(self._landing.node)

    def _land(self, where: str | None) -> None:
        """The display starts over towards what the meter now sees at ``where``."""
        facts = self._facts(where)  # solves the board on first use, outside the lock below
        with self._lock:
            t = self.clock()
            start = self._display(t)
            self._landing = _Landing(where, t, start, facts)

    def _display(self, t: float) -> float:
        """The noise-free display value at time ``t``."""
        land = self._landing
        facts = land.facts
        creep = facts.unloaded_volts - facts.volts
        return step_response(
            t - land.t0, land.start, facts.volts, creep, facts.tau_node_s, self.meter_tau_s
        )

    def display_volts(self) -> float:
        """The noise-free display value now, in the kind's unit (for tests and
        demonstrations)."""
        with self._lock:
            return self._display(self.clock())

    def noise_sigma(self, value: float) -> float:
        """Standard deviation of the reading noise at ``value`` in the present kind."""
        bound = float(accuracy_sigma(self.profile, self.quantity.name, value)) / RECT
        return self.noise_fraction * bound

    # -- the meter -----------------------------------------------------------------

    def connect(self) -> str:
        """Solve the board now (about a second) so the first reading is not late."""
        self._check_open()
        self._board()
        return self.identity

    def sample(self) -> Measurement:
        """The sample at this instant, without waiting for a measurement."""
        self._check_open()
        with self._lock:
            shown = self._display(self.clock())
            value = float(shown + self._rng.normal(0.0, self.noise_sigma(shown)))
            over = self._landing.facts.overload
        if mode_of(self.quantity) in (AC_VOLTS, PEAK_TO_PEAK):
            value = abs(value)  # an RMS or a peak-to-peak reading of noise is still positive
        in_volts = self.quantity.unit == "V"
        if over or in_volts and self.range_volts is not None and abs(value) > self.range_volts:
            return self.sample_of(None)
        return self.sample_of(value)

    def read(self) -> Measurement:
        """One sample, after the meter's measurement time."""
        self._check_open()
        self.sleep(self.reading_interval_s)
        return self.sample()

    def close(self) -> None:
        """Switch the simulated meter off; later reads raise MeterDisconnected."""
        self._closed = True

    def _check_open(self) -> None:
        if self._closed:
            raise MeterDisconnected("the simulated meter is closed; connect a new one")
