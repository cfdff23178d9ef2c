"""The readings file: what the technician measured at each node, as ``Measurement`` objects.

A readings file has a header row ``node,volts`` and an optional ``ripple_vpp`` column; node
names are the ones ``fieldtool expect`` prints (S0, P1, S1, ..., OUT), test-point labels from
the profile are accepted too. Columns are separated by commas, or by semicolons or tabs as
spreadsheets export them (the header tells which). ``volts`` is written as it would be typed
(``12.9``, ``125.7V``, ``890mV``, ``1.2kV``; a decimal comma where commas do not separate the
columns, or in quotes) or ``OL`` for a meter over range. Blank lines and lines starting with
``#`` are skipped. Each row gives a ``dc`` measurement at its node and, where the ripple
cell is filled, a ``ripple-pp`` measurement there too; their source is the file's name.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Sequence
from pathlib import Path

from fieldtool.core.errors import InputError, shown
from fieldtool.core.measurement import DC, RIPPLE_PP, Measurement, Source
from fieldtool.core.units import parse_reading

SEPARATORS = (",", ";", "\t")  # a plain CSV, and what spreadsheets in comma-decimal locales
# and tab-separated exports write


def _number(text: str, where: str, column: str, allow_overload: bool) -> float | None:
    try:
        value = parse_reading(text)
    except ValueError as exc:
        extra = " or OL for overload" if allow_overload else ""
        raise InputError(
            f"{where}: {column}: {exc}; write volts as e.g. 12.9, 125.7V or 890mV{extra}"
        ) from None
    if value is None and not allow_overload:
        raise InputError(f"{where}: {column} is OL; leave the cell empty when it was not read")
    return value


def _separator(header_line: str) -> str:
    """The column separator the header uses (a comma unless it is a semicolon or a tab)."""
    for separator in SEPARATORS:
        cells = [c.strip().lower() for c in header_line.split(separator)]
        if cells[:2] == ["node", "volts"]:
            return separator
    return ","


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
    raise InputError(f"{where}: node {shown(wanted)} is not on this board (nodes: {known})")


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
    separator = _separator(header_line)
    header = [h.strip().lower() for h in next(csv.reader([header_line], delimiter=separator))]
    if header[:2] != ["node", "volts"] or any(h not in ("ripple_vpp",) for h in header[2:]):
        raise InputError(
            f"{where}:{header_no}: header is {shown(header_line.strip())}; expected 'node,volts' "
            "or 'node,volts,ripple_vpp' (or ';' between them)"
        )
    readings: list[Measurement] = []
    seen: set[str] = set()
    for number, line in rows[1:]:
        here = f"{where}:{number}"
        cells = next(csv.reader([line], delimiter=separator))
        if len(cells) != len(header):
            hint = (
                "; a decimal comma must be in quotes (\"12,9\") or the columns separated by ';'"
                if separator == ","
                else ""
            )
            raise InputError(
                f"{here}: {len(cells)} columns, expected {len(header)} "
                f"({separator.join(header)}){hint}"
            )
        node = resolve_node(cells[0], nodes, labels, here)
        if node in seen:
            raise InputError(f"{here}: node {node} is read twice; keep one row per node")
        seen.add(node)
        volts = _number(cells[1], here, "volts", allow_overload=True)
        readings.append(Measurement(node, DC, volts, source, settled=True))
        if len(cells) > 2 and cells[2].strip():
            ripple = _number(cells[2], here, "ripple_vpp", allow_overload=False)
            if ripple < 0:
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
