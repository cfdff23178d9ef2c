"""One measurement: where it was taken, of what quantity, its value, and how far to trust it.

A ``Measurement`` travels unchanged from the meter driver through the settle rule, the
session, the history record and the diagnosis. A meter's raw sample is a measurement not yet
placed (``at`` None) nor settled; the settle rule judges a run of samples into one with its
spread and a ``settled`` flag; the session places it at a node and keeps it; the history
stores it (``to_fields``); the diagnosis reads it.

What was measured is a ``Quantity`` from ``QUANTITIES``: plain data (its name, base unit,
words, what it is taken at, whether the board is powered, and any settings each reading of it
must carry, such as a test load's resistance), so a new kind of reading is one more entry here
plus its prediction in the diagnosis, not a new class. ``dc`` is a DC voltage at a node with
the board powered; ``ripple-pp`` is the peak-to-peak ripple at a node, as the readings file's
``ripple_vpp`` column has carried it; ``ac-rms`` the AC component at a node as a true-RMS
meter reads it; ``current`` the DC current in a supply lead (``supply``, or ``drive`` where the
drive has its own rail); ``dc-loaded`` DC volts at a node with a test load from the output to
ground (its resistance a condition of each reading); ``diode-test`` the meter's diode-test
reading across a diode in circuit, board off and discharged (red lead on the anode).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from typing import Any

from fieldtool.core.errors import InputError, shown
from fieldtool.core.plausible import Range
from fieldtool.core.units import parse_reading

TAKEN_AT = ("node", "part", "rail")  # a node name, a part designator, a supply rail

# The settings a reading may carry, each with its plausible range (its unit is the range's):
# the one rule for a stored record, a readings file's column and a typed setting alike.
CONDITIONS: dict[str, Range] = {
    "test_load_ohms": Range(
        1.0, 1e15, "Ω", "below 1 Ω a test load shorts the output; above 1 PΩ it loads nothing"
    ),
}


@dataclass(frozen=True)
class Quantity:
    """A kind of reading: what it measures, in which unit, where and with the board how."""

    name: str  # as stored and typed, e.g. "dc"
    unit: str  # the base unit every value is held in, e.g. "V"
    words: str  # for people, e.g. "DC volts"
    taken_at: str  # one of TAKEN_AT
    powered: bool  # True when the board is powered while it is measured
    conditions: tuple[str, ...] = ()  # settings each reading carries, e.g. ("test_load_ohms",)

    def __post_init__(self) -> None:
        if self.taken_at not in TAKEN_AT:
            raise ValueError(f"{self.name}: taken_at must be one of {TAKEN_AT}")
        unknown = [c for c in self.conditions if c not in CONDITIONS]
        if unknown:
            raise ValueError(f"{self.name}: settings {unknown} have no range in CONDITIONS")


DC = Quantity("dc", "V", "DC volts", "node", powered=True)
RIPPLE_PP = Quantity("ripple-pp", "V", "ripple peak to peak", "node", powered=True)
AC_RMS = Quantity("ac-rms", "V", "AC volts (true RMS)", "node", powered=True)
CURRENT = Quantity("current", "A", "current", "rail", powered=True)  # "supply current"
DC_LOADED = Quantity(
    "dc-loaded",
    "V",
    "DC volts under a test load",
    "node",
    powered=True,
    conditions=("test_load_ohms",),
)
DIODE_TEST = Quantity("diode-test", "V", "diode test, board off", "part", powered=False)
QUANTITIES: dict[str, Quantity] = {
    q.name: q for q in (DC, RIPPLE_PP, AC_RMS, CURRENT, DC_LOADED, DIODE_TEST)
}


def quantity(name: str) -> Quantity:
    """The registered quantity of that name (any case), or an InputError listing them."""
    found = QUANTITIES.get(name.strip().lower())
    if found is None:
        known = ", ".join(QUANTITIES)
        raise InputError(f"unknown measurement kind {name.strip()!r}; known kinds: {known}")
    return found


SOURCE_KINDS = ("typed", "file", "meter", "simulated")


@dataclass(frozen=True)
class Source:
    """Where a value came from: typed, a readings file, a meter, or the simulated meter."""

    kind: str  # one of SOURCE_KINDS
    name: str = ""  # the file's name, or the meter's identity (or its port) for a meter

    def __post_init__(self) -> None:
        if self.kind not in SOURCE_KINDS:
            raise InputError(
                f"unknown reading source {self.kind!r}; expected one of {', '.join(SOURCE_KINDS)}"
            )

    def __str__(self) -> str:
        if self.kind == "typed":
            return "typed"
        if self.kind == "file":
            return f"file {self.name}"
        return self.name or ("simulated meter" if self.kind == "simulated" else "meter")

    def to_json(self) -> dict[str, str]:
        """The stored form: ``{"kind": ..., "name": ...}`` (no name when it has none)."""
        return {"kind": self.kind, "name": self.name} if self.name else {"kind": self.kind}

    @classmethod
    def from_json(cls, data: Any) -> Source:
        """The stored form read back; InputError for anything else."""
        if not isinstance(data, Mapping) or not isinstance(data.get("kind"), str):
            raise InputError(f"reading source {data!r} is not {{'kind': ..., 'name': ...}}")
        name = data.get("name", "")
        return cls(data["kind"], name if isinstance(name, str) else str(name))


TYPED = Source("typed")


def parse_condition(name: str, text: str) -> float:
    """A reading's setting as written in a readings file or typed (``test_load_ohms``:
    ``47k``, ``47 kΩ``, ``47000``, a decimal comma too), checked against its range in
    ``CONDITIONS``; InputError says what was wrong and how to write it."""
    plausible = CONDITIONS.get(name)
    if plausible is None:
        raise InputError(f"unknown reading setting {shown(name)}; known: {', '.join(CONDITIONS)}")
    try:
        value = parse_reading(text, plausible.unit)
    except ValueError as exc:
        raise InputError(f"{name}: {exc}; write it as e.g. 47k, 47kΩ or 47000") from None
    if value is None:
        raise InputError(f"{name} is OL; write the setting's value, e.g. 47k")
    problem = plausible.problem(value)
    if problem:
        raise InputError(f"{name} {problem}")
    return value


def _finite(value: Any, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise InputError(f"{what} must be a number, not {value!r}")
    try:
        number = float(value)
    except OverflowError:  # an integer too long for a float: no meter shows one
        raise InputError(f"{what} must be a finite number, not an integer that long") from None
    if not math.isfinite(number):
        raise InputError(f"{what} must be a finite number, not {value!r}")
    return number


@dataclass(frozen=True)
class Measurement:
    """One reading of one quantity at one place.

    Attributes:
        at: the node, part designator or rail it was taken at; None for a meter's sample
            that is not placed yet.
        quantity: what was measured (``QUANTITIES``).
        value: in the quantity's base unit; None when the meter was over range.
        source: typed, a file, a meter (its identity) or the simulated meter.
        spread: how far the readings it was judged from spread (max − min), if known.
        settled: True once the settle rule was met; False for a raw sample and for a value
            taken before it settled. Typed and file readings are as the technician judged
            them: True.
        samples: how many meter samples it was judged from (1 for a typed value).
        taken: when it was taken (UTC, ISO 8601), if known.
        conditions: the quantity's settings for this reading, e.g. a test load's ohms.
    """

    at: str | None
    quantity: Quantity
    value: float | None
    source: Source
    spread: float | None = None
    settled: bool = False
    samples: int = 1
    taken: str | None = None
    conditions: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        where = f"{self.quantity.name} reading at {self.at or '(not placed)'}"
        if self.value is not None:
            object.__setattr__(self, "value", _finite(self.value, f"{where}: the value"))
        if self.spread is not None:
            spread = _finite(self.spread, f"{where}: the spread")
            if spread < 0:
                raise InputError(f"{where}: the spread {spread:g} is negative")
            object.__setattr__(self, "spread", spread)
        if isinstance(self.samples, bool) or not isinstance(self.samples, int) or self.samples < 1:
            raise InputError(f"{where}: samples must be a whole number of at least 1")
        names = tuple(name for name, _ in self.conditions)
        if sorted(names) != sorted(self.quantity.conditions):
            wanted = ", ".join(self.quantity.conditions) or "none"
            raise InputError(
                f"{where}: needs the settings {wanted}, got {', '.join(names) or 'none'}"
            )
        for name, value in self.conditions:
            plausible = CONDITIONS.get(name)
            problem = plausible.problem(_finite(value, f"{where}: {name}")) if plausible else None
            if problem:
                raise InputError(f"{where}: {name} {problem}")

    @property
    def overload(self) -> bool:
        """True when the meter was over range."""
        return self.value is None

    @property
    def unit(self) -> str:
        """The unit of ``value`` (the quantity's base unit)."""
        return self.quantity.unit

    def placed(self, at: str | None) -> Measurement:
        """The same measurement taken at ``at``."""
        return replace(self, at=at)

    def condition(self, name: str) -> float:
        """One of the reading's settings by name (KeyError if it has none of that name)."""
        for key, value in self.conditions:
            if key == name:
                return value
        raise KeyError(name)

    def to_fields(self) -> dict[str, Any]:
        """The fields a history record stores for it (JSON types only)."""
        fields: dict[str, Any] = {
            "at": self.at,
            "quantity": self.quantity.name,
            "value": self.value,
            "unit": self.unit,
            "source": self.source.to_json(),
            "spread": self.spread,
            "settled": self.settled,
            "samples": self.samples,
            "taken": self.taken,
        }
        if self.conditions:
            fields["conditions"] = dict(self.conditions)
        return fields

    @classmethod
    def from_fields(cls, fields: Mapping[str, Any]) -> Measurement:
        """A measurement from stored fields (``to_fields``); InputError names what is wrong."""
        q = quantity(str(fields.get("quantity", "")))
        unit = fields.get("unit", q.unit)
        if unit != q.unit:
            raise InputError(f"a {q.name} reading is stored in {unit!r}, expected {q.unit!r}")
        at = fields.get("at")
        if at is not None and not isinstance(at, str):
            raise InputError(f"a reading's place must be a name, not {at!r}")
        taken = fields.get("taken")
        conditions = fields.get("conditions") or {}
        if not isinstance(conditions, Mapping):
            raise InputError(f"a reading's settings must be a table, not {conditions!r}")
        settled = fields.get("settled", False)
        return cls(
            at=at,
            quantity=q,
            value=fields.get("value"),
            source=Source.from_json(fields.get("source")),
            spread=fields.get("spread"),
            settled=settled if isinstance(settled, bool) else False,
            samples=fields.get("samples", 1),
            taken=taken if isinstance(taken, str) else None,
            conditions=tuple((str(k), v) for k, v in conditions.items()),
        )
