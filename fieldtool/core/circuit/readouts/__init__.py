"""Readings beyond DC volts, each predicted as its instrument reads it, batched over variants.

``powered`` (ripple p-p on a scope, AC RMS on a true-RMS meter, supply current through the
meter's burden, DC under a test load), ``diode_test`` (power off, discharged, the meter's
diode-test mode across each diode in circuit), ``spread`` (their normal spreads from part
tolerances and the instruments' accuracy) and ``waveform`` (what an instrument makes of one
period of a waveform). ``board`` puts them together for one board (``fieldtool expect``).

For many variants at once (the fault dictionary), with ``Params`` of B variants and their
solved steady ``Period`` (one row each, on ``period_grid(circuit, steps)``)::

    powered = powered_readouts(circuit, params, period, profile, test_load_ohms, steps)
    diodes = diode_tests(circuit, params, profile.instruments)

Spreads are 1σ from part tolerances; add the instrument's own with ``accuracy_sigma``.
"""

from fieldtool.core.circuit.readouts.board import BoardReadouts, board_readouts
from fieldtool.core.circuit.readouts.diode_test import DiodeTests, diode_tests
from fieldtool.core.circuit.readouts.powered import PoweredReadouts, load_watts, powered_readouts
from fieldtool.core.circuit.readouts.spread import KINDS, accuracy_sigma, diode_drop_sigma

__all__ = [
    "KINDS",
    "BoardReadouts",
    "DiodeTests",
    "PoweredReadouts",
    "accuracy_sigma",
    "board_readouts",
    "diode_drop_sigma",
    "diode_tests",
    "load_watts",
    "powered_readouts",
]
