"""The words for the stored-charge hazard: one signal word and one standing line, chosen by
how high the board goes. Plain text with no numerics, so the command line's help can show it
without loading the solver.
"""

from __future__ import annotations

# Signal words (ANSI Z535.4-2007 §4.14, as quoted by sign makers; ISO 3864-2 uses the same
# three words, from memory): DANGER "will result in death or serious injury", WARNING "could
# result in death or serious injury", CAUTION "could result in minor or moderate injury".
# Stored charge on a board above the safe level could kill: WARNING. Below it a discharge can
# still burn or make a hand jerk back: CAUTION. Where the board is not known, WARNING.
SIGNAL_WORD = "WARNING"
LOW_VOLTAGE_SIGNAL_WORD = "CAUTION"
HAZARD_WARNING = (
    "Stored charge can kill. Power off, discharge through a rated resistor, verify with the "
    "meter before touching. Estimates only: local codes and licensed practice come first."
)
LOW_VOLTAGE_HAZARD = (
    "Stored charge can still spark and burn. Power off, discharge, verify with the meter "
    "before touching. Estimates only: local codes and licensed practice come first."
)
SAFETY_WARNING = f"{SIGNAL_WORD}: {HAZARD_WARNING}"


def signal_word(highest_volts: float | None, safe_volts: float) -> str:
    """WARNING when a node is (or may be: None, over range) at or above the safe level,
    CAUTION below it (see the signal words above)."""
    if highest_volts is None or abs(highest_volts) >= safe_volts:
        return SIGNAL_WORD
    return LOW_VOLTAGE_SIGNAL_WORD


def safety_line(highest_volts: float | None, safe_volts: float) -> str:
    """The standing safety line for a board whose highest node is ``highest_volts``."""
    word = signal_word(highest_volts, safe_volts)
    return f"{word}: {HAZARD_WARNING if word == SIGNAL_WORD else LOW_VOLTAGE_HAZARD}"
