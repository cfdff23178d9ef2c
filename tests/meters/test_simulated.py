"""The simulated meter in-process on a fake clock: settling, noise, faults, lifted probe, range.

The reference for every value is the core engine, ``expect(profile, fault)``, which is itself
checked against ngspice in tests/core. Tolerances are the profile's meter accuracy
(0.5 % + 10 mV on the demo board: invented demo values, typical of a handheld meter's DC spec).
"""

from __future__ import annotations

import math
import tomllib

import numpy as np
import pytest

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import profile_from_dict
from fieldtool.core.diagnosis.faults import catalog, parse_fault
from fieldtool.core.errors import InputError
from fieldtool.meters.errors import MeterDisconnected, UnknownNode
from fieldtool.meters.simulated import (
    METER_TAU_S,
    NODE_TAU_CAP_S,
    READING_INTERVAL_S,
    SimulatedMeter,
    random_fault,
    step_response,
)
from tests.meters.conftest import BOARD, accuracy


class FakeClock:
    """A monotonic clock that only moves when told to (or when a reading waits)."""

    def __init__(self) -> None:
        self.t = 100.0

    def __call__(self) -> float:
        return self.t

    def sleep(self, seconds: float) -> None:
        self.t += seconds


@pytest.fixture(scope="module")
def d5_open(board):
    return expect(board, fault=parse_fault("D5:open", board))


def meter_on(profile, expectation, fault=None, seed=0, **kw):
    clock = FakeClock()
    m = SimulatedMeter(
        profile, fault, seed=seed, clock=clock, sleep=clock.sleep, expectation=expectation, **kw
    )
    return m, clock


@pytest.mark.parametrize("node", ["S0", "P1", "S2", "P5", "S8"])
def test_settles_to_the_expectation_within_accuracy(board, healthy, node):
    meter, clock = meter_on(board, healthy)
    meter.place_probe(node)
    clock.sleep(10 * METER_TAU_S)
    expected = healthy.node(node).volts
    readings = [meter.read().value for _ in range(20)]
    assert all(abs(v - expected) <= accuracy(board, expected) for v in readings)


def test_own_solve_is_the_cores_expectation_with_the_fault(board, d5_open):
    clock = FakeClock()
    meter = SimulatedMeter(board, "D5:open", seed=1, clock=clock, sleep=clock.sleep)
    first = meter.expectation
    assert meter.expectation is first  # solved once and cached
    for ours, core in zip(first.nodes, d5_open.nodes, strict=True):
        assert ours.volts == pytest.approx(core.volts, rel=1e-9, abs=1e-9)


@pytest.mark.parametrize("node", ["S2", "S3", "S4", "S8"])
def test_fault_changes_readings_as_the_core_says(board, healthy, d5_open, node):
    meter, clock = meter_on(board, d5_open, fault="D5:open", seed=2)
    meter.place_probe(node)
    clock.sleep(20.0)  # well past the creep of a node stranded behind the open diode
    faulted = d5_open.node(node).volts
    reading = meter.read().value
    assert abs(reading - faulted) <= accuracy(board, faulted)
    # and the fault is visible: the reading is outside the healthy board's accuracy band
    ok = healthy.node(node).volts
    assert abs(reading - ok) > accuracy(board, ok)


def test_first_order_step_from_zero_and_from_the_previous_node(board, healthy):
    # First-order lag step response v(t) = V + (v0 - V)·exp(-t/τ) (Horowitz & Hill, The Art
    # of Electronics, 3rd ed., §1.4.2; from memory). On a healthy ladder τ_node is milliseconds,
    # so the meter's own τ dominates.
    meter, clock = meter_on(board, healthy, noise_fraction=0.0)
    meter.place_probe("S8")
    clock.sleep(METER_TAU_S)
    v8 = healthy.node("S8").volts
    assert meter.display_volts() == pytest.approx(v8 * (1 - math.exp(-1)), rel=1e-3)
    clock.sleep(20 * METER_TAU_S)
    meter.place_probe("S4")
    clock.sleep(2 * METER_TAU_S)
    v4 = healthy.node("S4").volts
    assert meter.display_volts() == pytest.approx(v4 + (v8 - v4) * math.exp(-2), rel=1e-3)


def test_stranded_node_creeps_with_meter_resistance_times_capacitance(board, d5_open):
    # Behind an open diode the node starts at its unloaded value and the meter's 10 MΩ pulls it
    # down: τ = (R_th ∥ R_meter)·C (an RC discharge); from the Thevenin divider of the two
    # steady states R_th ∥ R_meter = R_meter·(1 − V_read/V_unloaded). One 2.2 µF capacitor
    # joins each stage node of this ladder.
    n = d5_open.node("S3")
    tau = board.meter_ohms * (1 - n.volts / n.unloaded_volts) * board.capacitor.farads
    assert METER_TAU_S * 3 < tau < NODE_TAU_CAP_S  # seconds: a creep a technician sees
    meter, clock = meter_on(board, d5_open, fault="D5:open", noise_fraction=0.0)
    meter.place_probe("S3")
    clock.sleep(4.0)  # the meter's own lag is over (exp(-4/0.3) ≈ 2e-6)
    first = meter.display_volts() - n.volts
    clock.sleep(2.0)
    second = meter.display_volts() - n.volts
    assert abs(first) > accuracy(board, n.volts)  # still visibly creeping after 4 s
    assert second / first == pytest.approx(math.exp(-2.0 / tau), rel=1e-3)


def test_step_response_solves_the_lag_equation():
    # d' = (u - d)/τm with u = V + ΔV·exp(-t/τn), d(0) = start: integrate with RK4 and compare.
    start, target, creep, tau_n, tau_m = 3.0, 10.0, 2.0, 0.7, 0.3
    h, t, d = 1e-4, 0.0, start
    u = lambda s: target + creep * math.exp(-s / tau_n)  # noqa: E731
    f = lambda s, y: (u(s) - y) / tau_m  # noqa: E731
    for _ in range(20000):
        k1 = f(t, d)
        k2 = f(t + h / 2, d + h / 2 * k1)
        k3 = f(t + h / 2, d + h / 2 * k2)
        k4 = f(t + h, d + h * k3)
        d += h / 6 * (k1 + 2 * k2 + 2 * k3 + k4)
        t += h
    assert step_response(t, start, target, creep, tau_n, tau_m) == pytest.approx(d, rel=1e-9)
    # equal time constants use the limit form; it joins the general one continuously
    equal = step_response(0.5, start, target, creep, 0.3, 0.3)
    near = step_response(0.5, start, target, creep, 0.3 * (1 + 1e-5), 0.3)
    assert equal == pytest.approx(near, rel=1e-5)
    assert step_response(0.0, start, target, creep, tau_n, tau_m) == start


def test_noise_statistics_match_the_configured_scale(board, healthy):
    meter, clock = meter_on(board, healthy, seed=7)
    meter.place_probe("S8")
    clock.sleep(30.0)
    v = np.array([meter.sample().value for _ in range(4000)])
    expected = healthy.node("S8").volts
    sigma = 0.1 * accuracy(board, expected)  # NOISE_FRACTION of the stated accuracy
    assert meter.noise_sigma(expected) == pytest.approx(sigma)
    # sample std of n normals has a relative spread of 1/sqrt(2n) ≈ 1.1 %; allow 5 %
    assert v.std(ddof=1) == pytest.approx(sigma, rel=0.05)
    assert abs(v.mean() - expected) < 4 * sigma / math.sqrt(len(v))


def test_lifted_probe_reads_zero_with_offset_noise(board, healthy):
    meter, clock = meter_on(board, healthy, seed=8)
    meter.place_probe("S8")
    clock.sleep(5.0)
    meter.place_probe(None)
    assert meter.probe is None
    clock.sleep(5.0)  # 126 V·exp(-5/0.3) ≈ 7 µV left of the previous node
    v = np.array([meter.sample().value for _ in range(2000)])
    sigma = 0.1 * board.meter_volts
    assert abs(v.mean()) < 4 * sigma / math.sqrt(len(v))
    assert v.std(ddof=1) == pytest.approx(sigma, rel=0.05)


def test_same_seed_same_readings_other_seed_others(board, healthy):
    def script(seed):
        meter, clock = meter_on(board, healthy, seed=seed)
        out = []
        for node in ["S2", "S8", None, "P3"]:
            meter.place_probe(node)
            out += [meter.read().value for _ in range(5)]
        return out, clock.t

    first, t_end = script(3)
    again, _ = script(3)
    other, _ = script(4)
    assert first == again
    assert first != other
    assert t_end == pytest.approx(100.0 + 20 * READING_INTERVAL_S)  # each read takes its time


def with_range(volts: float):
    data = tomllib.loads(BOARD.read_text())
    data["meter"]["range_volts"] = volts
    return profile_from_dict(data, "ranged.toml")


def test_beyond_the_range_reads_overload(board, healthy):
    ranged = with_range(100.0)
    meter, clock = meter_on(ranged, healthy)
    meter.place_probe("S8")  # about 126 V
    clock.sleep(0.05)
    rising = meter.read()
    assert rising.overload is False and rising.value < 100.0
    clock.sleep(5.0)
    over = meter.read()
    assert over.overload is True and over.value is None
    meter.place_probe("S4")  # about 70 V
    clock.sleep(5.0)
    assert meter.read().value == pytest.approx(healthy.node("S4").volts, abs=0.5)


def test_without_a_range_never_overload(board, healthy):
    meter, clock = meter_on(board, healthy)
    meter.place_probe("S8")
    for _ in range(40):
        clock.sleep(0.1)
        assert meter.read().overload is False


def test_nodes_by_name_or_test_point_any_case(board, healthy):
    meter, clock = meter_on(board, healthy)
    meter.place_probe("tp3")
    assert meter.probe == "S2"
    meter.place_probe("hv-out")
    assert meter.probe == "S8"
    meter.place_probe("gnd")
    clock.sleep(5.0)
    assert abs(meter.read().value) < accuracy(board, 0.0)
    with pytest.raises(UnknownNode) as info:
        meter.place_probe("S99")
    assert info.value.message.startswith(
        "no node, test point, rail or diode 'S99' on this board; nodes: S0 (TP1), P1, S1, P2"
    )
    assert meter.probe == "GND"  # a refused touch leaves the probe where it was


def test_bad_fault_spec_is_refused(board):
    with pytest.raises(InputError):
        SimulatedMeter(board, "Q9:open")


def test_connect_returns_identity_and_close_stops_reads(board, healthy):
    meter, _ = meter_on(board, healthy)
    assert meter.connect() == meter.identity
    assert meter.identity.startswith("FIELDTOOL,SIMULATED-METER,tidegauge-apd-bias,")
    meter.close()
    with pytest.raises(MeterDisconnected, match="the simulated meter is closed"):
        meter.read()


def test_random_fault_is_reproducible_and_from_the_catalog(board):
    circuit, _ = build_circuit(board)
    keys = {h.key for h in catalog(board, circuit)}
    picks = [random_fault(board, seed) for seed in range(12)]
    assert picks == [random_fault(board, seed) for seed in range(12)]
    assert len({p.key if p else "healthy" for p in picks}) > 3
    assert all((p.key if p else "healthy") in keys for p in picks)
