"""One technician's session on one board: open, measure, diagnose, repair, verify, close.

``BoardSession`` is the one workflow both the terminal UI and ``fieldtool record`` run. Every
event it makes (the opening, each measurement, the diagnosis that led to a repair, the repair,
the outcome) is handed at once to ``save`` with the session's id: the UI's history writer
saves each as it comes, ``record`` collects them and appends them with one write. The
diagnosis is recomputed from the measurements of the current phase: before a repair the phase
is ``probing``; after one it is ``verifying``, the board has changed, and the diagnosis starts
again from the verification measurements alone.

Sessions in a history are found one way (``history.sessions.group_sessions`` and
``open_session``); the priors are chosen in one place (``choose_priors``) from a source of
confirmed failures that any store can provide.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from pathlib import Path

from fieldtool import __version__
from fieldtool.core import history as hist
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.reading_range import reading_problem
from fieldtool.core.circuit.readouts.current import rail_sources, supply_index
from fieldtool.core.diagnosis.dictionary import FaultDictionary
from fieldtool.core.diagnosis.faults import Hypothesis
from fieldtool.core.diagnosis.priors import Priors, fleet_priors
from fieldtool.core.diagnosis.ranking import Diagnosis, diagnose
from fieldtool.core.errors import InputError
from fieldtool.core.history.fleet import confirmed_failures
from fieldtool.core.history.sessions import Session, group_sessions, open_session
from fieldtool.core.measurement import DC, Measurement, Quantity

SNAPSHOT_SUSPECTS = 5  # how many suspects a diagnosis snapshot keeps
SUPPLY, DRIVE = "supply", "drive"  # the rails a meter goes in series with

FailureCounts = Mapping[tuple[str, str], int]
FailureSource = Callable[[str], FailureCounts]
"""Confirmed failures of a board type: profile name → {(designator, mode): count}."""

Save = Callable[[hist.Event, str | None], None]
"""Where a session's events go: (event, session id)."""


def history_failures(logs_dir: str | Path) -> FailureSource:
    """Confirmed failures from a history folder (none while the folder does not exist)."""
    folder = Path(logs_dir)

    def confirmed(profile_name: str) -> FailureCounts:
        return confirmed_failures(folder, profile_name) if folder.is_dir() else {}

    return confirmed


def choose_priors(
    profile: Profile, hypotheses: Sequence[Hypothesis], failures: FailureSource | None = None
) -> Priors:
    """The board type's priors: its confirmed failures (if any) blended into the published
    failure-mode shares, else the published shares alone.

    Raises:
        HistoryError: the failures could not be read (the caller decides whether to go on
            with ``choose_priors(profile, hypotheses)``, the published shares).
    """
    confirmed = failures(profile.name) if failures is not None else {}
    return fleet_priors(profile, hypotheses, confirmed)


def unfinished_session(logs_dir: str | Path, serial: str) -> Session | None:
    """The board's latest session that was never closed, if any."""
    try:
        history = hist.read_board(logs_dir, serial)
    except hist.NotFoundError:
        return None
    return open_session(group_sessions(history.events))


class BoardSession:
    """The state of one board's session and the rules for changing it.

    Args:
        profile: the board type.
        serial: the board's serial.
        dictionary: the board type's fault dictionary.
        save: where each event goes, with the session id (see module docstring).
        priors: from ``choose_priors``; None for the published shares.
        technician: who is working, for the opening record.
    """

    def __init__(
        self,
        profile: Profile,
        serial: str,
        dictionary: FaultDictionary,
        save: Save,
        priors: Priors | None = None,
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
        self.taken: dict[tuple[str, str], Measurement] = {}  # (at, quantity) → this phase's
        self.actions: list[hist.Action] = []
        self.outcome: str | None = None
        self.resumed_from: str | None = None  # when the session picked up again was opened
        self.at_repairs: list[tuple[str, float]] = []  # top suspect (words, odds) at each repair
        self.powered = True  # False from a confirmed power-off step until powered again
        self.before_repair: tuple[Measurement, ...] = ()  # the probing phase's, in order taken
        circuit, _ = build_circuit(profile)
        rails = ((SUPPLY,) if supply_index(circuit) is not None else ()) + (
            (DRIVE,) if rail_sources(circuit) else ()
        )
        self.places: dict[str, tuple[str, ...]] = {
            "node": tuple(dictionary.nodes),
            "rail": rails,
            "part": tuple(circuit.diode_refs),
        }
        self.diagnosis: Diagnosis = self._diagnose(())

    def _save(self, event: hist.Event) -> None:
        self._submit(event, self.session_id)

    # --- opening -------------------------------------------------------------------------

    def open(self, ambient_c: float | None = None) -> str:
        """Start a new session on the board, record it and return its id."""
        opened = hist.SessionOpened(
            technician=self.technician,
            profile_hash=self.profile.digest,
            tool_version=__version__,
            ambient_c=ambient_c,
        )
        self.session_id = opened.session_id
        self._save(opened)
        return opened.session_id

    def resume(self, session: Session) -> int:
        """Pick up an unclosed session (``unfinished_session``); return measurements restored."""
        self.session_id = session.id
        self.resumed_from = session.start
        restored = 0
        for record in session.records:
            event = record.event
            if isinstance(event, hist.Action):
                self.actions.append(event)
                self.phase = "verifying"
                self.taken.clear()
            elif isinstance(event, hist.Reading) and self._known(event.measurement):
                # A Verification is a Reading too; before any action it still counts.
                m = event.measurement
                self.taken[m.at, m.quantity.name] = m
                restored += 1
        self._rediagnose()
        return restored

    def dictionary_parts(self) -> list[str]:
        """Default designators of the board's diodes and capacitors, in board order."""
        circuit, _ = build_circuit(self.profile)
        caps = circuit.cap_refs[: len(circuit.cap_refs) - circuit.stray_caps]
        return list(circuit.diode_refs) + list(caps)

    # --- measurements --------------------------------------------------------------------

    def _known(self, m: Measurement) -> bool:
        return m.at in self.places[m.quantity.taken_at]

    def _order(self, m: Measurement) -> tuple[int, int, str]:
        where = self.places[m.quantity.taken_at]
        kind = ("node", "rail", "part").index(m.quantity.taken_at)
        return kind, where.index(m.at), m.quantity.name

    def measurements(self) -> tuple[Measurement, ...]:
        """The current phase's measurements, nodes in ladder order, then rails, then parts."""
        return tuple(sorted(self.taken.values(), key=self._order))

    def power(self, powered: bool) -> Diagnosis:
        """The board is powered again (True) or off, discharged and verified below the safe
        level (False: the technician confirmed the checklist); the diagnosis's efforts follow."""
        self.powered = powered
        return self._rediagnose()

    def latest(self, at: str, quantity: Quantity = DC) -> Measurement | None:
        """This phase's measurement of ``quantity`` at ``at``, if one was taken."""
        return self.taken.get((at, quantity.name))

    def volts_by_node(self) -> dict[str, float | None]:
        """Node → DC volts measured in this phase (None for an overload)."""
        return {m.at: m.value for m in self.taken.values() if m.quantity == DC}

    def take(self, *measurements: Measurement) -> Diagnosis:
        """Take measurements (placed at a node, rail or part of this board, as the kind is
        taken): save each, then rank again.

        Raises:
            InputError: one is not placed where its kind is taken on this board, is taken
                with the board in the other power state (a diode test needs the power-off
                step first; a powered kind needs the board powered again), or is beyond what
                this board could show (a wrong range or unit); nothing is saved.
        """
        for m in measurements:
            if not self._known(m):
                kind = m.quantity.taken_at
                where = ", ".join(self.places[kind]) or "none on this board"
                raise InputError(
                    f"{m.quantity.words} at {m.at!r}: not a {kind} of this board ({where})"
                )
            if m.quantity.powered != self.powered:
                step = (
                    "power the board again first"
                    if self.powered is False
                    else "take the power-off step first (off, discharged, every node verified "
                    "below the safe level)"
                )
                raise InputError(f"{m.quantity.words} at {m.at}: {step}; not taken, nothing saved")
            problem = reading_problem(self.profile, m)
            if problem:
                raise InputError(f"{problem}; not taken, nothing saved")
        kind = hist.Verification if self.phase == "verifying" else hist.Reading
        for m in measurements:
            self._save(kind(m))
            self.taken[m.at, m.quantity.name] = m
        return self._rediagnose()

    def _diagnose(self, measurements: Sequence[Measurement]) -> Diagnosis:
        # the power state changes what each next measurement costs
        return diagnose(self.dictionary, measurements, self.priors, powered=self.powered)

    def deciding(self, key: str) -> tuple[Measurement | None, float]:
        """The probing reading that raised hypothesis ``key`` most (replayed in the order
        taken) and its probability after them all: which measurement found the fault."""
        taken = self.before_repair or tuple(
            sorted(self.taken.values(), key=lambda m: m.taken or "")
        )
        best, best_rise, before = None, 0.0, self._odds(key, ())
        for i, m in enumerate(taken):
            after = self._odds(key, taken[: i + 1])
            if after - before > best_rise:
                best, best_rise = m, after - before
            before = after
        return best, before

    def _odds(self, key: str, measurements: Sequence[Measurement]) -> float:
        d = self._diagnose(measurements)
        return float(sum(s.probability for s in d.suspects if s.key == key))

    def _rediagnose(self) -> Diagnosis:
        self.diagnosis = self._diagnose(self.measurements())
        return self.diagnosis

    # --- repair and outcome --------------------------------------------------------------

    def snapshot(self) -> hist.DiagnosisSnapshot:
        """The top suspects as a history record (no part: designator "")."""
        top = self.diagnosis.suspects[:SNAPSHOT_SUSPECTS]
        return hist.DiagnosisSnapshot(
            suspects=tuple(
                hist.SnapshotSuspect(s.component or "", s.mode, float(s.probability)) for s in top
            )
        )

    def save_diagnosis(self) -> None:
        """Save the diagnosis as it stands (``record`` does when it leaves a session open)."""
        self._save(self.snapshot())

    def record_repair(self, *actions: hist.Action) -> None:
        """Save the diagnosis that led here and what was done; verification starts afresh."""
        if self.phase == "probing":
            self.before_repair = tuple(sorted(self.taken.values(), key=lambda m: m.taken or ""))
        self._save(self.snapshot())
        for action in actions:
            self._save(action)
            self.actions.append(action)
        top = self.diagnosis.suspects[0] if self.diagnosis.suspects else None
        if top is not None:
            self.at_repairs.append((top.words, float(top.probability)))
        self.phase = "verifying"
        self.taken.clear()
        self._rediagnose()

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
