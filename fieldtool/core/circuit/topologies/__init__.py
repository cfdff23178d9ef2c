"""Every multiplier topology the tool knows, one module each, registered here.

To add one: a module with a ``Topology`` subclass (see ``base``), its instance in
``TOPOLOGIES`` below, and its checks in ``tests/core`` (an ngspice cross-check and, where the
literature has one, a closed form). Nothing else changes.
"""

from __future__ import annotations

from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.topologies.ac_ladder import AcLadder
from fieldtool.core.circuit.topologies.base import Topology
from fieldtool.core.circuit.topologies.dc_ladder import DcLadder
from fieldtool.core.circuit.topologies.dickson import Dickson

TOPOLOGIES: dict[str, Topology] = {t.name: t for t in (DcLadder(), Dickson(), AcLadder())}


def topology_named(name: str) -> Topology:
    """The topology registered under a name (KeyError when there is none)."""
    return TOPOLOGIES[name]


def topology_of(profile: Profile) -> Topology:
    """The topology a profile describes."""
    return TOPOLOGIES[profile.topology]
