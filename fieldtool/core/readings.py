"""Node readings: what the technician measured, and the CSV file that carries them.

A readings file has a header row ``node,volts`` and an optional ``ripple_vpp`` column; node
names are the ones ``fieldtool expect`` prints (S0, P1, S1, ..., OUT), test-point labels from
the profile are accepted too. ``volts`` is a number (a decimal comma is refused in CSV, where
the comma separates columns) or ``OL`` for a meter over range. Blank lines and lines starting
with ``#`` are skipped.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path

from fieldtool.core.errors import InputError

OVERLOAD_WORDS = ("ol", "overload")


@dataclass(frozen=True)
class NodeReading:
    """One measured node: DC volts (None on overload) and an optional ripple peak-to-peak."""

    node: str
    volts: float | None
    ripple_vpp: float | None = None

    @property
    def overload(self) -> bool:
        """True when the meter was over range at this node."""
        return self.volts is None


def _number(text: str, where: str, column: str, allow_overload: bool) -> float | None:
    raw = text.strip()
    if allow_overload and raw.lower() in OVERLOAD_WORDS:
        return None
    try:
        value = float(raw)
    except ValueError:
        extra = " or OL for overload" if allow_overload else ""
        raise InputError(
            f"{where}: {column} {raw!r} is not a number; write volts as e.g. 12.9{extra}"
        ) from None
    if not math.isfinite(value):
        raise InputError(f"{where}: {column} {raw!r} is not a finite number")
    return value


def resolve_node(name: str, nodes: Sequence[str], labels: dict[str, str], where: str) -> str:
    """The node a name refers to: a node name (any case) or a test-point label."""
    wanted = name.strip()
    for node in nodes:
        if node.lower() == wanted.lower():
            return node
    for node, label in labels.items():
        if label and label.lower() == wanted.lower() and node in nodes:
            return node
    known = ", ".join(nodes)
    raise InputError(f"{where}: node {wanted!r} is not on this board (nodes: {known})")


def parse_readings_csv(
    text: str, nodes: Sequence[str], labels: dict[str, str] | None = None, where: str = "readings"
) -> tuple[NodeReading, ...]:
    """Readings from CSV text; each node at most once, every name checked against the board."""
    labels = labels or {}
    rows = [
        (number, line)
        for number, line in enumerate(text.splitlines(), start=1)
        if line.strip() and not line.lstrip().startswith("#")
    ]
    if not rows:
        raise InputError(f"{where}: no readings; expected a header 'node,volts' and one row a node")
    header_no, header_line = rows[0]
    header = [h.strip().lower() for h in next(csv.reader([header_line]))]
    if header[:2] != ["node", "volts"] or any(h not in ("ripple_vpp",) for h in header[2:]):
        raise InputError(
            f"{where}:{header_no}: header is {header_line.strip()!r}; expected 'node,volts' "
            "or 'node,volts,ripple_vpp'"
        )
    readings: dict[str, NodeReading] = {}
    for number, line in rows[1:]:
        here = f"{where}:{number}"
        cells = next(csv.reader([line]))
        if len(cells) != len(header):
            raise InputError(
                f"{here}: {len(cells)} columns, expected {len(header)} ({','.join(header)}); "
                "a decimal comma must be a point in CSV"
            )
        node = resolve_node(cells[0], nodes, labels, here)
        if node in readings:
            raise InputError(f"{here}: node {node} is read twice; keep one row per node")
        volts = _number(cells[1], here, "volts", allow_overload=True)
        ripple = None
        if len(cells) > 2 and cells[2].strip():
            ripple = _number(cells[2], here, "ripple_vpp", allow_overload=False)
            if ripple is not None and ripple < 0:
                raise InputError(f"{here}: ripple_vpp {ripple:g} is negative")
        readings[node] = NodeReading(node, volts, ripple)
    if not readings:
        raise InputError(f"{where}: only a header, no readings")
    return tuple(readings.values())


def load_readings(
    path: str | Path, nodes: Sequence[str], labels: dict[str, str] | None = None
) -> tuple[NodeReading, ...]:
    """Readings from a CSV file (see module docstring)."""
    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise InputError(f"{p}: readings file not found") from None
    except OSError as exc:
        raise InputError(f"{p}: cannot read ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(f"{p}: not UTF-8 text; save the CSV as UTF-8") from None
    return parse_readings_csv(text, nodes, labels, str(p))


def readings_csv(readings: Iterable[NodeReading]) -> str:
    """Readings written back as CSV text (with ripple only where one was read)."""
    rows = list(readings)
    out = io.StringIO()
    with_ripple = any(r.ripple_vpp is not None for r in rows)
    out.write("node,volts,ripple_vpp\n" if with_ripple else "node,volts\n")
    for r in rows:
        volts = "OL" if r.volts is None else repr(float(r.volts))
        line = f"{r.node},{volts}"
        if with_ripple:
            line += "," + ("" if r.ripple_vpp is None else repr(float(r.ripple_vpp)))
        out.write(line + "\n")
    return out.getvalue()
