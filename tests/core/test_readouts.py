"""Readings beyond DC volts against textbook results (no simulator needed).

Sources beside each check. The ngspice cross-checks of the same readings are in
``test_readouts_ngspice.py``.
"""

import math

import numpy as np
import pytest

from fieldtool.core.circuit.expect import period_average
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.readouts import waveform
from fieldtool.core.circuit.readouts.powered import load_watts, powered_readouts
from fieldtool.core.circuit.solver import steady_state
from tests.conftest import make_profile

PERIOD = 1e-4
# An uneven grid like the solver's (fine after each edge, coarse later in each half period).
UNEVEN = np.concatenate(
    [[0.0], np.sort(np.random.default_rng(7).uniform(0, PERIOD, 299)), [PERIOD]]
)


def _sampled(shape) -> np.ndarray:
    phase = UNEVEN[1:] / PERIOD
    return shape(phase)[None, :]


def triangle(phase):
    return 1.0 - 4.0 * np.abs(phase - 0.5)  # from −1 to +1: 2 V peak to peak


def sawtooth(phase):
    return 2.0 * phase - 1.0


def square(phase):
    return np.where(phase < 0.5, 1.0, -1.0)


# True RMS of the AC component: triangle and sawtooth Vpp/(2√3), square Vpp/2; an average-
# responding meter calibrated for sine reads 1.111 × the rectified mean: Vpp/4 × 1.111 on a
# triangle, Vpp/2 × 1.111 on a square (form factors: textbook, e.g. Horowitz & Hill, *The Art
# of Electronics*, 3rd ed., §1.3; from memory).
@pytest.mark.parametrize(
    "shape, rms, average_responding",
    [
        (triangle, 2 / (2 * math.sqrt(3)), 1.1107 * 2 / 4),
        (sawtooth, 2 / (2 * math.sqrt(3)), 1.1107 * 2 / 4),
        (square, 1.0, 1.1107 * 1.0),
    ],
    ids=["triangle", "sawtooth", "square"],
)
def test_true_rms_and_average_responding_form_factors(shape, rms, average_responding):
    wave = _sampled(shape)
    # linear interpolation between uneven samples: within 1 % of the exact waveform
    assert waveform.true_rms(UNEVEN, wave)[0] == pytest.approx(rms, rel=0.01)
    avg = waveform.average_responding(UNEVEN, wave)[0]
    assert avg == pytest.approx(average_responding, rel=0.01)


def test_triangle_reads_lower_on_an_average_responding_meter():
    wave = _sampled(triangle)
    ratio = waveform.average_responding(UNEVEN, wave) / waveform.true_rms(UNEVEN, wave)
    # 0.278·Vpp against 0.289·Vpp: 1.111 × √3/2 ≈ 0.962 (form factors above)
    assert ratio[0] == pytest.approx(1.1107 * math.sqrt(3) / 2, rel=0.005)


def test_bandwidth_rolls_harmonics_off_at_first_order():
    # A sine at the meter's −3 dB frequency reads 1/√2 of its RMS (first-order low-pass).
    wave = _sampled(lambda ph: np.sin(2 * np.pi * ph))
    f = np.arange(1, waveform.RESAMPLE_POINTS // 2) / PERIOD
    gain = waveform.first_order_rolloff(f, 1 / PERIOD)
    assert waveform.true_rms(UNEVEN, wave, gain)[0] == pytest.approx(0.5, rel=0.01)


def test_peak_refinement_finds_a_maximum_between_coarse_samples():
    # A smooth peak between two samples of a coarse uneven grid: the parabola through the
    # three samples around it recovers the peak; the raw samples miss it.
    times = np.array([0.0, 0.1, 0.25, 0.33, 0.5, 0.7, 0.8, 1.0]) * PERIOD
    wave = np.cos(2 * np.pi * (times[1:] / PERIOD - 0.29))[None, :]
    raw = wave.max() - wave.min()
    refined = waveform.peak_to_peak(times, wave)[0]
    assert abs(raw - 2.0) > 0.02
    assert refined == pytest.approx(2.0, abs=0.01)


def test_peak_refinement_leaves_a_drive_edge_alone():
    # A corner at an edge sample (a reservoir's minimum as the drive switches): refining it
    # with a parabola would undershoot; marked as a corner it keeps its sample.
    times = np.array([0.0, 0.01, 0.02, 0.2, 0.5, 0.51, 0.52, 0.7, 1.0]) * PERIOD
    wave = np.array([[0.9, 1.0, 0.95, 0.85, 0.2, 0.9, 0.85, 0.7]])  # deep corner at t = 0.5 T
    corners = waveform.edge_samples(times, 0.02 * PERIOD, square=True)
    assert waveform.extremes(times, wave, corners)[0][0] == pytest.approx(0.2)


def _solved(profile, steps=80):
    circuit, params = build_circuit(profile)
    ss = steady_state(circuit, params, steps_per_period=steps)
    assert ss.converged.all()
    return circuit, params, ss


def test_ripple_on_the_step_grid_matches_a_four_times_finer_solve():
    # The refined peaks of the dictionary's 40-step grid against a 160-step solve: within
    # 3 % (backward Euler is first order; the rest is what the refinement recovers).
    profile = make_profile(load={"ohms": 5e3})
    circuit, params, ss = _solved(profile, 40)
    coarse = powered_readouts(circuit, params, ss.period, profile, steps=40, spreads=False)
    circuit, params, ss = _solved(profile, 160)
    fine = powered_readouts(circuit, params, ss.period, profile, steps=160, spreads=False)
    np.testing.assert_allclose(coarse.ripple_pp, fine.ripple_pp, rtol=0.03, atol=1e-4)


def _ac_ladder(stages, load_ohms):
    return make_profile(
        board={"topology": "ac-ladder", "stages": stages},
        supply=None,
        drive={"volts": 10.0},
        load={"ohms": load_ohms},
        capacitor={"esr_ohms": 0.0},
    )


def test_reservoir_ripple_of_a_half_wave_doubler_is_i_over_fc():
    # Reservoir ripple ΔV ≈ I/(f·C) (Horowitz & Hill, *The Art of Electronics*, 3rd ed.,
    # §1.7.16; from memory): the reservoir feeds the load for a whole period between
    # recharges, so the formula is an upper estimate; the recharge takes part of the period,
    # so the real ripple is a few percent less.
    profile = _ac_ladder(1, 20e3)
    circuit, params, ss = _solved(profile)
    r = powered_readouts(circuit, params, ss.period, profile, spreads=False)
    amps = period_average(ss.period)[0, circuit.output_node - 1] / 20e3
    textbook = amps / (profile.frequency_hz * profile.capacitor.farads)
    assert 0.88 * textbook <= r.ripple_pp[0, r.nodes.index("S1")] <= textbook


@pytest.mark.parametrize("stages", [2, 3, 4])
def test_cockcroft_walton_ripple_per_node(stages):
    # Kuffel, Zaengl & Kuffel, *High Voltage Engineering Fundamentals*, 2nd ed., §2.2.2 (from
    # memory): output ripple (I/(fC))·n(n+1)/2, the sum over the smoothing column, where the
    # capacitor of stage i carries (n − i + 1) units of the output charge each period. Node
    # S_k sums the first k: (k·n − k(k−1)/2)·I/(fC). The same upper-estimate caveat as above.
    profile = _ac_ladder(stages, 100e3)
    circuit, params, ss = _solved(profile)
    r = powered_readouts(circuit, params, ss.period, profile, spreads=False)
    amps = period_average(ss.period)[0, circuit.output_node - 1] / 100e3
    q = amps / (profile.frequency_hz * profile.capacitor.farads)
    for k in range(1, stages + 1):
        textbook = (k * stages - k * (k - 1) / 2) * q
        assert 0.93 * textbook <= r.ripple_pp[0, r.nodes.index(f"S{k}")] <= textbook


def test_test_load_power_is_v_squared_over_r():
    assert load_watts(100.0, 10e3) == pytest.approx(1.0)  # P = V²/R (Joule's law)


def test_reservoir_ripple_spread_follows_its_capacitor_tolerance():
    # Ripple on a reservoir node goes as I/(f·C) (above): its relative spread is about the
    # capacitor's relative 1σ, ±20 % read as rectangular, 0.2/√3 ≈ 11.5 % (GUM §4.3.7),
    # a little less where the flying capacitors share the ripple current.
    profile = make_profile()
    circuit, params, ss = _solved(profile)
    r = powered_readouts(circuit, params, ss.period, profile, test_load_ohms=(10e3,))
    for node in ("S1", "S2", "S3"):
        j = r.nodes.index(node)
        assert 0.08 <= r.ripple_sigma[0, j] / r.ripple_pp[0, j] <= 0.13, node
        assert 0.08 <= r.ac_sigma[0, j] / r.ac_rms[0, j] <= 0.13, node
    # The supply lead carries the output current (charge balance), so its relative spread is
    # the output's: a few percent from the drive, supply and diode tolerances.
    o = r.nodes.index("S3")
    assert 0 < r.loaded_sigma[0, 0, o] < 0.05 * r.dc_loaded[0, 0, o]
    assert 0 < r.supply_sigma[0] / r.supply_amps[0] < 0.05


@pytest.mark.parametrize("topology", ["dc-ladder", "dickson"])
def test_supply_lead_and_driver_rail_share_the_input_current_by_charge_balance(topology):
    # An ideal N-stage pump draws (N+1)·I_out in all: I_out through its supply lead and N·I_out
    # from its clock drivers' rail (Tanzawa & Tanaka, IEEE JSSC 32(8), 1997; from memory).
    # Within 0.5 %: leakage and the meter's burden are the difference here.
    profile = make_profile(board={"topology": topology, "stages": 4}, load={"ohms": 47e3})
    circuit, params, ss = _solved(profile)
    r = powered_readouts(circuit, params, ss.period, profile, spreads=False)
    i_out = period_average(ss.period)[0, circuit.output_node - 1] / 47e3
    assert r.supply_amps[0] == pytest.approx(i_out, rel=0.005)
    assert r.rail_amps[0] == pytest.approx(4 * i_out, rel=0.005)


def test_true_rms_as_a_quadratic_form_of_the_samples_is_the_same_number():
    # Resampling, the discrete Fourier transform and a per-harmonic gain are linear, so the AC
    # power is a quadratic form of the samples (Parseval); the dictionary reads every row that
    # way. Checked here against the direct computation on random waveforms and gains.
    rng = np.random.default_rng(3)
    waves = rng.normal(size=(5, len(UNEVEN) - 1))
    K = waveform.harmonics(UNEVEN, waves).shape[-1]
    gain = rng.uniform(0.2, 1.0, size=K)
    Q = waveform.rms_form(UNEVEN, gain)
    direct = waveform.true_rms(UNEVEN, waves, gain)
    as_form = np.sqrt(np.einsum("bt,ts,bs->b", waves, Q, waves))
    np.testing.assert_allclose(as_form, direct, rtol=1e-10)
    np.testing.assert_allclose(
        waveform.resample(UNEVEN, waves)[:, 0], waves[:, -1], rtol=1e-12
    )  # periodic: the grid's first point is the period's last sample
