"""Render a report as Markdown or as one self-contained HTML page.

Everything that comes from a history file (serials, notes, node names, technicians) is
escaped: HTML with ``html.escape``, Markdown by backslash-escaping its markup and writing
``<``, ``>`` and ``&`` as entities, so a note can never become a tag or a link.
"""

from __future__ import annotations

import base64
import html
import re
from collections.abc import Callable, Mapping
from typing import Any

from fieldtool import __version__
from fieldtool.core.history import time_key
from fieldtool.core.report.content import OtherRow, Report, Row, SessionPart
from fieldtool.core.words import count

_MD_SPECIAL = re.compile(r"([\\`*_{}\[\]#|~])")


def md(text: Any) -> str:
    """Text safe inside Markdown (tables included): no markup, no tags, one line."""
    s = " ".join(str(text).split())
    s = s.replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")
    return _MD_SPECIAL.sub(r"\\\1", s)


def esc(text: Any) -> str:
    """Text safe inside HTML."""
    return html.escape(str(text), quote=True)


def _when(stamp: str) -> str:
    key = time_key(stamp)
    return f"{key[:10]} {key[11:16]} UTC" if len(key) == 27 else str(stamp)


def _v(x: float | None) -> str:
    return "OL" if x is None else f"{x:.4g} V"


def _row_cells(r: Row) -> list[str]:
    e = r.expected
    expected = _v(e.volts) if e else "—"
    band = f"{e.low:.4g} … {e.high:.4g} V" if e else "—"
    return [r.node, r.label, _v(r.volts), expected, band, r.status]


HEAD = ["Node", "Test point", "Measured", "Expected", "Healthy band", "Status"]


OTHER_HEAD = ["Reading", "At", "Value", "Time (UTC)"]


def _other_cells(r: OtherRow) -> list[str]:
    return [r.what, r.at, r.value, _when(r.time)]


def _action_words(a: Mapping[str, Any]) -> str:
    mode = f" ({a['mode']})" if a.get("mode") else ""
    part = f", part {a['part_used']}" if a.get("part_used") else ""
    note = f" — {a['note']}" if a.get("note") else ""
    what = f"{a.get('designator', '?')} {a.get('done', '')}"
    return f"{_when(str(a.get('time', '')))}: {what}{mode}{part}{note}"


def _confirmed_words(s: SessionPart) -> str:
    return ", ".join(
        f"{c.designator} {c.mode}"
        + (" (verified by readings after the repair)" if c.verified else "")
        for c in s.confirmed
    )


def _title(s: SessionPart) -> str:
    return f"Session {_when(s.start)} — {s.outcome or 'open (not closed)'}"


def _profile_note(s: SessionPart) -> str:
    if not s.profile_changed:
        return ""
    return (
        "The profile file has changed since this session was recorded; expected values are from "
        "the current file."
    )


# --- Markdown -----------------------------------------------------------------------------


def _md_table(head: list[str], rows: list[list[str]]) -> list[str]:
    out = ["| " + " | ".join(head) + " |", "|" + "---|" * len(head)]
    out += ["| " + " | ".join(md(c) for c in row) + " |" for row in rows]
    return out


def to_markdown(report: Report, plots: Mapping[str, str | None], plot_note: str) -> str:
    """The report as Markdown; ``plots`` maps a session id to its image file name."""
    lines = [
        f"# Repair report: board {md(report.board)}",
        "",
        f"Profile {md(report.profile)} · generated {_when(report.generated)} · fieldtool "
        f"{md(__version__)}",
        "",
        f"> **{report.signal_word}**",
        ">",
        *[f"> - {md(c)}" for c in report.cautions],
        "",
        f"Expected readings: {md(report.expectations_note)}",
    ]
    if not report.sessions:
        lines += ["", "No sessions recorded for this board yet."]
    for s in report.sessions:
        lines += ["", f"## {md(_title(s))}", ""]
        lines.append(f"Technician {md(s.technician)} · session id {md(s.id)}")
        if _profile_note(s):
            lines += ["", f"*{md(_profile_note(s))}*"]
        lines += ["", "### Readings against expected", ""]
        if s.readings:
            lines += _md_table(HEAD, [_row_cells(r) for r in s.readings])
        else:
            lines.append("No readings in this session.")
        if s.other_readings:
            lines += ["", "### Other readings", ""]
            lines += _md_table(OTHER_HEAD, [_other_cells(r) for r in s.other_readings])
        image = plots.get(s.id)
        lines += [
            "",
            f"![expected against measured volts along the ladder]({image})"
            if image
            else f"*{md(plot_note)}*",
        ]
        lines += ["", "### Suspects (last diagnosis)", ""]
        if s.suspects:
            rows = [[d or "—", m, f"{p:.1%}"] for d, m, p in s.suspects]
            lines += _md_table(["Part", "Mode", "Probability"], rows)
        else:
            lines.append("No diagnosis recorded.")
        lines += ["", "### Actions", ""]
        lines += [f"- {md(_action_words(a))}" for a in s.actions] or ["None recorded."]
        if s.verifications:
            lines += ["", "### Readings after the repair", ""]
            lines += _md_table(HEAD, [_row_cells(r) for r in s.verifications])
        if s.other_verifications:
            lines += ["", "### Other readings after the repair", ""]
            lines += _md_table(OTHER_HEAD, [_other_cells(r) for r in s.other_verifications])
        if s.confirmed:
            lines += ["", f"Confirmed failure: {md(_confirmed_words(s))}"]
    if report.damaged:
        lines += [
            "",
            f"*{count(report.damaged, 'damaged line')} in the history were left out; "
            "`fieldtool history` shows where.*",
        ]
    return "\n".join(lines) + "\n"


# --- HTML ---------------------------------------------------------------------------------

_STYLE = """
body{font-family:system-ui,sans-serif;max-width:60rem;margin:2rem auto;padding:0 1rem;color:#222}
table{border-collapse:collapse;margin:.5rem 0}td,th{border:1px solid #bbb;padding:.2rem .5rem}
th{background:#eee}.caution{border:2px solid #b00;background:#fff4f4;padding:.5rem 1rem}
.low,.high,.over{color:#b00;font-weight:bold}.note{font-style:italic;color:#555}
img{max-width:100%}
"""


def _html_table(head: list[str], rows: list[list[str]], css: Callable[[list[str]], str]) -> str:
    out = ["<table><tr>" + "".join(f"<th>{esc(h)}</th>" for h in head) + "</tr>"]
    for row in rows:
        out.append(
            f'<tr class="{css(row)}">' + "".join(f"<td>{esc(c)}</td>" for c in row) + "</tr>"
        )
    return "\n".join(out) + "</table>"


def _status_css(row: list[str]) -> str:
    return {"low": "low", "high": "high", "over range": "over"}.get(row[-1], "")


def to_html(report: Report, plots: Mapping[str, bytes | None], plot_note: str) -> str:
    """The report as one HTML page with the plots embedded as PNG data."""
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        f"<title>Repair report: board {esc(report.board)}</title>",
        f"<style>{_STYLE}</style></head><body>",
        f"<h1>Repair report: board {esc(report.board)}</h1>",
        f"<p>Profile {esc(report.profile)} · generated {esc(_when(report.generated))} · "
        f"fieldtool {esc(__version__)}</p>",
        f'<div class="caution"><strong>{esc(report.signal_word)}</strong><ul>',
        *[f"<li>{esc(c)}</li>" for c in report.cautions],
        "</ul></div>",
        f'<p class="note">Expected readings: {esc(report.expectations_note)}</p>',
    ]
    if not report.sessions:
        parts.append("<p>No sessions recorded for this board yet.</p>")
    for s in report.sessions:
        parts.append(f"<h2>{esc(_title(s))}</h2>")
        parts.append(f"<p>Technician {esc(s.technician)} · session id {esc(s.id)}</p>")
        if _profile_note(s):
            parts.append(f'<p class="note">{esc(_profile_note(s))}</p>')
        parts.append("<h3>Readings against expected</h3>")
        rows = [_row_cells(r) for r in s.readings]
        parts.append(_html_table(HEAD, rows, _status_css) if rows else "<p>No readings.</p>")
        if s.other_readings:
            parts.append("<h3>Other readings</h3>")
            rows = [_other_cells(r) for r in s.other_readings]
            parts.append(_html_table(OTHER_HEAD, rows, lambda _: ""))
        png = plots.get(s.id)
        if png:
            data = base64.b64encode(png).decode("ascii")
            parts.append(
                f'<img src="data:image/png;base64,{data}" '
                'alt="expected against measured volts along the ladder">'
            )
        else:
            parts.append(f'<p class="note">{esc(plot_note)}</p>')
        parts.append("<h3>Suspects (last diagnosis)</h3>")
        if s.suspects:
            rows = [[d or "—", m, f"{p:.1%}"] for d, m, p in s.suspects]
            parts.append(_html_table(["Part", "Mode", "Probability"], rows, lambda _: ""))
        else:
            parts.append("<p>No diagnosis recorded.</p>")
        parts.append("<h3>Actions</h3>")
        items = "".join(f"<li>{esc(_action_words(a))}</li>" for a in s.actions)
        parts.append(f"<ul>{items}</ul>" if items else "<p>None recorded.</p>")
        if s.verifications:
            parts.append("<h3>Readings after the repair</h3>")
            parts.append(_html_table(HEAD, [_row_cells(r) for r in s.verifications], _status_css))
        if s.other_verifications:
            parts.append("<h3>Other readings after the repair</h3>")
            rows = [_other_cells(r) for r in s.other_verifications]
            parts.append(_html_table(OTHER_HEAD, rows, lambda _: ""))
        if s.confirmed:
            parts.append(f"<p><strong>Confirmed failure:</strong> {esc(_confirmed_words(s))}</p>")
    if report.damaged:
        parts.append(
            f'<p class="note">{report.damaged} damaged line(s) in the history were left out; '
            "<code>fieldtool history</code> shows where.</p>"
        )
    parts.append("</body></html>")
    return "\n".join(parts) + "\n"
