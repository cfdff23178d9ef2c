"""The square drive held high (both clocks of a Dickson pump).

Only a square-driven board can have it; an AC-fed ladder's drive goes missing instead.
"""

from __future__ import annotations

from fieldtool.core.diagnosis.modes.base import DriveStuckMode


class DriveStuckHigh(DriveStuckMode):
    """The square drive held at its high level."""

    name = "stuck-high"
    words = "drive stuck high"
    held = "high"
