"""Priors from published failure-mode shares and from the fleet; the dictionary's disk cache."""

import os

import numpy as np
import pytest

from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.diagnosis import dictionary_cache as cache
from fieldtool.core.diagnosis.faults import catalog
from fieldtool.core.diagnosis.priors import HEALTHY_PRIOR, fleet_priors, published_priors
from tests.conftest import make_profile

ELECTROLYTIC = make_profile(designators={"D2": "CR2"})
CERAMIC = make_profile(capacitor={"farads": 100e-9}, diode={"family": "rectifier"})


def _priors(profile, confirmed=None):
    circuit, _ = build_circuit(profile)
    hyps = catalog(profile, circuit)
    if confirmed is None:
        return published_priors(profile, hyps)
    return fleet_priors(profile, hyps, confirmed)


def test_published_mode_shares():
    # RAC FMD-97 via MIL-HDBK-338B: aluminium electrolytic open 35 %, short 53 %,
    # leakage 10 %, value change 2 %; ceramic open 22 %, short 49 %, value change 29 %.
    p = _priors(ELECTROLYTIC)
    assert p.of("C1:short") / p.of("C1:open") == pytest.approx(53 / 35)
    assert p.of("C1:leaky") / p.of("C1:open") == pytest.approx(10 / 35)
    assert p.of("C1:lowcap") + p.of("C1:esr") == pytest.approx(p.of("C1:open") * 2 / 35)
    c = _priors(CERAMIC)
    assert c.of("C1:short") / c.of("C1:open") == pytest.approx(49 / 22)
    assert c.of("C1:lowcap") / c.of("C1:open") == pytest.approx(29 / 22)
    # diodes (FMD-97 family, from memory): rectifier short 51 %, open 29 %
    assert c.of("D1:short") / c.of("D1:open") == pytest.approx(51 / 29)
    # the default "general" diode: short 49 %, open 36 %
    assert p.of("D1:short") / p.of("D1:open") == pytest.approx(49 / 36)


def test_priors_are_a_distribution_with_equal_parts():
    p = _priors(ELECTROLYTIC)
    assert p.probability.sum() == pytest.approx(1.0)
    assert p.of("healthy") == pytest.approx(HEALTHY_PRIOR)
    d1 = sum(p.of(f"D1:{m}") for m in ("open", "short", "leaky", "weak"))
    c1 = sum(p.of(f"C1:{m}") for m in ("open", "short", "lowcap", "esr", "leaky"))
    assert d1 == pytest.approx(c1)
    assert all("published" in s or "common practice" in s for s in p.source)


def test_fleet_counts_raise_that_part_and_say_so():
    base = _priors(ELECTROLYTIC)
    fleet = _priors(ELECTROLYTIC, {("CR2", "open"): 6, ("C4", "short"): 2, ("Q9", "open"): 5})
    assert fleet.of("D2:open") > 3 * base.of("D2:open")
    assert fleet.of("C4:short") > base.of("C4:short")
    assert fleet.of("D1:open") < base.of("D1:open")
    assert fleet.of("healthy") == pytest.approx(base.of("healthy"))
    assert fleet.probability.sum() == pytest.approx(1.0)
    i = fleet.keys.index("D2:open")
    assert fleet.source[i].startswith("fleet: 6 confirmed of 8 repairs")


def test_cache_round_trip_and_invalidation(tmp_path):
    profile = make_profile(board={"stages": 2})
    first = cache.load_or_build(profile, tmp_path)
    files = list(tmp_path.glob("*.npz"))
    assert len(files) == 1
    again = cache.load_or_build(profile, tmp_path)
    np.testing.assert_array_equal(first.mean, again.mean)
    assert [h.key for h in first.hypotheses] == [h.key for h in again.hypotheses]
    changed = make_profile(board={"stages": 2}, drive={"volts": 5.5})
    assert cache.cache_key(changed) != cache.cache_key(profile)
    other = cache.load_or_build(changed, tmp_path)
    assert len(list(tmp_path.glob("*.npz"))) == 2
    assert not np.allclose(other.mean, first.mean)


def test_damaged_cache_is_rebuilt(tmp_path):
    profile = make_profile(board={"stages": 2})
    built = cache.load_or_build(profile, tmp_path)
    path = cache.cache_path(tmp_path, profile)
    path.write_bytes(path.read_bytes()[:200])
    assert cache.load(path, profile) is None
    rebuilt = cache.load_or_build(profile, tmp_path)
    np.testing.assert_allclose(rebuilt.mean, built.mean)
    assert cache.load(path, profile) is not None


@pytest.mark.skipif(os.geteuid() == 0, reason="root ignores folder permissions")
def test_unwritable_cache_still_answers(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    folder.chmod(0o500)
    try:
        d = cache.load_or_build(make_profile(board={"stages": 1}), folder)
        assert len(d.mean) > 1
    finally:
        folder.chmod(0o700)


def test_unwritable_cache_location_still_answers(tmp_path):
    blocker = tmp_path / "file"
    blocker.write_text("not a folder")
    d = cache.load_or_build(make_profile(board={"stages": 1}), blocker / "cache")
    assert len(d.mean) > 1
