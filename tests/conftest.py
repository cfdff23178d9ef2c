"""Shared test helpers: build profiles in memory and run ngspice as a reference."""

from __future__ import annotations

import copy
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest

from fieldtool.core.circuit.profile import Profile, profile_from_dict

ROOT = Path(__file__).resolve().parent.parent
PROFILES = sorted((ROOT / "fieldtool" / "profiles").glob("*.toml"))

BASE = {
    "board": {"name": "test-board", "topology": "dc-ladder", "polarity": "positive", "stages": 3},
    "supply": {"volts": 5.0},
    "drive": {"volts": 5.0, "frequency_hz": 10000.0, "source_ohms": 2.0},
    # A small-signal silicon diode (vendor-model-like values, see shared references)
    "diode": {"saturation_current_a": 2.52e-9, "emission_coefficient": 1.752, "series_ohms": 0.568},
    "capacitor": {"farads": 4.7e-6, "tolerance": 0.2, "esr_ohms": 0.05},
    "load": {"ohms": 22000.0},
}


def make_profile(**sections) -> Profile:
    """A profile from BASE with sections updated (a value of None removes the key)."""
    data = copy.deepcopy(BASE)
    for name, values in sections.items():
        if values is None:
            data.pop(name, None)
            continue
        table = data.setdefault(name, {})
        for k, v in values.items():
            if v is None:
                table.pop(k, None)
            else:
                table[k] = v
    return profile_from_dict(data, "<test>")


NGSPICE = shutil.which("ngspice")
needs_ngspice = pytest.mark.skipif(
    NGSPICE is None, reason="ngspice not installed (Debian package `ngspice`; CI installs it)"
)


def run_ngspice(netlist: str, workdir: Path) -> tuple[np.ndarray, np.ndarray]:
    """Run a netlist in batch mode; return (times, node voltages) from its out.txt."""
    (workdir / "circuit.cir").write_text(netlist)
    proc = subprocess.run(
        [NGSPICE, "-b", "circuit.cir"], cwd=workdir, capture_output=True, text=True, timeout=600
    )
    out = workdir / "out.txt"
    if not out.exists():
        raise AssertionError(
            f"ngspice wrote no data:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
        )
    data = np.loadtxt(out)
    return data[:, 0], data[:, 1:]


@pytest.fixture(scope="session")
def dictionary_cache(tmp_path_factory) -> Path:
    """One fault-dictionary cache folder for the whole test session.

    Cold dictionaries of the shipped profiles take seconds each; every test that needs one
    (CLI or core) shares this folder, so each board's dictionary is built once per session.
    """
    return tmp_path_factory.mktemp("fieldtool-cache")
