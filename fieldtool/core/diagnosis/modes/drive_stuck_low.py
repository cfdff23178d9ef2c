"""The square drive held low (both clocks of a Dickson pump).

Only a square-driven board can have it; an AC-fed ladder's drive goes missing instead.
"""

from __future__ import annotations

from fieldtool.core.diagnosis.modes.base import DriveStuckMode


class DriveStuckLow(DriveStuckMode):
    """The square drive held at its low level."""

    name = "stuck-low"
    words = "drive stuck low"
    held = "low"
