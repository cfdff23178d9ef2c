"""A repair report's content: per session, readings against expected bands, suspects, actions.

Pure: it takes a board's history and the board's expected readings and returns frozen data
that ``report_render`` turns into Markdown or HTML. The expected readings and their bands come
from the fault dictionary (``FaultDictionary.band``: part tolerances, model and meter
accuracy, about 95 %); where the dictionary is not available the solver's expected reading is
used with the meter's accuracy alone as the band, and the report says so.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.reading_range import node_volts_range
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.hazard import SIGNAL_WORD, signal_word
from fieldtool.core.history import BoardHistory, HistoryError, Reading, Record, now_utc
from fieldtool.core.history.sessions import ConfirmedFailure, Session, confirmed_in
from fieldtool.core.measurement import DC, Measurement
from fieldtool.core.plausible import Range
from fieldtool.core.words import conditions_words, reading_words

# A reading no node of the board could show (an older version let it into the history): shown,
# never plotted or compared with a band.
WRONG_RANGE = "wrong range or unit (not plotted)"

CAUTIONS = (
    "A voltage multiplier stores charge and can hold a dangerous voltage long after "
    "power-off. Before touching the board: power off, discharge every capacitor through a "
    "resistor rated for the voltage and energy, then verify with the meter that each node "
    "is near 0 V.",
    "Capacitors can recover part of their voltage after a discharge (dielectric absorption): "
    "check again before handling, and keep a discharge lead on while you work.",
    "Use a meter and probes rated (CAT and voltage) for the highest node on the board.",
    "This report gives estimates, not clearances. Local electrical-safety codes and licensed "
    "practice take precedence over anything it shows.",
)


@dataclass(frozen=True)
class Expected:
    """What one node should read on a healthy board, and its normal range."""

    node: str
    label: str
    volts: float
    low: float
    high: float


@dataclass(frozen=True)
class Expectations:
    """Expected readings along the ladder (probe order) and where their bands come from."""

    nodes: tuple[Expected, ...]
    source: str
    plausible: Range | None = None  # what any node of the board could show

    def get(self, node: str) -> Expected | None:
        """The expectation for a node, if the profile has that node."""
        return next((e for e in self.nodes if e.node == node), None)


@dataclass(frozen=True)
class Row:
    """One measured node against its expectation."""

    node: str
    label: str
    volts: float | None  # None: over range
    expected: Expected | None
    status: str  # "in band", "low", "high", "over range", "no expectation", WRONG_RANGE
    time: str


@dataclass(frozen=True)
class OtherRow:
    """One reading of a kind beyond DC volts, in words: what, where, the value, when."""

    what: str  # the kind in words, with its settings ("DC volts under a test load with ...")
    at: str
    value: str  # with its unit, or "OL (over range)"
    time: str


@dataclass(frozen=True)
class SessionPart:
    """One session of the report."""

    id: str
    start: str
    technician: str
    outcome: str | None
    profile: str
    readings: tuple[Row, ...]
    verifications: tuple[Row, ...]
    suspects: tuple[tuple[str, str, float], ...]  # last diagnosis: (designator, mode, p)
    actions: tuple[dict[str, Any], ...]
    confirmed: tuple[ConfirmedFailure, ...]
    profile_changed: bool  # recorded with a different profile file than the one used here
    # readings beyond DC volts (ripple, AC, current, under a test load, diode tests), the
    # last of each kind at each place, before and after the repair
    other_readings: tuple[OtherRow, ...] = ()
    other_verifications: tuple[OtherRow, ...] = ()


@dataclass(frozen=True)
class Report:
    """Everything a report shows."""

    board: str
    profile: str
    generated: str
    expectations: Expectations | None
    expectations_note: str
    sessions: tuple[SessionPart, ...]
    damaged: int
    cautions: tuple[str, ...] = CAUTIONS
    signal_word: str = SIGNAL_WORD  # heads the cautions: WARNING, or CAUTION on a low board


def expectations_for(profile: Profile) -> Expectations:
    """Expected readings with the fault dictionary's healthy bands."""
    dictionary = load_or_build(profile)
    rows = []
    for node in dictionary.nodes:
        band = dictionary.band(node)
        label = profile.labels.get(node, "")
        rows.append(Expected(node, label, band.expected, band.low, band.high))
    return Expectations(
        tuple(rows),
        "healthy band from the fault dictionary: part tolerances, model and meter accuracy "
        "(about 95 % of healthy boards read inside it)",
        node_volts_range(profile),
    )


def _row(measurement: Measurement, time: str, expectations: Expectations | None) -> Row:
    node, value = str(measurement.at), measurement.value
    exp = expectations.get(node) if expectations else None
    plausible = expectations.plausible if expectations else None
    if value is None:
        status = "over range"
    elif plausible is not None and not plausible.contains(value):
        status = WRONG_RANGE
    elif exp is None:
        status = "no expectation"
    elif value < exp.low:
        status = "low"
    elif value > exp.high:
        status = "high"
    else:
        status = "in band"
    label = exp.label if exp else ""
    return Row(node, label, value, exp, status, time)


def _latest_per_node(records: list[Record], expectations: Expectations | None) -> tuple[Row, ...]:
    """The last DC reading at each node (records of any schema this version reads)."""
    latest: dict[str, tuple[Measurement, str]] = {}
    for record in records:  # oldest first: a node probed again keeps its last reading
        event = record.event
        if isinstance(event, Reading) and event.measurement.quantity == DC:
            latest[str(event.measurement.at)] = (event.measurement, record.time)
    order = [e.node for e in expectations.nodes] if expectations else []
    ranked = sorted(latest, key=lambda n: (order.index(n) if n in order else len(order), n))
    return tuple(_row(*latest[n], expectations) for n in ranked)


def _other_kinds(records: list[Record]) -> tuple[OtherRow, ...]:
    """The last reading of each kind beyond DC volts at each place (and test load)."""
    latest: dict[tuple, OtherRow] = {}
    for record in records:  # oldest first: a reading taken again keeps its last value
        event = record.event
        if not isinstance(event, Reading) or event.measurement.quantity == DC:
            continue
        m = event.measurement
        value = reading_words(m.value, m.unit)
        what = m.quantity.words + conditions_words(m.conditions)
        latest[m.at, m.quantity.name, m.conditions] = OtherRow(what, str(m.at), value, record.time)
    return tuple(latest.values())


def _suspects(session: Session) -> tuple[tuple[str, str, float], ...]:
    diagnoses = session.of_kind("diagnosis")
    if not diagnoses:
        return ()
    out = []
    for s in diagnoses[-1].fields.get("suspects", []):
        if isinstance(s, dict) and isinstance(s.get("probability"), int | float):
            out.append((str(s.get("designator", "")), str(s.get("mode", "")), s["probability"]))
    return tuple(out)


def _part(session: Session, expectations: Expectations | None, digest: str) -> SessionPart:
    opened = session.opened
    fields = opened.fields if opened else {}
    recorded_hash = fields.get("profile_hash")
    return SessionPart(
        id=session.id or "",
        start=session.start,
        technician=str(fields.get("technician", "?")),
        outcome=session.outcome,
        profile=session.profile,
        readings=_latest_per_node(session.of_kind("reading"), expectations),
        verifications=_latest_per_node(session.of_kind("verification"), expectations),
        suspects=_suspects(session),
        actions=tuple({"time": r.time, **r.fields} for r in session.of_kind("action")),
        confirmed=confirmed_in(session),
        profile_changed=bool(digest and recorded_hash and recorded_hash != digest),
        other_readings=_other_kinds(session.of_kind("reading")),
        other_verifications=_other_kinds(session.of_kind("verification")),
    )


def pick_sessions(sessions: Sequence[Session], wanted: str | None) -> tuple[Session, ...]:
    """Every session, or the one whose id starts with ``wanted`` (unambiguously)."""
    real = tuple(s for s in sessions if s.id is not None)
    if wanted is None:
        return real
    matches = [s for s in real if s.id and s.id.startswith(wanted.strip())]
    if len(matches) == 1:
        return (matches[0],)
    listed = ", ".join(f"{s.id[:12]} ({s.start[:10]})" for s in real if s.id)
    if not matches:
        raise HistoryError(f"no session {wanted!r} on this board; sessions: {listed or 'none'}")
    raise HistoryError(f"session {wanted!r} is ambiguous; give more of the id: {listed}")


def build_report(
    history: BoardHistory,
    sessions: Sequence[Session],
    profile_name: str,
    expectations: Expectations | None,
    expectations_note: str = "",
    digest: str = "",
    safe_volts: float | None = None,
) -> Report:
    """The report for the chosen sessions of one board.

    ``safe_volts`` (the profile's safe level) lets the cautions say CAUTION instead of
    WARNING for a board whose every node, expected and read, is below it.
    """
    parts = tuple(_part(s, expectations, digest) for s in sessions)
    word = SIGNAL_WORD
    if safe_volts is not None and expectations is not None:
        volts = [abs(v) for e in expectations.nodes for v in (e.volts, e.low, e.high)]
        rows = [
            r for p in parts for r in (*p.readings, *p.verifications) if r.status != WRONG_RANGE
        ]
        if any(r.volts is None for r in rows):
            volts.append(math.inf)  # over the meter's range: at least as high as it shows
        volts += [abs(r.volts) for r in rows if r.volts is not None]
        word = signal_word(max(volts, default=None), safe_volts)
    return Report(
        board=history.board,
        profile=profile_name,
        generated=now_utc(),
        expectations=expectations,
        expectations_note=expectations_note or (expectations.source if expectations else ""),
        sessions=parts,
        damaged=len(history.damaged),
        signal_word=word,
    )
