"""A meter simulated from the core engine, for practice and tests without hardware.

The value at a node is the core's as-read expectation, ``expect(profile, fault)``: the DC
average with the meter's input resistance on that node. On top of it, what a technician sees:

- **Settling.** Before the probe lands the node sits at its unloaded value; the meter's input
  resistance then pulls it to the as-read value with the node's time constant
  τ_node = (R_th ∥ R_meter)·C_node. From the two steady states (a Thevenin divider)
  R_th ∥ R_meter = R_meter·(1 − V_read/V_unloaded); C_node is the capacitance joined to the
  node, the neighbouring stages counted as AC ground (an estimate). τ_node is milliseconds on a
  healthy ladder and seconds on a node stranded behind an open diode, where the reading creeps;
  it is capped at ``NODE_TAU_CAP_S``. The display follows the node as a first-order lag with
  the meter's own time constant, starting from the previous reading (0 V at switch-on).
- **Noise**: Gaussian, σ = ``noise_fraction`` × the meter's stated accuracy at that value.
- **Lifted probe**: the display falls to 0 V with the meter's time constant and shows its
  offset noise.
- **Range**: beyond ``[meter] range_volts`` of the profile it reads overload (never without).

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
from fieldtool.core.diagnosis.faults import Fault, apply_fault, catalog, parse_fault
from fieldtool.core.measurement import Measurement
from fieldtool.meters.base import Meter
from fieldtool.meters.errors import MeterDisconnected, UnknownNode

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
    """What the simulation needs about one node: as-read and unloaded volts, τ_node."""

    volts: float
    unloaded_volts: float
    tau_node_s: float


@dataclass(frozen=True)
class _Landing:
    """The probe's current position and the display value when it got there."""

    node: str | None
    t0: float
    start: float
    facts: NodeFacts


_LIFTED = NodeFacts(0.0, 0.0, 0.0)


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
    """A meter on a simulated board: ``place_probe`` on a node, then ``read`` as any meter.

    Args:
        profile: the board.
        fault: a ``Fault``, a fault spec such as ``"D5:open"``, or None for a healthy board.
        seed: seed of the noise generator.
        clock: seconds, monotonic; tests pass a fake one (and its ``sleep``).
        sleep: how a reading waits out the measurement time.
        reading_interval_s: measurement time of one ``read()``.
        noise_fraction: noise σ as a fraction of the meter's stated accuracy.
        meter_tau_s: the meter's own display time constant.
        expectation: an already solved ``expect(profile, fault=fault)`` to reuse.
    """

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
        self.nodes: tuple[str, ...] = tuple(default_nodes(profile))
        self._rng = np.random.default_rng(seed)
        self._lock = threading.Lock()
        self._given = expectation
        self._solved: tuple[Expectation, dict[str, NodeFacts]] | None = None
        self._landing = _Landing(None, clock(), 0.0, _LIFTED)
        self._closed = False

    places_probe = True
    source_kind = "simulated"

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

    def resolve(self, name: str) -> str:
        """The node for a node name or test-point label, any case (``s3``, ``TP3``, ``gnd``)."""
        wanted = name.strip().lower()
        for node in (*self.nodes, GROUND):
            if node.lower() == wanted:
                return node
        for node, label in self.profile.labels.items():
            if label.lower() == wanted:
                return node
        listed = ", ".join(self.describe_node(n) for n in self.nodes)
        raise UnknownNode(f"no node or test point '{name.strip()}' on this board; nodes: {listed}")

    def describe_node(self, node: str) -> str:
        """A node with its test-point label, e.g. ``S2 (TP3)``."""
        label = self.profile.labels.get(node)
        return f"{node} ({label})" if label else node

    # -- the probe ------------------------------------------------------------------------

    @property
    def probe(self) -> str | None:
        """The node the probe is on, or None when it is lifted."""
        return self._landing.node

    def place_probe(self, at: str | None) -> None:
        """Put the probe on a node (a name or test-point label) or lift it (None)."""
        if at is None:
            facts, where = _LIFTED, None
        else:
            where = self.resolve(at)
            facts = self._board()[where]
        with self._lock:
            t = self.clock()
            start = self._display(t)
            self._landing = _Landing(where, t, start, facts)

    def _display(self, t: float) -> float:
        """The noise-free display value at time ``t``."""
        land = self._landing
        creep = land.facts.unloaded_volts - land.facts.volts
        facts = land.facts
        return step_response(
            t - land.t0, land.start, facts.volts, creep, facts.tau_node_s, self.meter_tau_s
        )

    def display_volts(self) -> float:
        """The noise-free display value now (for tests and demonstrations)."""
        with self._lock:
            return self._display(self.clock())

    def noise_sigma(self, volts: float) -> float:
        """Standard deviation of the reading noise at ``volts``."""
        p = self.profile
        return self.noise_fraction * (p.meter_percent / 100.0 * abs(volts) + p.meter_volts)

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
            volts = float(shown + self._rng.normal(0.0, self.noise_sigma(shown)))
        if self.range_volts is not None and abs(volts) > self.range_volts:
            return self.stamped(Measurement(None, self.quantity, None, self.source))
        return self.stamped(Measurement(None, self.quantity, volts, self.source))

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
