"""``fieldtool record``: log a whole bench session from a readings file, non-interactively.

The session holds the readings, the diagnosis the engine gives for them (with this board
type's fleet history as priors), what was done, readings after the repair and the outcome:
the same records, in the same order, as the terminal UI writes for the same work (both run
``core.session.BoardSession``), written with one append so it is saved whole or not at all.

``--action`` says which part, how it had failed and what was done, in any order:
``"D5:open replaced"``, ``"replaced C4:short"``, ``"CR105:leaky resoldered"`` (the mode after
the colon is a catalogued failure mode, as in fault specs; a severity such as
``C3:lowcap=0.3`` is accepted and only the mode is kept). A part without a mode
(``"D5 reflowed"``) is logged but confirms no failure. Give one ``--action`` per part.
"""

from __future__ import annotations

import argparse
import json
import os
from dataclasses import replace

from fieldtool.commands.boards import PROFILE_HELP, login_name, profile_arg
from fieldtool.commands.diagnosis import READINGS_ARG, next_lines, part_names
from fieldtool.commands.history_text import safe
from fieldtool.commands.options import technician
from fieldtool.commands.store import PRIORS_STORE_HELP, add_store_option, notice, store_of
from fieldtool.core.circuit.netlist import default_designators
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.dictionary_cache import load_or_build
from fieldtool.core.diagnosis.faults import BOARD_TARGETS, parse_fault
from fieldtool.core.diagnosis.ranking import Diagnosis
from fieldtool.core.errors import InputError
from fieldtool.core.history import (
    Action,
    Event,
    HistoryError,
    append_many,
    board_path,
    check_name,
    resolve_logs_dir,
)
from fieldtool.core.readings import load_readings
from fieldtool.core.session import BoardSession, choose_priors
from fieldtool.core.words import count
from fieldtool.store.priors import store_failures

TOP_SUSPECTS = 5  # suspects printed


def register(subparsers: argparse._SubParsersAction, logs_help: str, outcomes) -> None:
    """Add the ``record`` subcommand."""
    p = subparsers.add_parser(
        "record",
        help="log a bench session from a readings CSV (readings, diagnosis, action, outcome)",
        description=__doc__.split("\n\n")[1],
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("profile", help=PROFILE_HELP)
    p.add_argument("--board", required=True, help="board serial")
    p.add_argument("--readings", required=True, help=f"readings {READINGS_ARG}")
    p.add_argument(
        "--action",
        action="append",
        metavar="TEXT",
        help="what was done to which part, e.g. 'D5:open replaced' (repeat for more parts)",
    )
    p.add_argument("--part", help="part used (with a single --action), e.g. '1N4007 from stock'")
    p.add_argument("--note", help="a note on the action (with a single --action)")
    p.add_argument(
        "--verify", metavar="FILE", help="readings CSV taken after the repair (either form)"
    )
    p.add_argument("--outcome", choices=outcomes, help="close the session with this outcome")
    p.add_argument(
        "--technician", type=technician, help="who did the work (default: your login name)"
    )
    p.add_argument("--logs", help=logs_help)
    add_store_option(p, PRIORS_STORE_HELP)
    p.add_argument("--json", action="store_true", help="one JSON object on stdout")
    p.set_defaults(handler=run_record)


def _target(word: str, profile: Profile) -> str | None:
    """The default designator (or board target) a word names on this board, if any."""
    low = word.lower()
    if low in BOARD_TARGETS:
        return low
    for ref in default_designators(profile):
        if low in (ref.lower(), display_name(profile, ref).lower()):
            return ref
    return None


def parse_action(text: str, profile: Profile) -> Action:
    """An action from words such as ``"D5:open replaced"`` (see module docstring)."""
    words = text.split()
    hits = []
    for i, word in enumerate(words):
        name, colon, mode = word.strip(",;.").partition(":")
        target = _target(name, profile)
        if target is not None:
            hits.append((i, target, mode if colon else None))
    if len(hits) != 1:
        parts = ", ".join(display_name(profile, r) for r in default_designators(profile))
        problem = "names no part on this board" if not hits else "names more than one part"
        raise InputError(
            f"--action {text!r} {problem}; write the part, optionally ':' and how it had "
            f"failed, and what you did, e.g. 'D5:open replaced' or 'C4 resoldered'; one "
            f"--action per part (parts: {parts}; board targets: {', '.join(BOARD_TARGETS)})"
        )
    i, target, mode_text = hits[0]
    mode = None
    if mode_text is not None:
        if not mode_text.strip():
            raise InputError(f"--action {text!r}: nothing after ':'; e.g. D5:open")
        mode = parse_fault(f"{target}:{mode_text}", profile).mode
    done = " ".join(words[:i] + words[i + 1 :]).strip() or "replaced"
    return Action(designator=display_name(profile, target), done=done, mode=mode)


def run_record(args: argparse.Namespace) -> int:
    """Handle ``fieldtool record``: the same session the terminal UI writes, from files."""
    profile = profile_arg(args.profile)
    serial = check_name(args.board)
    logs = resolve_logs_dir(args.logs, os.environ)
    if logs.exists() and not logs.is_dir():
        raise HistoryError(f"logs folder {logs} is not a folder; pass --logs DIR")
    actions = [parse_action(text, profile) for text in args.action or []]
    if (args.part or args.note) and len(actions) != 1:
        raise InputError("--part and --note go with exactly one --action")
    if args.verify and not actions:
        raise InputError("--verify takes readings after a repair; say what was done with --action")
    if actions and (args.part or args.note):
        a = actions[0]
        actions = [Action(a.designator, a.done, a.mode, args.part, args.note or "")]
    dictionary = load_or_build(profile)
    names = part_names(dictionary)
    readings = load_readings(
        args.readings, dictionary.nodes, profile.labels, names, dictionary.rails
    )
    after = (
        load_readings(args.verify, dictionary.nodes, profile.labels, names, dictionary.rails)
        if args.verify
        else ()
    )
    failures = store_failures(store_of(args), logs, notice)
    priors = choose_priors(profile, dictionary.hypotheses, failures)
    events: list[Event] = []
    session = BoardSession(
        profile,
        serial,
        dictionary,
        lambda event, _sid: events.append(event),
        priors=priors,
        technician=args.technician or login_name(),
    )
    session_id = session.open()
    diagnosis = take_in_steps(session, readings)
    if actions:
        session.record_repair(*actions)
        take_in_steps(session, after)
    elif not args.outcome:
        session.save_diagnosis()  # a session left open still says what the engine thought
    if args.outcome:
        session.close(args.outcome)
    records = append_many(logs, profile.name, serial, events, session=session_id)
    path = board_path(logs, profile.name, serial)
    if args.json:
        out = {
            "board": serial,
            "profile": profile.name,
            "session": session_id,
            "file": str(path),
            "records": [r.id for r in records],
            "diagnosis": diagnosis.to_json(),
            "priors": "fleet" if priors.from_fleet else "published",
            "actions": [
                {"designator": a.designator, "mode": a.mode, "done": a.done} for a in actions
            ],
            "outcome": args.outcome,
        }
        print(json.dumps(out, indent=2, ensure_ascii=False))
        return 0
    nodes = len({m.at for m in readings})
    lines = [
        f"saved session {session_id[:12]} for board {safe(serial)} ({profile.name}) in "
        f"{path}: {count(nodes, 'reading')}, {count(len(actions), 'action')}, "
        f"{len({m.at for m in after})} after repair, "
        f"outcome {args.outcome or 'none (session left open)'}",
        "suspects ("
        + (
            "priors from this fleet's confirmed failures"
            if priors.from_fleet
            else "published priors"
        )
        + "):",
    ]
    for s in diagnosis.suspects[:TOP_SUSPECTS]:
        lines.append(
            f"  {s.probability:6.1%}  {safe(s.words)}  "
            f"(prior {s.prior:.2%}, {safe(s.prior_source)})"
        )
    if diagnosis.fit.no_fit:
        lines.insert(1, "NO FIT: " + safe(diagnosis.fit.text))
    lines += next_lines(dictionary, diagnosis)
    print("\n".join(lines))
    return 0


def take_in_steps(session: BoardSession, readings) -> Diagnosis:
    """A file's readings taken as the technician took them: the powered ones, then (when there
    are diode tests) the power-off step, which the file's diode tests show was taken and
    verified, then the readings with the board off; a diode test's part by its default
    designator, as the session keeps parts."""
    d = session.dictionary
    powered = [m for m in readings if m.quantity.powered]
    off = [replace(m, at=d.resolve_part(m.at)) for m in readings if not m.quantity.powered]
    diagnosis = session.diagnosis
    if powered:
        if not session.powered:
            session.power(True)
        diagnosis = session.take(*powered)
    if off:
        if session.powered:
            session.power(False)
        diagnosis = session.take(*off)
    return diagnosis
