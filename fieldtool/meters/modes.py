"""A meter's modes (the dial's positions), the measurement kinds each reads, and the unit
markings a meter prints for each.

A meter does not know about test loads or which node a probe is on: it is in DC volts, AC
volts, DC current, diode test or (a scope, or a meter with a peak function) peak to peak.
Each registered measurement kind is read in one of those modes: ``dc`` and ``dc-loaded`` both
in DC volts (the test load is on the board, not in the meter), ``ac-rms`` in AC volts,
``current`` in DC current, ``diode-test`` in the diode-test mode, ``ripple-pp`` peak to peak.

``unit_marking`` reads what a streaming meter prints after the number (``V``, ``mV DC``,
``VAC``, ``V~``, ``mA``, ``µA``, ``V DIODE``, ``V ->|``, ``Vpp``) into a scale and a mode, so
a meter's kind is known from its line alone.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    QUANTITIES,
    RIPPLE_PP,
    Quantity,
)
from fieldtool.core.units import unit_scale


@dataclass(frozen=True)
class Mode:
    """One position of a meter's dial.

    Attributes:
        name: for people, e.g. "AC volts".
        unit: the base unit it shows.
        scpi: the SCPI set-up command that selects it, "" where a DMM has no such mode.
        kinds: the measurement kinds read in this mode, the plain one first.
    """

    name: str
    unit: str
    scpi: str
    kinds: tuple[str, ...]


# SCPI set-up commands: SCPI 1999.0 Vol. 2, the CONFigure and MEASure subsystems (from
# memory; meters' own manuals list the ones they accept). CONF:DIOD is not in SCPI-99 itself
# but is the diode-test function of many SCPI bench meters (common practice, no source).
# SCPI's peak-to-peak function keyword is PTPeak (from memory); a DMM rarely has it, so a
# settings file names the command of the instrument that does.
DC_VOLTS = Mode("DC volts", "V", "CONF:VOLT:DC", (DC.name, DC_LOADED.name))
AC_VOLTS = Mode("AC volts", "V", "CONF:VOLT:AC", (AC_RMS.name,))
DC_AMPS = Mode("DC current", "A", "CONF:CURR:DC", (CURRENT.name,))
DIODE = Mode("diode test", "V", "CONF:DIOD", (DIODE_TEST.name,))
PEAK_TO_PEAK = Mode("peak to peak", "V", "", (RIPPLE_PP.name,))
AC_AMPS = Mode("AC current", "A", "CONF:CURR:AC", ())  # meters have it; no kind is read in it
MODES = (DC_VOLTS, AC_VOLTS, DC_AMPS, DIODE, PEAK_TO_PEAK, AC_AMPS)

_MODE_OF = {kind: mode for mode in MODES for kind in mode.kinds}  # every kind: a test checks


def mode_of(quantity: Quantity) -> Mode:
    """The mode a meter is in to read ``quantity``."""
    return _MODE_OF[quantity.name]


def plain_kind(mode: Mode) -> Quantity | None:
    """The kind a sample in ``mode`` is taken as when nothing else is known (None: no kind is
    read in that mode)."""
    return QUANTITIES[mode.kinds[0]] if mode.kinds else None


# What streaming meters print after the unit, upper-cased with spaces dropped. "=" and "⎓"
# are the DC symbols of IEC 60417 (5031) and "~" the AC one (5032), as meters print them in
# ASCII or Unicode (from memory); "->|" and "▶|" draw the diode symbol.
_DC_MARKS = {"", "DC", "=", "⎓"}
_AC_MARKS = {"AC", "~", "RMS", "ACRMS", "TRMS"}
_DIODE_MARKS = {"DIODE", "DIOD", "DIO", "->|", "▶|", "►|", "→|", "⊳|"}
_PP_MARKS = {"PP", "P-P", "PK-PK", "PKPK", "PEAK-PEAK"}
_UNIT = re.compile(r"^(?P<prefix>[nuµμmkKM]?)(?P<base>[VA])(?P<mark>.*)$")


class UnknownMarking(ValueError):
    """A unit text whose unit or mode marking is not one a meter prints for a known kind."""


def unit_marking(text: str) -> tuple[float, Mode] | None:
    """(base units per shown unit, mode) for what a meter prints after its number.

    ``"mV"`` → (1e-3, DC volts); ``"V AC"``, ``"VAC"``, ``"V~"`` → AC volts; ``"mA"`` → DC
    current; ``"V DIODE"``, ``"V ->|"`` → diode test; ``"Vpp"`` → peak to peak; ``"mA AC"`` →
    AC current (a mode no kind is read in). None for no unit at all (the kind is then what the
    settings or the tool say).

    Raises:
        UnknownMarking: a unit or marking that is not one of these.
    """
    stripped = text.strip()
    if not stripped:
        return None
    match = _UNIT.match(stripped)
    if match is None:
        raise UnknownMarking(f"unit {stripped!r} is neither volts nor amps")
    scale = unit_scale(match["prefix"] + match["base"], match["base"])
    if scale is None and match["prefix"] == "n":
        scale = 1e-9
    if scale is None:
        raise UnknownMarking(f"unit prefix in {stripped!r} is not one a meter shows")
    mark = re.sub(r"\s+", "", match["mark"]).upper()
    volts = match["base"] == "V"
    if mark in _DC_MARKS:
        return scale, DC_VOLTS if volts else DC_AMPS
    if mark in _AC_MARKS:
        return scale, AC_VOLTS if volts else AC_AMPS
    if volts and mark in _DIODE_MARKS:
        return scale, DIODE
    if volts and mark in _PP_MARKS:
        return scale, PEAK_TO_PEAK
    shown = match["mark"].strip()
    raise UnknownMarking(f"marking {shown!r} after the unit is not one fieldtool reads")
