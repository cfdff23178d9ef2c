"""One technician's session on one board: readings, diagnosis, repair and outcome.

Plain Python, no Textual: the screens hold a ``BoardSession`` and call it; every accepted
reading, action and outcome is handed at once to ``save`` (the history writer), and the
diagnosis is recomputed from the readings of the current phase. Before a repair the phase is
``probing``; after an action it is ``verifying``: the board has changed, so the diagnosis
starts again from the verification readings alone.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from pathlib import Path

from fieldtool import __version__
from fieldtool.core import history as hist
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.core.diagnosis.priors import fleet_priors, published_priors
from fieldtool.core.diagnosis.ranking import Diagnosis, diagnose
from fieldtool.core.readings import NodeReading
from fieldtool.store import StoreAddress
from fieldtool.store.priors import fleet_counts

SNAPSHOT_SUSPECTS = 5  # how many suspects a Diagnosis record keeps


@dataclass(frozen=True)
class Taken:
    """One accepted reading as the session keeps it: what, from where, how settled."""

    node: str
    volts: float | None  # None: the meter was over range
    source: str  # "typed" or the meter's identity
    spread: float | None = None

    @property
    def overload(self) -> bool:
        """True when the meter was over range."""
        return self.volts is None


def choose_priors(
    profile: Profile,
    dictionary: FaultDictionary,
    logs_dir: Path,
    store: StoreAddress | None = None,
    notify: Callable[[str], None] | None = None,
):
    """Fleet priors when the fleet's confirmed failures are available, else published ones.

    From ``store`` when one is set; the local history when it cannot be reached (``notify``
    is told why).
    """
    counts = fleet_counts(store, logs_dir, profile.name)
    if counts.notice and notify is not None:
        notify(counts.notice)
    if not counts.counts:
        return published_priors(profile, dictionary.hypotheses)
    return fleet_priors(profile, dictionary.hypotheses, counts.counts)


class BoardSession:
    """The state of one board's session and the rules for changing it."""

    def __init__(
        self,
        profile: Profile,
        serial: str,
        dictionary: FaultDictionary,
        save: Callable[[object, str | None], None],
        priors=None,
        technician: str = "",
    ) -> None:
        hist.check_name(serial)
        self.profile = profile
        self.serial = serial
        self.dictionary = dictionary
        self.priors = priors
        self.technician = technician
        self._submit = save
        self.session_id: str | None = None  # set when the session is opened or resumed
        self.phase = "probing"
        self.taken: dict[str, Taken] = {}
        self.actions: list[hist.Action] = []
        self.outcome: str | None = None
        self.resumed_from: str | None = None  # time of the session picked up again
        self.at_repairs: list[tuple[str, float]] = []  # top suspect (words, odds) at each repair
        self.diagnosis: Diagnosis = diagnose(dictionary, (), priors)

    # --- opening -------------------------------------------------------------------------

    def _save(self, event) -> None:
        self._submit(event, self.session_id)

    def open(self, ambient_c: float | None = None) -> None:
        """Start a new session on the board and record it."""
        opened = hist.SessionOpened(
            technician=self.technician,
            profile_hash=self.profile.digest,
            tool_version=__version__,
            ambient_c=ambient_c,
        )
        self.session_id = opened.session_id
        self._save(opened)

    def resume(self, history: hist.BoardHistory) -> int:
        """Pick up the board's last unclosed session from its history; return readings restored."""
        start = None
        for i, record in enumerate(history.events):
            if record.kind == "session-opened":
                start = i
        if start is None:
            return 0
        self.resumed_from = history.events[start].time
        self.session_id = history.events[start].session_id
        restored = 0
        for record in history.events[start + 1 :]:
            if record.session is not None and record.session != self.session_id:
                continue  # another terminal's session on the same board
            event = record.event
            if isinstance(event, hist.Action):
                self.actions.append(event)
                self.phase = "verifying"
                self.taken.clear()
            elif isinstance(event, hist.Reading) and event.node in self.dictionary.nodes:
                # A Verification is a Reading too; before any action it still counts.
                self.taken[event.node] = Taken(event.node, event.volts, event.source, event.spread)
                restored += 1
        self._rediagnose()
        return restored

    def dictionary_parts(self) -> list[str]:
        """Default designators of the board's diodes and capacitors, in board order."""
        circuit, _ = build_circuit(self.profile)
        caps = circuit.cap_refs[: len(circuit.cap_refs) - circuit.stray_caps]
        return list(circuit.diode_refs) + list(caps)

    # --- readings ------------------------------------------------------------------------

    def readings(self) -> tuple[NodeReading, ...]:
        """The current phase's readings, in ladder order, as the diagnosis takes them."""
        nodes = self.dictionary.nodes
        ordered = sorted(self.taken.values(), key=lambda t: nodes.index(t.node))
        return tuple(NodeReading(t.node, t.volts) for t in ordered)

    def volts_by_node(self) -> dict[str, float | None]:
        """Node → volts read in this phase (None for an overload)."""
        return {t.node: t.volts for t in self.taken.values()}

    def accept(
        self, node: str, volts: float | None, source: str = "typed", spread: float | None = None
    ) -> Diagnosis:
        """Take one reading at a node: save it, then rank the suspects again."""
        if node not in self.dictionary.nodes:
            raise KeyError(node)
        kind = hist.Verification if self.phase == "verifying" else hist.Reading
        self._save(
            kind(node=node, volts=volts, source=source, spread=spread, overload=volts is None)
        )
        self.taken[node] = Taken(node, volts, source, spread)
        return self._rediagnose()

    def _rediagnose(self) -> Diagnosis:
        self.diagnosis = diagnose(self.dictionary, self.readings(), self.priors)
        return self.diagnosis

    # --- repair and outcome --------------------------------------------------------------

    def snapshot(self) -> hist.Diagnosis:
        """The top suspects as a history record."""
        top = self.diagnosis.suspects[:SNAPSHOT_SUSPECTS]
        return hist.Diagnosis(
            suspects=tuple(
                hist.Suspect(s.component or "board", s.mode, float(s.probability)) for s in top
            )
        )

    def record_action(
        self,
        designator: str,
        done: str,
        mode: str | None = None,
        part_used: str | None = None,
        note: str = "",
    ) -> hist.Action:
        """Save the diagnosis that led here and the repair; verification starts afresh."""
        action = hist.Action(
            designator=designator, done=done, mode=mode, part_used=part_used or None, note=note
        )
        self._save(self.snapshot())
        self._save(action)
        self.actions.append(action)
        top = self.diagnosis.suspects[0] if self.diagnosis.suspects else None
        if top is not None:
            self.at_repairs.append((top.words, float(top.probability)))
        self.phase = "verifying"
        self.taken.clear()
        self._rediagnose()
        return action

    def close(self, outcome: str) -> None:
        """End the session with an outcome (fixed, not-fixed, escalated)."""
        event = hist.SessionClosed(outcome)  # checks the outcome before anything is saved
        self._save(self.snapshot())
        self._save(event)
        self.outcome = outcome

    @property
    def closed(self) -> bool:
        """True once an outcome is recorded."""
        return self.outcome is not None


def unfinished_session(logs_dir: Path, serial: str) -> hist.BoardHistory | None:
    """The board's history when its last session was never closed, else None."""
    try:
        history = hist.read_board(logs_dir, serial)
    except hist.NotFoundError:
        return None
    return history if hist.last_session_open(history) else None


def summarise(history: hist.BoardHistory) -> Mapping[str, int]:
    """Counts of each kind of record in a board's history."""
    counts: dict[str, int] = {}
    for record in history.events:
        counts[record.kind] = counts.get(record.kind, 0) + 1
    return counts
