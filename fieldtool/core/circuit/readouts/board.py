"""One board's readings beyond DC volts, for ``fieldtool expect``: solve it, then read it."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.netlist import Change, build_circuit
from fieldtool.core.circuit.readouts.diode_test import DiodeTests, diode_tests
from fieldtool.core.circuit.readouts.powered import PoweredReadouts, load_watts, powered_readouts
from fieldtool.core.circuit.solver import steady_state
from fieldtool.core.circuit.spec import Profile
from fieldtool.core.circuit.staged import staged_steady_state
from fieldtool.core.errors import SolverError


@dataclass(frozen=True)
class TestLoadPower:
    """What one test load takes at the expected output, and whether its rating covers it."""

    __test__ = False  # not a pytest test class

    ohms: float
    watts: float  # V²/R at the expected unloaded output
    rated_watts: float | None
    volts: float  # the voltage across it: the expected output

    @property
    def over_rating(self) -> bool:
        """True where the resistor's power rating is below what it will take."""
        return self.rated_watts is not None and self.watts > self.rated_watts


@dataclass(frozen=True)
class BoardReadouts:
    """The powered readings (one variant) and the diode tests of one board."""

    profile: Profile
    powered: PoweredReadouts
    diodes: DiodeTests
    output_volts: float  # the expected output with no meter and no test load on the board
    test_loads: tuple[TestLoadPower, ...]


def board_readouts(
    profile: Profile,
    steps: int = 80,
    fault: Change | None = None,
    spreads: bool = True,
    test_load_ohms: tuple[float, ...] | None = None,
) -> BoardReadouts:
    """Every reading beyond DC volts of one board (optionally faulted), with its test loads
    (``test_load_ohms``, None for the profile's ``[test_loads]``)."""
    circuit, params = build_circuit(profile)
    if fault is not None:
        params = fault.apply(circuit, params, profile)
        ss = staged_steady_state(circuit, params, steps)
    else:
        ss = steady_state(circuit, params, steps_per_period=steps)
    if not ss.converged.all():
        raise SolverError(
            f"{profile.path}: periodic steady state not reached (residual "
            f"{float(ss.residual.max()):.3g} V); the profile may describe an unstable board"
        )
    powered = powered_readouts(
        circuit, params, ss.period, profile, test_load_ohms, steps=steps, spreads=spreads
    )
    h = np.diff(ss.period.times)
    out = ss.period.v[0, :, circuit.output_node - 1]
    v_out = float((out * h).sum() / ss.period.times[-1])
    loads = tuple(
        TestLoadPower(t.ohms, load_watts(v_out, t.ohms), t.rated_watts, v_out)
        for t in profile.test_loads
    )
    diodes = diode_tests(circuit, params, profile.instruments)
    return BoardReadouts(profile, powered, diodes, v_out, loads)
