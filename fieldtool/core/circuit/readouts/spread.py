"""Normal spreads of the readings beyond DC volts: part tolerances and instrument accuracy.

Two ways, chosen by what the reading is:

- **First order through the linear response** (``response.linear_response``: the variational
  equations of the periodic steady state) for readings that are period averages of node
  voltages: ``dc-loaded`` (the node's average with the test load on) and ``current`` (the
  supply lead's average current is g·(V_supply − v̄_S0), linear in the supply node's average),
  and, at DC, the diode test (``diode_test.volts_per_drop``, from the settled point's Jacobian).
- **Finite differences over the tolerance parameters** for ``ripple-pp`` and ``ac-rms``: they
  are extremes and RMS values of the waveform, which the linear response (period averages
  only) does not carry. Each part capacitor's value, the drive swing and the supply are
  nudged by their 1σ one at a time and every diode's forward drop together (their common
  temperature shift and, conservatively, their part-to-part spread as if correlated: a small
  term for ripple, whose dependence on the drops goes through the output current), and the
  board is solved again from its steady state; a forward difference with a step of one σ.

Tolerances are read as rectangular distributions, σ = t/√3 (JCGM 100:2008, GUM §4.3.7); the
diode figures are the same as the fault dictionary's (part-to-part forward-drop spread
15 mV, common practice, no source; −2 mV/K, Sedra & Smith, over ±10 K of field temperature,
common practice). An instrument's own accuracy ±(percent of reading + fixed part) is likewise
rectangular (``accuracy_sigma``).
"""

from __future__ import annotations

import math

import numpy as np

from fieldtool.core.circuit.netlist import Circuit, Params
from fieldtool.core.circuit.spec import Profile

RECT = 1.0 / math.sqrt(3.0)
DIODE_VF_SIGMA = 0.015  # V, part-to-part forward-drop spread (common practice, no source)
TEMPCO_V_PER_K = -0.002  # V/K forward-drop temperature coefficient (Sedra & Smith)
TEMP_SPAN_K = 10.0  # ± field temperature uncertainty around the profile's (common practice)
KINDS = ("dc", "ac-rms", "ripple-pp", "current", "dc-loaded", "diode-test")


def capacitor_sigma(profile: Profile, circuit: Circuit) -> np.ndarray:
    """(c,) relative 1σ of each part capacitor's value."""
    c = len(circuit.cap_refs) - circuit.stray_caps
    specs = [profile.capacitor_overrides.get(r, profile.capacitor) for r in circuit.cap_refs[:c]]
    return np.array([s.tolerance for s in specs]) * RECT


def temperature_sigma() -> float:
    """1σ of the common forward-drop shift of every diode from the field temperature (V)."""
    return abs(TEMPCO_V_PER_K) * TEMP_SPAN_K * RECT


def tolerance_sigma(
    profile: Profile,
    circuit: Circuit,
    d_cap: np.ndarray,
    d_diode: np.ndarray,
    d_drive: np.ndarray,
    d_supply: np.ndarray,
) -> np.ndarray:
    """First-order 1σ of a reading from its sensitivities (``response.Response`` layout).

    ``d_cap`` (…, c) per unit relative change of each part capacitor, ``d_diode`` (…, k) per
    volt of each diode's forward drop, ``d_drive`` and ``d_supply`` (…) per unit relative
    change of the drive swing and the supply.
    """
    var = ((d_cap * capacitor_sigma(profile, circuit)) ** 2).sum(axis=-1)
    var += ((d_diode * DIODE_VF_SIGMA) ** 2).sum(axis=-1)
    var += (d_diode.sum(axis=-1) * temperature_sigma()) ** 2
    amp = profile.drive_tolerance * RECT
    var += (d_drive * amp) ** 2 + (d_supply * amp) ** 2
    return np.sqrt(var)


def diode_drop_sigma(volts_per_drop: np.ndarray) -> np.ndarray:
    """1σ of diode-test readings from every diode's forward-drop spread and temperature."""
    s = volts_per_drop
    var = ((s * DIODE_VF_SIGMA) ** 2).sum(axis=-1) + (s.sum(axis=-1) * temperature_sigma()) ** 2
    return np.sqrt(var)


def accuracy_sigma(profile: Profile, kind: str, value: np.ndarray | float) -> np.ndarray:
    """1σ of an instrument's own error at a reading, ±(percent + fixed) read as rectangular."""
    m = profile.instruments
    percent, fixed = {
        "dc": (profile.meter_percent, profile.meter_volts),
        "dc-loaded": (profile.meter_percent, profile.meter_volts),
        "ac-rms": (m.ac_accuracy_percent, m.ac_accuracy_volts),
        "ripple-pp": (m.scope_accuracy_percent, m.scope_accuracy_volts),
        "current": (m.current_accuracy_percent, m.current_accuracy_amps),
        "diode-test": (m.diode_accuracy_percent, m.diode_accuracy_volts),
    }[kind]
    return (np.abs(value) * percent / 100.0 + fixed) * RECT


def tolerance_steps(circuit: Circuit, params: Params, profile: Profile) -> tuple[Params, int]:
    """Each variant nudged along every tolerance direction by its 1σ (see the module doc).

    Returns (rows, d): B·d rows, variant-major, d directions: each part capacitor, then all
    diodes' drops together, then the drive swing, then the supply (where there is one).
    """
    B = params.batch
    c = len(circuit.cap_refs) - circuit.stray_caps
    drives = [i for i, s in enumerate(circuit.sources) if s.kind != "dc"]
    supplies = [i for i, s in enumerate(circuit.sources) if s.kind == "dc"]
    ac = any(s.kind == "sine" for s in circuit.sources) or not supplies
    d = c + 2 + (1 if supplies else 0)
    rows = params.take(np.repeat(np.arange(B), d)).copy()
    k = np.arange(B) * d
    cap = capacitor_sigma(profile, circuit)
    for j in range(c):
        rows.c_f[k + j, j] *= 1.0 + cap[j]
    drop = math.hypot(temperature_sigma(), DIODE_VF_SIGMA)
    r = k + c
    rows.d_is[r] *= np.exp(-drop / rows.d_nvt[r])
    amp = profile.drive_tolerance * RECT
    r = k + c + 1
    for i in drives:
        if ac:
            rows.s_high[r, i] *= 1.0 + amp
            rows.s_low[r, i] *= 1.0 + amp
        else:
            rows.s_high[r, i] += amp * (rows.s_high[r, i] - rows.s_low[r, i])
    if supplies:
        r = k + c + 2
        for i in supplies:
            rows.s_high[r, i] *= 1.0 + amp
            rows.s_low[r, i] *= 1.0 + amp
    return rows, d
