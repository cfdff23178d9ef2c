"""The readings file: what the technician measured at each node, as ``Measurement`` objects.

A readings file has a header row ``node,volts`` and an optional ``ripple_vpp`` column; node
names are the ones ``fieldtool expect`` prints (S0, P1, S1, ..., OUT), test-point labels from
the profile are accepted too. ``volts`` is a number (a decimal comma is refused in CSV, where
the comma separates columns) or ``OL`` for a meter over range. Blank lines and lines starting
with ``#`` are skipped. Each row gives a ``dc`` measurement at its node and, where the ripple
cell is filled, a ``ripple-pp`` measurement there too; their source is the file's name.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Iterable, Sequence
from pathlib import Path

from fieldtool.core.errors import InputError
from fieldtool.core.measurement import DC, RIPPLE_PP, Measurement, Source

OVERLOAD_WORDS = ("ol", "overload")


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
    text: str,
    nodes: Sequence[str],
    labels: dict[str, str] | None = None,
    where: str = "readings",
    source: Source | None = None,
) -> tuple[Measurement, ...]:
    """Measurements from CSV text; each node at most once, every name checked against the board.

    ``source`` defaults to a file named ``where``.
    """
    labels = labels or {}
    source = source or Source("file", where)
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
    readings: list[Measurement] = []
    seen: set[str] = set()
    for number, line in rows[1:]:
        here = f"{where}:{number}"
        cells = next(csv.reader([line]))
        if len(cells) != len(header):
            raise InputError(
                f"{here}: {len(cells)} columns, expected {len(header)} ({','.join(header)}); "
                "a decimal comma must be a point in CSV"
            )
        node = resolve_node(cells[0], nodes, labels, here)
        if node in seen:
            raise InputError(f"{here}: node {node} is read twice; keep one row per node")
        seen.add(node)
        volts = _number(cells[1], here, "volts", allow_overload=True)
        readings.append(Measurement(node, DC, volts, source, settled=True))
        if len(cells) > 2 and cells[2].strip():
            ripple = _number(cells[2], here, "ripple_vpp", allow_overload=False)
            if ripple is not None and ripple < 0:
                raise InputError(f"{here}: ripple_vpp {ripple:g} is negative")
            readings.append(Measurement(node, RIPPLE_PP, ripple, source, settled=True))
    if not readings:
        raise InputError(f"{where}: only a header, no readings")
    return tuple(readings)


def load_readings(
    path: str | Path, nodes: Sequence[str], labels: dict[str, str] | None = None
) -> tuple[Measurement, ...]:
    """Measurements from a CSV file (see module docstring); their source is ``file NAME``."""
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
    return parse_readings_csv(text, nodes, labels, str(p), Source("file", p.name))


def readings_csv(readings: Iterable[Measurement]) -> str:
    """DC (and ripple) measurements written back as CSV text, one row a node in the order the
    DC readings come, with the ripple column only where a ripple was read."""
    dc: dict[str, float | None] = {}
    ripple: dict[str, float | None] = {}
    for m in readings:
        if m.at is None or m.quantity not in (DC, RIPPLE_PP):
            raise InputError(
                f"a readings file holds dc and ripple-pp readings at nodes, not {m.quantity.name}"
                f" at {m.at}"
            )
        (dc if m.quantity == DC else ripple)[m.at] = m.value
    missing = [n for n in ripple if n not in dc]
    if missing:
        raise InputError(f"a readings file needs a dc reading at each node; none at {missing}")
    out = io.StringIO()
    out.write("node,volts,ripple_vpp\n" if ripple else "node,volts\n")
    for node, volts in dc.items():
        line = f"{node},{'OL' if volts is None else repr(volts)}"
        if ripple:
            value = ripple.get(node)
            line += "," + ("" if value is None else repr(value))
        out.write(line + "\n")
    return out.getvalue()
