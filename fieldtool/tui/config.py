"""What the app is given: where things live and who works (``AppConfig``), and a board to open
(``SessionRequest``). Plain data, shared by the screens without importing the app."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.diagnosis.faults import Fault
from fieldtool.meters.settings import MeterSettings
from fieldtool.store import StoreAddress
from fieldtool.tui.meter_strip import MeterChoice


@dataclass(frozen=True)
class AppConfig:
    """Where things live and who is working; passed in, never read from the environment here."""

    logs_dir: Path
    profiles_dir: Path | None = None  # your own profiles; the shipped ones are always listed
    cache_dir: Path | None = None
    technician: str = ""
    settings: MeterSettings = field(default_factory=MeterSettings)
    rescue_dir: Path | None = (
        None  # where unsaveable events go at quit (default ~/fieldtool-rescue)
    )
    store: StoreAddress | None = None  # the fleet store for the priors (None: files only)


@dataclass(frozen=True)
class SessionRequest:
    """A board to work on: its profile, serial, meter, and whether to resume (None: ask)."""

    profile: Profile
    serial: str
    meter: MeterChoice
    resume: bool | None = None
    demo_fault: Fault | None = None
    technician: str | None = None  # who signs this session; None: the app's technician
