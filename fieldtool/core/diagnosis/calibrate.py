"""Fit a profile to readings from a known-good board (parameter identification).

Simulate-after-test (Bandler & Salama, Proc. IEEE 73(8), 1985): the drive swing, a common
shift of every diode's forward drop and, where S0 was read, the DC supply are adjusted so the
predicted as-read node voltages match the golden readings in the least-squares sense,
weighting each reading by the meter's accuracy. Gauss–Newton on the steady-state solver, with
the Jacobian from the linear response (``fieldtool.core.circuit.response``); see ``calibrate`` for
what DC readings can and cannot tell apart.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace

import numpy as np

from fieldtool.core.circuit import ranges
from fieldtool.core.circuit.netlist import build_circuit
from fieldtool.core.circuit.profile import DiodeSpec, Profile
from fieldtool.core.circuit.response import linear_response
from fieldtool.core.circuit.solver import steady_state
from fieldtool.core.circuit.topologies import topology_of
from fieldtool.core.errors import InputError, SolverError
from fieldtool.core.measurement import DC, Measurement
from fieldtool.core.plausible import Range, quantity

MAX_ITERATIONS = 12
BACKTRACK_STEPS = 6
RCOND = 1e-4  # relative singular value below which a direction counts as unseen
RECT = 1.0 / math.sqrt(3.0)  # accuracy bound → 1σ, rectangular (JCGM 100:2008 §4.3.7)

# What a fit to a known-good board may do (common practice, no source). A good board differs
# from its profile by its parts' tolerances: the drive by a few per cent, the diodes' drop by
# tens of millivolts, so the fitted board reads within a few times the meter's accuracy at
# every node. Beyond these the readings came from a failed board (an open diode fits as a
# collapsed drive) or from another board type, and the fitted profile would be wrong.
DRIVE_SCALE = Range(0.8, 1.25, "×", "a good board's drive is within its tolerance of the profile")
SUPPLY_SCALE = Range(0.8, 1.25, "×", "a good board's supply is within its tolerance")
DIODE_SHIFT_V = Range(
    -0.25, 0.25, "V", "one diode family's forward drop spreads by tens of millivolts"
)
RESIDUAL_ACCURACIES = 10.0  # a fitted node further off than 10× the meter's accuracy


@dataclass(frozen=True)
class Calibration:
    """The fitted profile and how well it matches the golden readings."""

    profile: Profile
    drive_scale: float
    diode_shift_v: float
    supply_scale: float | None
    residuals: dict[str, float]  # node → reading − fitted prediction (volts)
    rms_volts: float
    chi2: float
    iterations: int
    notes: tuple[str, ...] = ()  # what the readings could not determine, in plain words
    problems: tuple[str, ...] = ()  # why this does not look like a known-good board

    @property
    def plausible(self) -> bool:
        """True when the fit looks like a known-good board of this type."""
        return not self.problems


def _apply(base: Profile, theta: np.ndarray, with_supply: bool) -> Profile:
    """The profile with drive scale, diode shift and (optionally) supply scale applied."""
    scale, shift = float(np.exp(theta[0])), float(theta[1])
    p = base
    if topology_of(p).ac_drive:
        p = replace(p, drive_volts=p.drive_volts * scale)
    else:
        p = replace(p, drive_volts=p.drive_low_volts + (p.drive_volts - p.drive_low_volts) * scale)
    vt = p.thermal_volts

    def shifted(d: DiodeSpec) -> DiodeSpec:
        factor = math.exp(-shift / (d.emission_coefficient * vt))
        return replace(d, saturation_current_a=d.saturation_current_a * factor)

    p = replace(
        p,
        diode=shifted(p.diode),
        diode_overrides={k: shifted(v) for k, v in p.diode_overrides.items()},
    )
    if with_supply:
        p = replace(p, supply_volts=p.supply_volts * float(np.exp(theta[2])))
    return p


def _predict(profile: Profile, nodes: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """As-read volts at the given probe columns and their sensitivities (drive, diode, supply)."""
    circuit, params = build_circuit(profile)
    ss = steady_state(circuit, params)
    if not ss.converged.all():
        raise SolverError(f"{profile.path}: steady state not reached while calibrating")
    r = linear_response(circuit, params, ss.period.x_start)
    load = 1.0 / (1.0 + r.thevenin_ohms[0] / profile.meter_ohms)
    v = (r.avg[0] * load)[nodes]
    jac = np.stack(
        [r.d_drive[0] * load, r.d_diode[0].sum(axis=1) * load, r.d_supply[0] * load], axis=1
    )
    return v, jac[nodes]


def calibrate(profile: Profile, readings: Sequence[Measurement]) -> Calibration:
    """Least-squares fit of drive swing, diode drop (and supply) to a known-good board.

    Gauss–Newton with a rank-revealing step: directions of the parameter space that the
    readings cannot see (singular values below ``RCOND`` of the largest) are left at the
    profile's values instead of being stepped along at random, and a step that does not lower
    the misfit is halved until it does (backtracking line search; Nocedal & Wright, *Numerical
    Optimization*, 2nd ed., 2006, §3.1 and §10.3). On a DC-fed ladder every stage adds the
    drive swing less two diode drops, so DC readings fix only that combination: the fit then
    keeps the split between drive and diode closest to the profile's, and says so in
    ``notes``.
    """
    circuit, _ = build_circuit(profile)
    names = [circuit.name(i) for i in circuit.probe_nodes]
    used = [r for r in readings if r.quantity == DC and r.value is not None]
    if len(used) < 2:
        raise InputError("calibration needs readings at two or more nodes (OL rows do not count)")
    cols = [names.index(r.at) for r in used]
    y = np.array([r.value for r in used], dtype=float)
    sigma = (np.abs(y) * profile.meter_percent / 100 + profile.meter_volts) * RECT
    with_supply = topology_of(profile).dc_input and "S0" in [r.at for r in used]
    theta = np.zeros(3 if with_supply else 2)

    def misfit(v: np.ndarray) -> float:
        return float((((y - v) / sigma) ** 2).sum())

    v, jac = _predict(_apply(profile, theta, with_supply), cols)
    cost = misfit(v)
    notes: list[str] = []
    pair = np.linalg.svd(jac[:, :2] / sigma[:, None], compute_uv=False)
    if pair[-1] <= RCOND * pair[0]:
        notes.append(
            "these readings fix only the drive swing less the diode drops, not each one: "
            "the split between them is kept as close to the profile's as the fit allows"
        )
    iterations = 0
    for iterations in range(1, MAX_ITERATIONS + 1):  # noqa: B007 (reported)
        a = jac[:, : len(theta)] / sigma[:, None]
        u, s, vt = np.linalg.svd(a, full_matrices=False)
        keep = s > RCOND * s[0]
        step = vt[keep].T @ ((u[:, keep].T @ ((y - v) / sigma)) / s[keep])
        step = np.clip(step, -0.3, 0.3)  # a known-good board is near its profile
        accepted = False
        for _ in range(BACKTRACK_STEPS):
            trial = theta + step
            try:
                v_t, jac_t = _predict(_apply(profile, trial, with_supply), cols)
            except SolverError:
                step = step / 2
                continue
            if misfit(v_t) <= cost:
                accepted = True
                break
            step = step / 2
        if not accepted:
            break  # no step lowers the misfit: this is the least-squares point
        theta, v, jac = trial, v_t, jac_t
        gain, cost = cost - misfit(v_t), misfit(v_t)
        if np.abs(step).max() < 1e-6 or gain <= 1e-9 * max(cost, 1.0):
            break
    fitted = _apply(profile, theta, with_supply)
    res = y - v
    problems = _problems(profile, fitted, theta, with_supply, used, res)
    return Calibration(
        profile=fitted,
        drive_scale=float(np.exp(theta[0])),
        diode_shift_v=float(theta[1]),
        supply_scale=float(np.exp(theta[2])) if with_supply else None,
        residuals={r.at: float(e) for r, e in zip(used, res, strict=True)},
        rms_volts=float(np.sqrt(np.mean(res**2))),
        chi2=float(((res / sigma) ** 2).sum()),
        iterations=iterations,
        notes=tuple(notes),
        problems=problems,
    )


def _problems(
    profile: Profile,
    fitted: Profile,
    theta: np.ndarray,
    with_supply: bool,
    used: Sequence[Measurement],
    res: np.ndarray,
) -> tuple[str, ...]:
    """Why a fit does not look like a known-good board (see the bounds above)."""
    found = []
    scale, shift = math.exp(theta[0]), float(theta[1])
    if not DRIVE_SCALE.contains(scale):
        found.append(
            f"the fit moves the drive from {profile.drive_volts:g} V to "
            f"{fitted.drive_volts:.3g} V (×{scale:.2f}; {DRIVE_SCALE.why}: ×0.8 to ×1.25)"
        )
    if not DIODE_SHIFT_V.contains(shift):
        found.append(
            f"the fit shifts the diode drop by {shift * 1000:+.0f} mV ({DIODE_SHIFT_V.why}: at "
            "most ±250 mV)"
        )
    if with_supply and not SUPPLY_SCALE.contains(math.exp(theta[2])):
        found.append(
            f"the fit moves the supply from {profile.supply_volts:g} V to "
            f"{fitted.supply_volts:.3g} V ({SUPPLY_SCALE.why})"
        )
    for what, value, limit in (
        ("drive", fitted.drive_volts, ranges.DRIVE_VOLTS),
        (
            "diode saturation current",
            fitted.diode.saturation_current_a,
            ranges.SATURATION_CURRENT_A,
        ),
    ):
        if not limit.contains(value):
            found.append(
                f"the fitted {what} {quantity(value, limit.unit)} is outside {limit.text()}"
            )
    accuracy = np.array([abs(r.value) * profile.meter_percent / 100 for r in used])
    accuracy += profile.meter_volts
    ratio = np.abs(res) / accuracy
    worst = int(np.argmax(ratio))
    if ratio[worst] > RESIDUAL_ACCURACIES:
        found.append(
            f"{used[worst].at} is {res[worst]:+.3g} V off the fitted board, "
            f"{ratio[worst]:.0f} times the meter's accuracy there (±{accuracy[worst]:.2g} V)"
        )
    return tuple(found)
