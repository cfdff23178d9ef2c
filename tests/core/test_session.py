"""The one session workflow, as plain Python: what it saves, in which order, and its rules."""

from __future__ import annotations

import numpy as np
import pytest

from fieldtool.core import history as h
from fieldtool.core.circuit.expect import expect
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.faults import parse_fault
from fieldtool.core.errors import InputError
from fieldtool.core.history.sessions import Session
from fieldtool.core.measurement import CURRENT, DC_LOADED, DIODE_TEST, TYPED, Measurement
from fieldtool.core.session import BoardSession, choose_priors, history_failures
from tests.conftest import ROOT
from tests.readings import dc

PROFILE = load_profile(ROOT / "fieldtool" / "profiles" / "datalogger-eeprom-dickson.toml")


@pytest.fixture(scope="module")
def dictionary(dictionary_cache):
    return load_or_build(PROFILE, cache_dir=dictionary_cache)


@pytest.fixture
def saved():
    return []


@pytest.fixture
def session(dictionary, saved):
    return BoardSession(PROFILE, "DL-1", dictionary, lambda e, sid: saved.append((e, sid)))


def faulted(spec: str) -> dict[str, float]:
    fault = parse_fault(spec, PROFILE)
    return {n.node: round(n.volts, 3) for n in expect(PROFILE, fault=fault).nodes}


def test_a_whole_session_in_order(session, saved):
    sid = session.open()
    volts = faulted("D3:open")
    session.take(*(dc(n, v) for n, v in volts.items()))
    assert session.diagnosis.top.key == "D3:open"
    first = h.Action("D3", "replaced", "open")
    second = h.Action("C2", "resoldered")
    session.record_repair(first, second)  # done together, before any verification
    assert session.phase == "verifying" and session.taken == {}
    healthy = {n.node: n.volts for n in expect(PROFILE).nodes}
    session.take(dc("OUT", healthy["OUT"]))
    session.close("fixed")
    kinds = [type(e).__name__ for e, _ in saved]
    assert kinds == ["SessionOpened"] + ["Reading"] * len(volts) + [
        "DiagnosisSnapshot",
        "Action",
        "Action",
        "Verification",
        "DiagnosisSnapshot",
        "SessionClosed",
    ]
    assert {s for _, s in saved} == {sid}
    snapshot = saved[len(volts) + 1][0]
    top = snapshot.suspects[0]
    assert (top.designator, top.mode) == ("D3", "open") and len(snapshot.suspects) == 5
    healthy_snapshot = saved[-2][0]
    assert any(s.designator == "" and s.mode == "healthy" for s in healthy_snapshot.suspects)
    assert session.closed and session.at_repairs[0][0].startswith("D3")


def test_a_measurement_not_at_a_node_of_the_board_saves_nothing(session, saved):
    session.open()
    with pytest.raises(InputError, match="not a node of this board"):
        session.take(dc("P1", 3.0), dc("S9", 1.0))
    with pytest.raises(InputError, match="not a node"):
        session.take(dc(None, 1.0))  # a sample nobody placed
    assert len(saved) == 1 and session.taken == {}


def test_a_node_read_again_keeps_the_last_value(session):
    session.open()
    session.take(dc("P1", 3.0))
    session.take(dc("P1", 3.3))
    assert session.volts_by_node() == {"P1": 3.3} and session.latest("P1").value == 3.3


def test_resuming_after_a_repair_starts_from_the_verifications(dictionary, saved):
    records = []
    opened = h.SessionOpened("ana", PROFILE.digest, "0.1.0", session_id="s-7")
    events = [opened, h.Reading(dc("P1", 1.0)), h.Action("D3", "replaced", "open")]
    events.append(h.Verification(dc("P2", 2.0)))
    for i, event in enumerate(events):
        records.append(
            h.Record(
                h.schema_for(event.kind),
                f"r{i}",
                f"2026-01-0{i + 1}T00:00:00.000000Z",
                "DL-1",
                PROFILE.name,
                event.kind,
                h.event_fields(event),
                session="s-7",
            )
        )
    session = BoardSession(PROFILE, "DL-1", dictionary, lambda e, sid: saved.append((e, sid)))
    assert session.resume(Session("s-7", tuple(records))) == 2
    assert session.phase == "verifying" and session.volts_by_node() == {"P2": 2.0}
    assert [a.designator for a in session.actions] == ["D3"]
    assert session.resumed_from == "2026-01-01T00:00:00.000000Z" and saved == []


def test_priors_come_from_a_source_of_confirmed_failures(dictionary, tmp_path):
    hyps = dictionary.hypotheses
    published = choose_priors(PROFILE, hyps)
    assert not published.from_fleet
    none_yet = choose_priors(PROFILE, hyps, history_failures(tmp_path / "none"))
    assert none_yet.source == published.source
    np.testing.assert_array_equal(none_yet.probability, published.probability)
    store = {PROFILE.name: {("D3", "open"): 5}}  # any store: a callable by profile name
    fleet = choose_priors(PROFILE, hyps, lambda name: store.get(name, {}))
    assert fleet.from_fleet and fleet.of("D3:open") > 2 * published.of("D3:open")


def test_every_kind_is_taken_where_it_is_measured_and_saved(session, saved):
    """A current goes in a supply lead, a diode test across a diode, each saved as it is;
    the history carries the kind and its settings."""
    session.open()
    assert session.places["rail"] and session.places["part"][0] == "D1"
    rail = session.places["rail"][0]
    session.take(Measurement(rail, CURRENT, 3.1e-4, TYPED, settled=True))
    session.take(
        Measurement(
            "OUT", DC_LOADED, 11.2, TYPED, settled=True, conditions=(("test_load_ohms", 1e5),)
        )
    )
    with pytest.raises(InputError, match="take the power-off step first"):
        session.take(Measurement("D2", DIODE_TEST, 0.6, TYPED, settled=True))
    session.power(False)
    with pytest.raises(InputError, match="power the board again first"):
        session.take(dc("OUT", 12.0))
    with pytest.raises(InputError, match="not a part of this board"):
        session.take(Measurement("OUT", DIODE_TEST, 0.6, TYPED, settled=True))
    session.take(Measurement("D2", DIODE_TEST, 0.6, TYPED, settled=True))
    session.power(True)
    taken = [e.measurement for e, _ in saved if isinstance(e, h.Reading)]
    assert [(m.quantity.name, m.at) for m in taken] == [
        ("current", rail),
        ("dc-loaded", "OUT"),
        ("diode-test", "D2"),
    ]
    assert taken[1].condition("test_load_ohms") == 1e5
    # nodes first in ladder order, then rails, then parts
    assert [m.at for m in session.measurements()] == ["OUT", rail, "D2"]


def test_the_reading_that_found_the_fault_is_the_one_that_raised_it_most(session):
    """Replaying the probing readings in the order taken: with D3 open the output reads 0 V
    instead of about 15 V, and that reading is what moves the odds onto D3 open; S0 (the
    supply, unchanged) before it and P1 after it move them little."""
    session.open()
    volts = faulted("D3:open")
    for n in ("S0", "OUT", "P1"):
        session.take(dc(n, volts[n], taken=f"2026-01-01T00:00:0{len(session.taken)}Z"))
    m, odds = session.deciding("D3:open")
    assert m is not None and m.at == "OUT"
    assert odds == pytest.approx(
        sum(s.probability for s in session.diagnosis.suspects if s.key == "D3:open")
    )
    session.record_repair(h.Action("D3", "replaced", "open"))
    assert session.deciding("D3:open")[0] == m  # still the probing phase's readings
