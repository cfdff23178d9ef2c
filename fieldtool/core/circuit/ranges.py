"""Plausible ranges of every number in a board profile, each bound with its reason.

The profile loader checks every value against its range here, and the command-line options
that stand in for a profile value (``expect --load-ohms``) use the same ranges, so anything the
tool accepts is something the solver, the screens and the history can handle. The bounds are
wide: they refuse slips (millivolts typed as volts, microfarads as farads, ``1e300``), not
unusual boards.
"""

from __future__ import annotations

from fieldtool.core.measurement import CONDITIONS
from fieldtool.core.plausible import Range

# Low-voltage equipment ends at 1500 V DC and 1000 V AC rms (EU Low Voltage Directive
# 2014/35/EU, Art. 1; from memory). A multiplier's input above that is a slip, not a board.
_LVD = "low-voltage equipment ends at 1500 V DC (EU Low Voltage Directive; from memory)"
SUPPLY_VOLTS = Range(0.0, 1500.0, "V", f"the DC input of a multiplier; {_LVD}")
DRIVE_VOLTS = Range(0.0, 1500.0, "V", f"the drive's high level or AC peak; {_LVD}", low_open=True)
DRIVE_LOW_VOLTS = Range(-1500.0, 1500.0, "V", _LVD)
FREQUENCY_HZ = Range(
    1.0,
    1e9,
    "Hz",
    "mains-fed ladders run at 50 or 60 Hz and integrated pumps at up to hundreds of MHz; "
    "below 1 Hz nothing is pumped",
    high_open=True,
)
SOURCE_OHMS = Range(
    1e-3,
    1e6,
    "Ω",
    "a supply lead or driver has milliohms at least; above 1 MΩ it could not feed a pump",
)
EDGE_FRACTION = Range(
    0.0,
    0.25,
    "",
    "the rise or fall time as a fraction of the period",
    low_open=True,
    high_open=True,
)
DRIVE_TOLERANCE = Range(0.0, 0.5, "", "a fraction: 0.02 means ±2 %", high_open=True)
TEMPERATURE_C = Range(
    -60.0, 200.0, "°C", "from arctic field work to hot enclosures", high_open=True
)
# Below about 1 V the meter's own accuracy matters more than any shock threshold; extra-low
# voltage ends at 120 V ripple-free DC (IEC 61140; from memory), so a "safe" level above it
# is not safe to touch.
SAFE_VOLTS = Range(1.0, 120.0, "V", "extra-low voltage ends at 120 V DC (IEC 61140; from memory)")
STAGES = (1, 40)  # a whole number; more stages than 40 is beyond any board seen (no source)

# Diodes. Vendor SPICE models put healthy junctions between about 1e-15 A (small silicon) and
# 1e-5 A (large Schottky rectifiers) (common practice); the range leaves a wide margin.
SATURATION_CURRENT_A = Range(
    1e-24,
    1e-3,
    "A",
    "vendor diode models lie between about 1e-15 and 1e-5 A (common practice)",
)
# An ideal junction has 1 and a recombination-dominated one 2 (Sze, Physics of Semiconductor
# Devices; from memory); a stack of junctions in one package adds about one per junction.
EMISSION_COEFFICIENT = Range(
    0.5,
    10.0,
    "",
    "1 for an ideal junction, 2 for recombination, about one more per junction of a stack",
    high_open=True,
)
FORWARD_VOLTS = Range(
    0.0,
    5.0,
    "V",
    "one diode drops well under a volt; a stack of junctions a few volts",
    low_open=True,
    high_open=True,
)
FORWARD_AMPS = Range(
    1e-9, 100.0, "A", "the test current of a datasheet's forward-drop figure", low_open=False
)
DIODE_SERIES_OHMS = Range(
    0.0, 1e4, "Ω", "a working diode's bulk resistance is ohms; above 10 kΩ it is an open part"
)
LEAKAGE_OHMS = Range(
    1e3,
    1e18,
    "Ω",
    "below 1 kΩ a part is shorted, not leaky (model that as a fault); above 1e18 Ω is beyond "
    "any insulation resistance",
)

# Capacitors. Below about 10 pF a discrete part is lost in the board's stray capacitance and
# in what an open capacitor leaves (1 pF), so its open fault could not be told apart.
FARADS = Range(
    1e-11,
    1.0,
    "F",
    "below 10 pF a part is lost in the board's strays; above 1 F it is a supercapacitor, not a "
    "multiplier part",
)
CAP_TOLERANCE = Range(0.0, 1.0, "", "a fraction: 0.2 means ±20 %", high_open=True)
ESR_OHMS = Range(
    0.0, 1e3, "Ω", "a healthy capacitor's ESR is milliohms to ohms; above 1 kΩ it has failed"
)
STRAY_FARADS = Range(
    0.0, 1e-9, "F", "stray capacitance per node is picofarads; 1 nF would be a capacitor"
)

# Load and bleeder.
LOAD_OHMS = Range(
    1.0,
    1e15,
    "Ω",
    "below 1 Ω the output is shorted; above 1 PΩ there is no load: write amps = 0 instead",
)
LOAD_AMPS = Range(
    0.0, 10.0, "A", "a diode–capacitor multiplier is a low-current supply (common practice)"
)
BLEEDER_OHMS = Range(
    1.0, 1e15, "Ω", "below 1 Ω the output is shorted; above 1 PΩ there is no bleeder: omit it"
)

# The meter.
METER_OHMS = Range(
    1e3,
    1e16,
    "Ω",
    "from an analogue meter's 20 kΩ/V to an electrometer (common practice)",
)
METER_PERCENT = Range(
    0.0, 50.0, "%", "a meter's accuracy, in percent of the reading", high_open=True
)
METER_VOLTS = Range(0.0, 100.0, "V", "the fixed part of a meter's accuracy")
METER_RANGE_VOLTS = Range(
    0.01, 1e6, "V", "from a millivolt range to a high-voltage divider", low_open=False
)

# Instruments beyond the DC voltmeter ([meter] AC, current and diode-test keys; [scope]).
AC_INPUT_FARADS = Range(0.0, 1e-6, "F", "an input's own capacitance is picofarads", high_open=True)
BANDWIDTH_HZ = Range(1.0, 1e10, "Hz", "from a handheld's hundreds of hertz to a fast scope")
CURRENT_ACCURACY_AMPS = Range(0.0, 1.0, "A", "the fixed part of a current range's accuracy")
BURDEN_OHMS = Range(
    0.0,
    1e6,
    "Ω",
    "a current range's shunt and fuse: milliohms to kilohms on microamp ranges",
    high_open=True,
)
DIODE_TEST_AMPS = Range(
    1e-6, 0.1, "A", "diode-test modes drive about 0.1 to 1 mA (common practice)", high_open=True
)
DIODE_TEST_VOLTS = Range(
    0.1, 20.0, "V", "a diode test's open-circuit voltage is a few volts", high_open=True
)
SETTLE_S = Range(0.01, 3600.0, "s", "from a blink to an hour at the bench")
PROBE_FARADS = Range(0.0, 1e-6, "F", "a probe's own capacitance is picofarads", high_open=True)
TEST_LOAD_OHMS = CONDITIONS["test_load_ohms"]  # a profile's test load and a reading's alike
RATED_WATTS = Range(1e-3, 1e4, "W", "from a small film resistor to a load bank")

EFFORT = Range(
    0.0,
    1000.0,
    "",
    "a step's effort relative to one DC reading on a powered node, which is 1",
    low_open=True,
    high_open=True,
)
