"""Ranking and probing: properties any Bayesian diagnosis must keep, and plain cases.

Properties (Bayes' rule and information theory, e.g. Cover & Thomas, *Elements of
Information Theory*, 2nd ed., 2006, §2.5 and §2.6): posteriors sum to 1; the expected
posterior entropy after a reading never exceeds the current one (information gain ≥ 0);
a reading equal to the healthy expectation never raises a fault's odds against healthy.
"""

import functools
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.reading_range import node_volts_range
from fieldtool.core.diagnosis import ranking as dg
from fieldtool.core.diagnosis.dictionary import build
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.diagnosis.ranking import chi2_sf, diagnose
from fieldtool.core.errors import InputError
from fieldtool.core.measurement import Measurement
from tests.conftest import make_profile
from tests.readings import dc

PROFILE = make_profile(load={"ohms": 10000.0})


@functools.cache
def _dictionary():
    return build(PROFILE)


@pytest.fixture
def d():
    return _dictionary()


def _readings(d, values: dict) -> list[Measurement]:
    return [dc(n, v) for n, v in values.items()]


SETTINGS = settings(max_examples=25, deadline=None)


@SETTINGS
@given(data=st.data())
def test_posterior_sums_to_one_and_gains_are_not_negative(data):
    d = _dictionary()
    nodes = data.draw(st.lists(st.sampled_from(d.nodes), unique=True, max_size=4))
    values = {n: data.draw(st.floats(-30.0, 30.0)) for n in nodes}
    result = diagnose(d, _readings(d, values))
    total = sum(s.probability for s in result.suspects)
    assert total == pytest.approx(1.0, abs=1e-9)
    probs = [s.probability for s in result.suspects]
    assert probs == sorted(probs, reverse=True)
    assert all(g >= 0.0 for g in result.gains.values())
    assert set(result.gains) == set(d.nodes) - set(nodes)


@SETTINGS
@given(
    picks=st.lists(st.integers(0, 6), unique=True, max_size=3),
    volts=st.lists(st.floats(-30.0, 30.0), min_size=3, max_size=3),
    probe=st.integers(0, 6),
)
def test_expected_entropy_never_exceeds_current(picks, volts, probe):
    d = _dictionary()
    nodes = [d.nodes[i] for i in picks]
    values = dict(zip(nodes, volts, strict=False))
    result = diagnose(d, _readings(d, values))
    post = np.array([s.probability for s in result.suspects])
    h_now = float(-(post[post > 0] * np.log2(post[post > 0])).sum())
    # recompute the raw expectation (before any clamping) for one unmeasured node
    free = [n for n in d.nodes if n not in nodes]
    j = d.node_index(free[probe % len(free)])
    index = {s.key: s.probability for s in result.suspects}
    w = np.array([index[d.hypotheses[h].key] for h in d.row_hypothesis])
    counts = np.bincount(d.row_hypothesis)
    w = w / counts[d.row_hypothesis]
    mu = d.mean[:, j]
    sd = np.sqrt(d.sigma[:, j] ** 2 + d.meter_sigma(mu) ** 2)
    starts = np.flatnonzero(np.r_[True, np.diff(d.row_hypothesis) != 0])
    expected = dg._expected_entropy(mu, sd, w / w.sum(), starts)
    # exact in theory; 6-point Gauss–Hermite quadrature is good to about 1e-5 bits here
    assert expected <= h_now + 1e-4


@SETTINGS
@given(nodes=st.lists(st.integers(0, 6), unique=True, min_size=1, max_size=7))
def test_healthy_readings_never_favour_a_fault(nodes):
    d = _dictionary()
    healthy = d.rows_of("healthy")[0]
    readings = [dc(d.nodes[j], float(d.mean[healthy, j])) for j in nodes]
    prior = diagnose(d, [])
    after = diagnose(d, readings)
    p0 = {s.key: s.probability for s in prior.suspects}
    p1 = {s.key: s.probability for s in after.suspects}
    for key in p1:
        if key == "healthy":
            continue
        assert p1[key] / p1["healthy"] <= p0[key] / p0["healthy"] * (1 + 1e-9)
        assert p1[key] <= p1["healthy"]


@pytest.mark.parametrize("spec", ["D3:open", "D4:open", "C3:short", "D2:short", "C5:open"])
def test_guided_probing_finds_hard_faults_from_the_engine_s_own_readings(d, spec):
    truth = {n.node: n.volts for n in expect(PROFILE, fault=parse_fault(spec, PROFILE)).nodes}
    readings = []
    while (result := diagnose(d, readings)).next_probe and len(readings) < 7:
        readings.append(dc(result.next_probe, truth[result.next_probe]))
    members = {m for a in result.ambiguity for m in a.members}
    assert result.top.key == spec or spec in members
    assert result.top.probability > 0.45
    assert not result.fit.no_fit


def test_readings_no_hypothesis_explains_are_flagged(d):
    result = diagnose(d, _readings(d, {"S1": 40.0, "S2": -7.0, "S3": 3.0}))
    assert result.fit.no_fit
    assert "no hypothesis explains these readings" in result.fit.text.lower()
    assert result.fit.worst_node in {"S1", "S2", "S3"}
    assert result.conditional and result.fit.text.startswith("re-read S")


def test_overload_without_a_meter_range_is_noted_not_used(d):
    result = diagnose(d, [dc("S3", None)])
    assert result.ignored == (
        "S3: OL (over range) tells nothing without the meter's range: add [meter] range_volts "
        "to the profile, or read it on a higher range",
    )
    assert result.top.key == "healthy"


def test_overload_with_a_meter_range_counts_as_beyond_it():
    """With the range known, OL is a censored reading (|V| beyond the range): hypotheses that
    keep the node inside the range lose, and an OL no hypothesis reaches is flagged."""
    d = replace(_dictionary(), profile=replace(PROFILE, meter_range_volts=10.0))
    healthy_s3 = d.band("S3").expected
    assert healthy_s3 > 10.0  # the healthy board reads OL at S3 on a 10 V range
    before = {s.key: s.probability for s in diagnose(d, []).suspects}
    after = diagnose(d, [dc("S3", None)])
    probs = {s.key: s.probability for s in after.suspects}
    assert after.ignored == () and not after.fit.no_fit
    assert probs["D3:open"] < before["D3:open"] / 10  # S3 collapses with D3 open: ruled out
    assert after.next_probe != "S3"
    s0 = diagnose(d, [dc("S0", None)])  # 5 V supply: nothing puts it beyond 10 V
    assert s0.fit.no_fit and s0.fit.worst_node == "S0"
    assert "beyond the meter's 10 V range" in s0.fit.text


def test_unknown_or_repeated_nodes_are_refused(d):
    with pytest.raises(InputError, match="node 'S9' is not on"):
        diagnose(d, [dc("S9", 1.0)])
    with pytest.raises(InputError, match="read twice"):
        diagnose(d, [dc("S1", 1.0), dc("S1", 1.1)])


def test_json_shape(d):
    out = diagnose(d, _readings(d, {"S3": 0.5})).to_json()
    assert {"suspects", "next_probe", "ambiguity", "fit"} <= set(out)
    healthy = [s for s in out["suspects"] if s["mode"] == "healthy"]
    assert healthy and healthy[0]["component"] is None
    probs = [s["probability"] for s in out["suspects"]]
    assert probs == sorted(probs, reverse=True)


@pytest.mark.parametrize(
    "x, k, expected",
    # Abramowitz & Stegun 1964, Table 26.8 (χ² upper tail), and exp(−x/2) for k = 2.
    [
        (3.841, 1, 0.05),
        (5.991, 2, 0.05),
        (7.815, 3, 0.05),
        (6.635, 1, 0.01),
        (16.812, 6, 0.01),
        (2.0, 2, np.exp(-1.0)),
        (0.0, 4, 1.0),
    ],
)
def test_chi2_tail_against_tables(x, k, expected):
    assert chi2_sf(x, k) == pytest.approx(expected, rel=2e-3)


@settings(max_examples=60, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.integers(0, 6),
            st.floats(allow_nan=False, allow_infinity=False) | st.sampled_from([1e300, -1e300]),
        ),
        min_size=1,
        max_size=4,
        unique_by=lambda t: t[0],
    )
)
def test_any_reading_ranks_or_is_flagged_never_crashes(picks):
    """A finite reading no node could show (1e300: a measurement refuses nan and inf itself) is
    left out and flagged as a wrong range, unit or node; the posterior stays a distribution."""
    d = _dictionary()
    readings = [dc(d.nodes[i], v) for i, v in picks]
    result = diagnose(d, readings)
    probabilities = np.array([s.probability for s in result.suspects])
    assert np.isfinite(probabilities).all() and abs(probabilities.sum() - 1) < 1e-9
    plausible = node_volts_range(PROFILE)
    if any(not plausible.contains(v) for _, v in picks):
        assert result.fit.no_fit and "wrong range, unit or node?" in result.fit.text
