"""The readings file: what the technician measured, as ``Measurement`` objects.

Two forms, told apart by the header:

- ``node,volts`` with an optional ``ripple_vpp`` column (DC volts at each node, and the ripple
  there where the cell is filled). Node names are the ones ``fieldtool expect`` prints (S0,
  P1, S1, ..., OUT); test-point labels from the profile are accepted too.
- ``measure,at,value`` with an optional ``test_load_ohms`` column, one reading a row, any kind:
  ``dc,S3,45.2`` · ``ripple-pp,S3,31mV`` · ``ac-rms,S3,0.009`` · ``current,supply,350uA`` ·
  ``dc-loaded,S6,72.9,10k`` · ``diode-test,D5,0.61``. ``measure`` is a measurement kind
  (``fieldtool.core.measurement.QUANTITIES``); ``at`` a node or test-point label, a diode's
  designator as the board shows it (diode tests) or ``supply`` / ``drive`` (currents);
  ``test_load_ohms`` is given for ``dc-loaded`` rows only (``10000``, ``10k``, ``4.7kΩ``).

Columns are separated by commas, or by semicolons or tabs as spreadsheets export them (the
header tells which). Values are written as they would be typed, with the kind's unit and an
SI prefix (``12.9``, ``125.7V``, ``890mV``, ``1.2kV``, ``0.35mA``; a decimal comma where commas
do not separate the columns, or in quotes) or ``OL`` for a meter over range. Blank lines and
lines starting with ``#`` are skipped. Each place and kind (and test load) is read at most
once. The readings' source is the file's name.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Iterable, Sequence
from pathlib import Path

from fieldtool.core.errors import InputError, shown
from fieldtool.core.measurement import (
    DC,
    DC_LOADED,
    RIPPLE_PP,
    Measurement,
    Source,
    parse_condition,
    quantity,
)
from fieldtool.core.units import parse_reading

SEPARATORS = (",", ";", "\t")  # a plain CSV, and what spreadsheets in comma-decimal locales
# and tab-separated exports write
LONG_HEADER = ("measure", "at", "value")
LOAD_COLUMN = "test_load_ohms"
RAILS = ("supply", "drive")
EXAMPLES = {
    "V": "volts as e.g. 45.2, 45.2V or 890mV",
    "A": "amps as e.g. 0.00035, 0.35mA or 350uA",
}


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
        if cells[:2] == ["node", "volts"] or tuple(cells[:3]) == LONG_HEADER:
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
    parts: Sequence[str] | None = None,
    rails: Sequence[str] | None = None,
) -> tuple[Measurement, ...]:
    """Measurements from CSV text in either form (module docstring); each place and kind at
    most once, every name checked against the board.

    ``source`` defaults to a file named ``where``. ``parts`` are the diodes' designators as the
    board shows them and ``rails`` where a current can be read (None: not checked here; the
    diagnosis checks them against its dictionary).
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
    if tuple(header[:3]) == LONG_HEADER:
        return _parse_long(rows, header, separator, nodes, labels, where, source, parts, rails)
    if header[:2] != ["node", "volts"] or any(h not in ("ripple_vpp",) for h in header[2:]):
        raise InputError(
            f"{where}:{header_no}: header is {shown(header_line.strip())}; expected 'node,volts' "
            "or 'node,volts,ripple_vpp', or one reading a row under 'measure,at,value' or "
            "'measure,at,value,test_load_ohms' (or ';' between them)"
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


def _parse_long(rows, header, separator, nodes, labels, where, source, parts, rails):
    """The ``measure,at,value[,test_load_ohms]`` form (module docstring)."""
    if len(header) > 4 or (len(header) == 4 and header[3] != LOAD_COLUMN):
        raise InputError(
            f"{where}:{rows[0][0]}: header {','.join(header)!r}; the long form is "
            f"'measure,at,value' with an optional '{LOAD_COLUMN}' column"
        )
    readings: list[Measurement] = []
    seen: set[tuple] = set()
    for number, line in rows[1:]:
        here = f"{where}:{number}"
        cells = [c.strip() for c in next(csv.reader([line], delimiter=separator))]
        if len(cells) == 3 and len(header) == 4:
            cells.append("")
        if len(cells) != len(header):
            raise InputError(
                f"{here}: {len(cells)} columns, expected {len(header)} "
                f"({separator.join(header)})"
                + (
                    "; a decimal comma must be in quotes or the columns separated by ';'"
                    if separator == ","
                    else ""
                )
            )
        try:
            q = quantity(cells[0])
        except InputError as exc:
            raise InputError(f"{here}: {exc.message}") from None
        at = _place(q, cells[1], nodes, labels, parts, rails, here)
        conditions: tuple[tuple[str, float], ...] = ()
        load = cells[3] if len(cells) > 3 else ""
        if q == DC_LOADED:
            if not load:
                raise InputError(
                    f"{here}: a dc-loaded reading needs the test load's resistance in the "
                    f"{LOAD_COLUMN} column, e.g. 10k"
                )
            conditions = ((LOAD_COLUMN, _ohms(load, here)),)
        elif load:
            raise InputError(f"{here}: {LOAD_COLUMN} goes with dc-loaded rows only, not {q.name}")
        key = (q.name, at, conditions)
        if key in seen:
            raise InputError(f"{here}: {q.name} at {at} is read twice; keep one row of each")
        seen.add(key)
        value = _value(cells[2], q, here)
        readings.append(Measurement(at, q, value, source, settled=True, conditions=conditions))
    if not readings:
        raise InputError(f"{where}: only a header, no readings")
    return tuple(readings)


def _place(q, name, nodes, labels, parts, rails, here) -> str:
    if not name:
        raise InputError(f"{here}: no place in the 'at' column; say where {q.name} was read")
    if q.taken_at == "node":
        return resolve_node(name, nodes, labels, here)
    if q.taken_at == "rail":
        known = tuple(rails) if rails is not None else RAILS
        low = name.lower()
        if low not in known:
            known_text = ", ".join(known) or "none on this board"
            raise InputError(f"{here}: current at {name!r}; it is read at {known_text}")
        return low
    if parts is None:
        return name
    for part in parts:
        if part.lower() == name.lower():
            return part
    listed = ", ".join(parts) or "none"
    raise InputError(f"{here}: part {name!r} is not a diode of this board (diodes: {listed})")


def _value(text: str, q, here: str) -> float | None:
    try:
        value = parse_reading(text, q.unit)
    except ValueError as exc:
        example = EXAMPLES.get(q.unit, q.unit)
        raise InputError(
            f"{here}: value not understood for {q.name}: {exc}; write {example}, or OL for overload"
        ) from None
    if value is None:
        return None
    if q.name in ("ripple-pp", "ac-rms") and value < 0:
        raise InputError(f"{here}: {q.name} {value:g} is negative")
    return value


def _ohms(text: str, here: str) -> float:
    """The test load's resistance, read and range-checked as every reading's setting is."""
    try:
        return parse_condition(LOAD_COLUMN, text)
    except InputError as exc:
        raise InputError(f"{here}: {exc.message}") from None


def load_readings(
    path: str | Path,
    nodes: Sequence[str],
    labels: dict[str, str] | None = None,
    parts: Sequence[str] | None = None,
    rails: Sequence[str] | None = None,
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
    return parse_readings_csv(text, nodes, labels, str(p), Source("file", p.name), parts, rails)


def readings_csv(readings: Iterable[Measurement]) -> str:
    """Measurements written back as CSV text: DC (and ripple) only, one row a node in the order
    the DC readings come, with the ripple column only where a ripple was read; any other kind,
    or a ripple without the node's DC, in the long form, one row a reading in order."""
    readings = list(readings)
    for m in readings:
        if m.at is None:
            raise InputError(f"a {m.quantity.name} reading has no place; it cannot be written")
    dc: dict[str, float | None] = {}
    ripple: dict[str, float | None] = {}
    if any(m.quantity not in (DC, RIPPLE_PP) for m in readings):
        return _long_csv(readings)
    for m in readings:
        (dc if m.quantity == DC else ripple)[m.at] = m.value
    if any(n not in dc or ripple[n] is None for n in ripple):  # the short form has no OL there
        return _long_csv(readings)
    out = io.StringIO()
    out.write("node,volts,ripple_vpp\n" if ripple else "node,volts\n")
    for node, volts in dc.items():
        line = f"{node},{'OL' if volts is None else repr(volts)}"
        if ripple:
            value = ripple.get(node)
            line += "," + ("" if value is None else repr(value))
        out.write(line + "\n")
    return out.getvalue()


def _long_csv(readings: list[Measurement]) -> str:
    loads = any(m.conditions for m in readings)
    out = io.StringIO()
    out.write(",".join(LONG_HEADER) + (f",{LOAD_COLUMN}" if loads else "") + "\n")
    for m in readings:
        value = "OL" if m.value is None else repr(m.value)
        line = f"{m.quantity.name},{m.at},{value}"
        if loads:
            ohms = dict(m.conditions).get(LOAD_COLUMN)
            line += "," + ("" if ohms is None else repr(ohms))
        out.write(line + "\n")
    return out.getvalue()
