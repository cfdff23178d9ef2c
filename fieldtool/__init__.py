"""fieldtool: find the failed part in a diode-capacitor voltage multiplier, node by node."""

__version__ = "0.1.0"
