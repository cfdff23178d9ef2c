"""The typed-reading parser and what the session then does with it, for any text (Hypothesis):
a finite value in the quantity's unit or an overload, else the tool's own one-line error; a
value no node of this board could show is refused by the session with nothing saved, and
whatever it takes leaves a diagnosis whose probabilities are finite and sum to one."""

from __future__ import annotations

import math

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.circuit.reading_range import node_volts_range
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.errors import FieldtoolError, InputError
from fieldtool.core.measurement import QUANTITIES
from fieldtool.core.session import BoardSession
from fieldtool.meters.errors import ReadingParseError
from fieldtool.meters.parse import parse_typed
from tests.conftest import ROOT

PROFILE = load_profile(ROOT / "fieldtool" / "profiles" / "datalogger-eeprom-dickson.toml")

typed_text = st.one_of(
    st.text(max_size=20),
    st.text(alphabet="0123456789.,eE+- kmMunµVAOL", max_size=12),
    st.sampled_from(["1e300", "-1e300", "1e-300", "12900", "OL", "nan", "inf", "9" * 5000]),
    st.floats(-50.0, 50.0).map(lambda x: f"{x:.3f}"),
    st.floats().map(repr),
)


PLAIN_KINDS = sorted(name for name, q in QUANTITIES.items() if not q.conditions)


@settings(max_examples=400, deadline=None)
@given(typed_text, st.sampled_from(PLAIN_KINDS))
def test_any_typed_text_is_a_finite_reading_an_overload_or_one_line(text, kind):
    q = QUANTITIES[kind]
    try:
        m = parse_typed(text, q)
    except ReadingParseError as exc:
        assert isinstance(exc, FieldtoolError)
        message = str(exc)
        assert message and "\n" not in message and len(message) < 400
        return
    assert m.quantity is q and m.settled and m.at is None
    assert m.value is None or math.isfinite(m.value)


@pytest.fixture(scope="module")
def dictionary(dictionary_cache):
    return load_or_build(PROFILE, cache_dir=dictionary_cache)


@settings(
    max_examples=150,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(st.lists(st.tuples(st.integers(0, 99), typed_text), min_size=1, max_size=6))
def test_whatever_is_typed_is_taken_in_range_or_refused_with_nothing_saved(dictionary, typed):
    saved = []
    session = BoardSession(PROFILE, "DL-1", dictionary, lambda e, sid: saved.append(e))
    session.open()
    plausible = node_volts_range(PROFILE)
    nodes = dictionary.nodes
    for index, text in typed:
        try:
            m = parse_typed(text).placed(nodes[index % len(nodes)])
        except ReadingParseError:
            continue
        before = len(saved)
        try:
            diagnosis = session.take(m)
        except InputError as exc:
            assert "beyond what any node of this board can show" in str(exc)
            assert not plausible.contains(m.value)
            assert len(saved) == before  # nothing saved
            continue
        assert m.value is None or plausible.contains(m.value)
        assert len(saved) == before + 1
        total = sum(float(s.probability) for s in diagnosis.suspects)
        assert math.isfinite(total) and total == pytest.approx(1.0, abs=1e-6)
