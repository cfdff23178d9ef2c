"""Whatever an older (or another) version wrote into one field of one record, the history still
loads, shows and resumes (Hypothesis): the record is shown as it is or as one this version
cannot read, the rest of the board's history is untouched, and nothing in the timeline, the
`history` command, the fleet view, the report or a resumed session raises anything but the
tool's own one-line error.

The board file is the schema-1 history of ``test_old_records`` (a closed session with a repair
and a verification, then an open one) with schema-2 readings of every kind appended to the
open session; one field of one line is then replaced by any JSON value, including the
non-standard ``NaN`` and ``Infinity`` an older writer's ``json.dumps`` let through and numbers
no float can hold.
"""

from __future__ import annotations

import functools
import json
import math
import shutil
import uuid
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from fieldtool.cli import main
from fieldtool.core import history as h
from fieldtool.core.circuit.profile import load_profile
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.errors import FieldtoolError
from fieldtool.core.history.fleet import confirmed_failures, fleet_view
from fieldtool.core.history.sessions import group_sessions
from fieldtool.core.measurement import AC_RMS, CURRENT, DC_LOADED, DIODE_TEST, TYPED, Measurement
from fieldtool.core.report.content import build_report, expectations_for
from fieldtool.core.report.render import to_html, to_markdown
from fieldtool.core.session import BoardSession, unfinished_session
from fieldtool.tui.history import event_words
from tests.conftest import ROOT

DATA = Path(__file__).parent / "data"
PROFILE = "tidegauge-apd-bias"
SERIAL = "TG-0007"

NEWER = [
    Measurement("S3", DC_LOADED, 55.1, TYPED, settled=True, conditions=(("test_load_ohms", 1e5),)),
    Measurement("P2", AC_RMS, 7.4, TYPED, settled=True),
    Measurement("supply", CURRENT, 0.0021, TYPED, settled=True),
    Measurement("D4", DIODE_TEST, 0.58, TYPED, settled=True),
]


def _lines() -> list[str]:
    lines = (DATA / "schema1-TG-0007.jsonl").read_text().splitlines()
    for i, m in enumerate(NEWER):
        record = {
            "schema": 2,
            "id": f"newer-{i}",
            "time": f"2026-04-01T08:1{i}:00.000000Z",
            "board": SERIAL,
            "profile": PROFILE,
            "kind": "reading",
            "session": "old-open-2",
            **m.to_fields(),
        }
        lines.append(json.dumps(record))
    return lines


LINES = _lines()
KEYS = sorted({k for line in LINES for k in json.loads(line)} | {"conditions", "extra"})

json_values = st.recursive(
    st.one_of(
        st.none(),
        st.booleans(),
        st.integers(-(10**30), 10**30),
        st.floats(allow_nan=False, allow_infinity=False),
        st.sampled_from([1e300, -1e300, 0.0, -1.0, 5e-324]),
        st.text(max_size=12),
        st.sampled_from(["", "S4", "D3", "C6", "short", "fixed", "typed", "V", "A", "dc"]),
    ),
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(st.text(max_size=6), inner),
    max_leaves=6,
)
# Written into the JSON text as they are: what json.dumps(allow_nan=True) and a hand edit leave.
raw_tokens = st.sampled_from(["NaN", "Infinity", "-Infinity", "1e999", "-1e999", "1" * 400])


BOARD = load_profile(ROOT / "fieldtool" / "profiles" / f"{PROFILE}.toml")


@functools.cache
def _dictionary(cache_dir: Path):
    return load_or_build(BOARD, cache_dir=cache_dir)


def _write(base: Path, line_no: int, key: str, value, raw: str | None) -> Path:
    logs = base / uuid.uuid4().hex
    folder = logs / PROFILE
    folder.mkdir(parents=True)
    lines = list(LINES)
    record = json.loads(lines[line_no])
    record[key] = "RAW-TOKEN" if raw is not None else value
    text = json.dumps(record)
    lines[line_no] = text.replace('"RAW-TOKEN"', raw) if raw is not None else text
    (folder / f"{SERIAL}.jsonl").write_text("\n".join(lines) + "\n")
    return logs


def _one_line(capsys, argv) -> str:
    try:
        code = main(argv)
    except SystemExit as stop:
        code = stop.code
    captured = capsys.readouterr()
    if code != 0:
        assert code == 2 and captured.err.count("\n") == 1, captured.err
    return captured.out


@settings(
    max_examples=50,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(
    st.integers(0, len(LINES) - 1),
    st.sampled_from(KEYS),
    json_values,
    st.none() | raw_tokens,
)
def test_one_odd_field_never_stops_a_history_loading_showing_or_resuming(
    tmp_path, capsys, dictionary_cache, line_no, key, value, raw
):
    profile, dictionary = BOARD, _dictionary(dictionary_cache)
    logs = _write(tmp_path, line_no, key, value, raw)
    try:
        history = h.read_board(logs, SERIAL)
    except FieldtoolError:
        # Only a change to the envelope can hide the board (its serial or profile rewritten).
        assert key in ("board", "profile") or line_no == 0
        return
    # Every other line is still read as it was written.
    assert len(history.events) + len(history.damaged) == len(LINES)
    for record in history.events:
        words = event_words(record)  # the UI's timeline line
        event = record.event
        if event is None and not record.newer_schema:
            assert words == "unreadable by this version, kept as is"
        if isinstance(event, h.Reading):
            value_read = event.measurement.value
            assert value_read is None or math.isfinite(value_read)
    for argv in (["history", SERIAL], ["history", SERIAL, "--json"], ["fleet", PROFILE]):
        _one_line(capsys, [*argv, "--logs", str(logs)])
    fleet_view(logs, PROFILE, use_cache=False)
    confirmed_failures(logs, PROFILE)
    sessions = group_sessions(history.events)
    report = build_report(history, sessions, PROFILE, expectations_for(profile))
    to_markdown(report, {}, "no plot")
    to_html(report, {}, "no plot")
    unfinished = unfinished_session(logs, SERIAL)
    if unfinished is not None:
        session = BoardSession(profile, SERIAL, dictionary, lambda e, sid: None)
        session.resume(unfinished)
        total = sum(float(s.probability) for s in session.diagnosis.suspects)
        assert total == pytest.approx(1.0, abs=1e-6)
        session.snapshot()
    shutil.rmtree(logs)


@pytest.mark.parametrize(
    "line_no, key, raw, restored",
    [
        # The open session holds seven readings: three DC, one under a test load, one AC, the
        # supply current and a diode test; resuming brings back every one it can read.
        (1, "volts", "NaN", 7),  # a schema-1 reading in the closed session
        (len(LINES) - 4, "value", "Infinity", 6),  # the reading under a test load
        (len(LINES) - 4, "conditions", '{"test_load_ohms": 0}', 6),  # a test load of 0 Ω
        (len(LINES) - 1, "value", "1e999", 6),  # the diode test
    ],
)
def test_a_value_no_float_holds_is_one_unreadable_record_not_a_lost_history(
    tmp_path, dictionary_cache, line_no, key, raw, restored
):
    logs = _write(tmp_path, line_no, key, None, raw)
    history = h.read_board(logs, SERIAL)
    assert history.damaged == () and len(history.events) == len(LINES)
    odd = history.events[line_no]
    assert odd.event is None and not odd.newer_schema
    assert event_words(odd) == "unreadable by this version, kept as is"
    readable = [r for i, r in enumerate(history.events) if i != line_no]
    assert all(r.event is not None for r in readable)
    session = BoardSession(BOARD, SERIAL, _dictionary(dictionary_cache), lambda e, sid: None)
    assert session.resume(unfinished_session(logs, SERIAL)) == restored


def test_the_history_command_flags_a_value_no_node_could_show(tmp_path, capsys):
    """1e300 at S6 (an older version let it through) is shown with what it must be; a reading
    no version writes is shown as unreadable; the rest reads as before."""
    logs = _write(tmp_path, 3, "volts", 1e300, None)
    lines = (logs / PROFILE / f"{SERIAL}.jsonl").read_text().splitlines()
    odd = json.loads(lines[-1])
    lines[-1] = json.dumps({**odd, "value": "RAW"}).replace('"RAW"', "NaN")
    (logs / PROFILE / f"{SERIAL}.jsonl").write_text("\n".join(lines) + "\n")
    assert main(["history", SERIAL, "--logs", str(logs)]) == 0
    out = capsys.readouterr().out
    assert (
        "reading S6 = 1e+300 V (BENCH,DMM-9,0042,1.0 (unsettled), spread 0.9 V) — not a reading "
        "of this board (wrong range or unit?)" in out
    )
    assert "reading (unreadable by this version; kept as is)" in out
    assert out.count("not a reading of this board") == 1
