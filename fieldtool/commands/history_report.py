"""``fieldtool report SERIAL --out FILE.html|FILE.md``: a board's repair report."""

from __future__ import annotations

import argparse
import os
import re
from pathlib import Path
from urllib.parse import quote

from fieldtool.commands.boards import existing_logs, load_board, profile_arg
from fieldtool.commands.history_text import safe
from fieldtool.commands.output import check_out, write_whole
from fieldtool.core.circuit.library import available, user_profiles_dir
from fieldtool.core.circuit.profile import Profile
from fieldtool.core.errors import FieldtoolError, InputError
from fieldtool.core.history.sessions import group_sessions
from fieldtool.core.report.content import build_report, expectations_for, pick_sessions
from fieldtool.core.report.plot import MISSING, ladder_plot, plotting_available
from fieldtool.core.report.render import to_html, to_markdown
from fieldtool.core.words import count

FORMATS = {".html": "html", ".htm": "html", ".md": "md"}


def register(subparsers: argparse._SubParsersAction, logs_help: str) -> None:
    """Add the ``report`` subcommand."""
    p = subparsers.add_parser(
        "report",
        help="a board's repair report (HTML or Markdown) with a plot along the ladder",
        description="Readings against expected with bands, a plot of expected against "
        "measured volts along the ladder, suspects, actions and safety cautions.",
    )
    p.add_argument("serial", help="board serial")
    p.add_argument("--out", required=True, help="FILE.html or FILE.md")
    p.add_argument("--logs", help=logs_help)
    p.add_argument("--session", help="one session only: its id or the start of it")
    p.add_argument(
        "--profile",
        help="board profile (a name or a .toml file) for the expected readings (default: the "
        "profile the history names, from your profiles folder or the shipped ones)",
    )
    p.set_defaults(handler=run_report)


def find_profile(name: str, option: str | None) -> tuple[Profile | None, str]:
    """The profile to take expectations from, and a note when there is none or it differs."""
    if option:
        profile = profile_arg(option)
        if profile.name != name:
            return profile, f"profile {option} is {profile.name!r}, the history says {name!r}"
        return profile, ""
    for entry in available(user_profiles_dir(os.environ)):
        if entry.name == name:
            return entry.load(), ""
    return None, (
        f"no profile named {name!r} in your profiles folder or among the shipped ones: "
        "expected values left out; pass --profile FILE"
    )


def run_report(args: argparse.Namespace) -> int:
    """Handle ``fieldtool report``."""

    out = Path(args.out)
    kind = FORMATS.get(out.suffix.lower())
    if kind is None:
        raise InputError(f"--out {args.out}: name the file .html or .md (e.g. report.html)")
    check_out("--out", out)
    history = load_board(existing_logs(args.logs), args.serial)
    sessions = pick_sessions(group_sessions(history.events), args.session)
    names = [s.profile for s in sessions if s.profile] or [r.profile for r in history.events]
    profile_name = names[-1] if names else "?"
    profile, note = find_profile(profile_name, args.profile)
    expectations = None
    if profile is not None:
        try:
            expectations = expectations_for(profile)
        except FieldtoolError as exc:  # e.g. the solver did not converge: say so, go on
            note = f"expected values left out: {exc.message}"
    report = build_report(
        history,
        sessions,
        profile_name,
        expectations,
        f"{note}; {expectations.source}" if note and expectations else note,
        profile.digest if profile else "",
        profile.safe_volts if profile else None,
    )
    plot_note = MISSING if not plotting_available() else "no plot: no readings to draw"
    if expectations is None:
        plot_note = "no plot: no expected values to draw the readings against"
    pngs: dict[str, bytes | None] = {}
    for part in report.sessions:
        if expectations and (part.readings or part.verifications):
            title = f"{args.serial} · {part.start[:10]} · {part.outcome or 'open'}"
            pngs[part.id] = ladder_plot(expectations, part.readings, part.verifications, title)
    if kind == "html":
        write_whole("--out", out, to_html(report, pngs, plot_note).encode("utf-8"))
    else:
        images: dict[str, str | None] = {}
        stem = re.sub(r"[^A-Za-z0-9_-]+", "_", out.stem)
        for sid, png in pngs.items():
            if png:
                image = out.with_name(f"{stem}-{re.sub(r'[^0-9a-zA-Z]', '', sid)[:12]}.png")
                write_whole("--out", image, png)
                images[sid] = quote(image.name)
        write_whole("--out", out, to_markdown(report, images, plot_note).encode("utf-8"))
    print(
        f"report for board {safe(args.serial)}: "
        f"{count(len(report.sessions), 'session')} written to {out}"
    )
    return 0
