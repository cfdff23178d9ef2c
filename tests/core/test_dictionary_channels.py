"""The fault dictionary's channels beyond DC volts against the readouts they stand for.

The dictionary computes every kind of reading for every row in bulk, with shortcuts
(``dictionary`` module docstring): the AC reading as one quadratic form with the healthy
board's meter gain rescaled per row, the diode test run only where a row's unpowered network
differs near the part, the test loads from each row's own steady state. Each shortcut is
checked here against the direct computation of ``readouts`` (whose own checks against ngspice
and textbook formulas are in ``test_readouts.py`` and ``test_readouts_ngspice.py``), for
chosen rows (worn capacitors, leaky diodes, opens, shorts) or every row.
"""

import functools

import numpy as np
import pytest

from fieldtool.core.circuit.readouts.diode_test import diode_test_rows
from fieldtool.core.circuit.readouts.powered import powered_readouts
from fieldtool.core.circuit.readouts.spread import accuracy_sigma
from fieldtool.core.circuit.solver import steady_state
from fieldtool.core.diagnosis import dictionary_cache as cache
from fieldtool.core.diagnosis.dictionary import affected_pairs, build, profile_variants
from fieldtool.core.errors import InputError
from tests.conftest import make_profile

PROFILE = make_profile(load={"ohms": 10000.0}, test_loads={"ohms": [10000.0]})
DICKSON = make_profile(
    board={"topology": "dickson", "stages": 3},
    load={"ohms": 10000.0},
    test_loads={"ohms": [4700.0]},
)
# Rows whose readings beyond DC differ most from healthy: worn and leaky parts, opens, shorts.
CHOSEN = ("healthy", "C4:lowcap", "C4:esr", "C3:lowcap", "D2:leaky", "D3:open", "C2:short")


@functools.cache
def _built(which: str):
    profile = PROFILE if which == "dc-ladder" else DICKSON
    return build(profile)


def _rows(d, keys):
    return np.concatenate([d.rows_of(k) for k in keys if any(h.key == k for h in d.hypotheses)])


@pytest.mark.parametrize("which", ["dc-ladder", "dickson"])
def test_powered_channels_match_the_readouts_solved_row_by_row(which):
    d = _built(which)
    profile = d.profile
    circuit, params, _, _ = profile_variants(profile)
    rows = _rows(d, CHOSEN)
    # The dictionary's rows are the converged variants in order; here every one converged.
    assert len(d.row_hypothesis) == params.batch
    p = params.take(rows)
    ss = steady_state(circuit, p, steps_per_period=80)
    ok = ss.converged
    direct = powered_readouts(circuit, p, ss.period, profile, spreads=False)
    # The dictionary solves 40 steps a period and the readouts 80 (as `expect` does); each
    # shortcut must stay well inside the spread the dictionary carries for the row (its model
    # floors: 5 % on a waveform, 0.5-1 % on a period average, and the severity step).

    def within(ours, sigma, theirs, what):
        good = ok.reshape(-1, *(1,) * (ours.ndim - 1)) & np.isfinite(ours) & np.isfinite(theirs)
        off = np.abs(ours - theirs)[good] / sigma[good]
        assert off.max() < 1.5, (what, float(off.max()))

    within(d.ripple[rows], d.ripple_sigma[rows], direct.ripple_pp, "ripple")
    within(d.ac_rms[rows], d.ac_sigma[rows], direct.ac_rms, "ac-rms")
    q = d.rails.index("supply")
    within(d.current[rows, q], d.current_sigma[rows, q], direct.supply_amps, "supply")
    if "drive" in d.rails:
        r = d.rails.index("drive")
        within(d.current[rows, r], d.current_sigma[rows, r], direct.rail_amps, "drive")
    within(d.loaded[rows], d.loaded_sigma[rows], direct.dc_loaded, "dc-loaded")


def test_diode_tests_run_only_where_a_row_changes_them_and_equal_a_full_run():
    d = _built("dc-ladder")
    circuit, params, _, _ = profile_variants(d.profile)
    B, k = d.diode_volts.shape
    variant = np.repeat(np.arange(B), k)
    part = np.tile(np.arange(k), B)
    full = diode_test_rows(
        circuit,
        params,
        d.profile.instruments,
        variant,
        part,
        np.zeros(B * k, dtype=bool),
        settle=False,
    )
    volts = full.volts.reshape(B, k)
    both_ol = np.isnan(volts) & np.isnan(d.diode_volts)
    close = np.isclose(volts, d.diode_volts, rtol=0, atol=1e-4)
    assert (both_ol | close).all(), np.argwhere(~(both_ol | close))[:5]
    # and the shortcut did skip work: far fewer pairs run than every pair
    v, _ = affected_pairs(circuit, params)
    assert 0 < len(v) < 0.5 * B * k
    # a leaky diode reads low on its own test (the "a leaky or shorted diode reads low")
    healthy = d.diode_volts[d.rows_of("healthy")[0]]
    leaky = d.rows_of("D2:leaky")
    j = d.diodes.index("D2")
    # (diode current 1 mA less what the leak takes: lower the leakier, Shockley's equation)
    lower = d.diode_volts[leaky, j][np.argsort(-d.row_severity[leaky])]  # leak ohms falling
    assert (np.diff(lower) < 0).all()
    # by more than the meter's diode-test accuracy (its 2σ) at the leakiest grid point
    assert lower[-1] < healthy[j] - 2 * accuracy_sigma(d.profile, "diode-test", healthy[j])


def test_a_test_load_drop_cancels_the_shared_tolerances():
    # Diode drops and the drive move the loaded and unloaded readings alike; the drop's spread
    # is therefore smaller than either reading's (GUM, JCGM 100:2008 §5.2, correlated inputs).
    d = _built("dc-ladder")
    out = d.output_node
    h = d.rows_of("healthy")[0]
    mu, tol = d.drop_channel(out, 10000.0)
    j = d.node_index(out)
    assert mu[h] > 0
    assert tol[h] < d.sigma[h, j]
    assert tol[h] < d.loaded_sigma[h, 0, j]


def test_channels_refuse_what_the_board_does_not_allow():
    d = _built("dc-ladder")
    with pytest.raises(InputError, match="not one of this board's test loads"):
        d.channel("S3", "dc-loaded", (("test_load_ohms", 470.0),))
    with pytest.raises(InputError, match="not a diode of this board"):
        d.channel("D99", "diode-test")
    with pytest.raises(InputError, match="can be read at supply"):
        d.channel("OUT", "current")
    with pytest.raises(InputError, match="is not on"):
        d.channel("S9", "dc")
    keys = d.channel_keys()
    kinds = {q for _, q, _ in keys}
    assert kinds == {"dc", "ripple-pp", "ac-rms", "current", "dc-loaded", "diode-test"}


def test_every_channel_survives_the_cache(tmp_path):
    d = _built("dickson")
    path = tmp_path / "d.npz"
    cache.save(d, path)
    again = cache.load(path, d.profile)
    assert again is not None
    for name in cache._ARRAYS:
        np.testing.assert_array_equal(getattr(again, name), getattr(d, name))
    assert again.channel_keys() == d.channel_keys()
    assert again.diode_lift == d.diode_lift and again.output_node == d.output_node
