"""Where board profiles are found: a file named on the command line, your own folder, then the
profiles shipped inside the package.

A profile is named either by a path to its ``.toml`` file or by its file name without the
extension (``tidegauge-apd-bias``). Names are looked up first in your own profiles folder
(``$FIELDTOOL_PROFILES``, else ``./profiles``), then among the shipped profiles, which are
package data read with ``importlib.resources`` so a plain wheel install carries them.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from fieldtool.core.circuit.profile import load_profile, load_profile_bytes
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.errors import ProfileError, shown

ENV_VAR = "FIELDTOOL_PROFILES"
SHIPPED_PACKAGE = "fieldtool.profiles"


@dataclass(frozen=True)
class ProfileEntry:
    """One profile fieldtool can find: its name, where it lives, and whether it was shipped."""

    name: str
    where: str  # a file path, for messages and for loading
    shipped: bool

    def load(self) -> Profile:
        """Read and validate the profile."""
        if self.shipped:
            return load_profile_bytes(self.read_bytes(), self.where)
        return load_profile(self.where)

    def read_bytes(self) -> bytes:
        """The profile's TOML file as it is stored (ProfileError when it cannot be read)."""
        if self.shipped:
            return (resources.files(SHIPPED_PACKAGE) / f"{self.name}.toml").read_bytes()
        try:
            return Path(self.where).read_bytes()
        except OSError as exc:
            raise ProfileError(f"{self.where}: cannot be read ({exc.strerror or exc})") from None


def user_profiles_dir(env: Mapping[str, str], cwd: Path | None = None) -> Path:
    """Your own profiles folder: $FIELDTOOL_PROFILES, else ./profiles."""
    if env.get(ENV_VAR):
        return Path(env[ENV_VAR])
    return (cwd or Path.cwd()) / "profiles"


def shipped_entries() -> list[ProfileEntry]:
    """The profiles shipped inside the package, by name."""
    root = resources.files(SHIPPED_PACKAGE)
    found = [
        ProfileEntry(item.name.removesuffix(".toml"), str(item), True)
        for item in root.iterdir()
        if item.name.endswith(".toml") and item.is_file()
    ]
    return sorted(found, key=lambda e: e.name)


def folder_entries(folder: Path) -> list[ProfileEntry]:
    """The ``.toml`` profiles in one folder, by name (none when the folder does not exist)."""
    if not folder.is_dir():
        return []
    return [ProfileEntry(p.stem, str(p), False) for p in sorted(folder.glob("*.toml"))]


def available(folder: Path | None) -> list[ProfileEntry]:
    """Every profile by name: your folder's first (None: no folder), then the shipped ones it
    does not shadow."""
    own = folder_entries(folder) if folder is not None else []
    names = {e.name for e in own}
    return own + [e for e in shipped_entries() if e.name not in names]


def looks_like_path(text: str) -> bool:
    """True when the text names a file rather than a profile by name."""
    return text.endswith(".toml") or os.sep in text or (os.altsep or "/") in text


def find_profile(text: str, folder: Path | None) -> Profile:
    """The profile a command-line argument names: a ``.toml`` path, or a name (see module doc)."""
    if looks_like_path(text) or Path(text).is_file():
        return load_profile(text)
    return locate(text, folder).load()


def locate(text: str, folder: Path | None) -> ProfileEntry:
    """Where the profile a command-line argument names lives (a path, or a name)."""
    if looks_like_path(text) or Path(text).is_file():
        return ProfileEntry(Path(text).stem, text, False)
    entries = available(folder)
    for entry in entries:
        if entry.name == text:
            return entry
    known = ", ".join(e.name for e in entries) or "none"
    raise ProfileError(
        f"no profile named {shown(text)} (known: {known}); give a .toml path, or put "
        f"{text}.toml in your profiles folder"
    )
