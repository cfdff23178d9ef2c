"""Readings beyond DC volts, each predicted as its instrument reads it, batched over variants.

``powered`` (ripple p-p on a scope, AC RMS on a true-RMS meter, supply current through the
meter's burden, DC under a test load), ``diode_test`` (power off, discharged, the meter's
diode-test mode across each diode in circuit), ``spread`` (their normal spreads from part
tolerances and the instruments' accuracy) and ``waveform`` (what an instrument makes of one
period of a waveform).
"""
