"""Diagnosis over every measurement kind: how often the right part is named, at what effort,
and how long the next measurement takes to choose.

Boards: every shipped profile and the 10-stage bench ladder (``ten_stage.py``), each given one
test load equal to its load resistance (the shipped profiles keep none). Trials are drawn with
a fixed seed as in ``diagnosis_accuracy.py`` (each trial its own board, parts within
tolerance, then the fault), classed as the issue's targets are:

- soft: lost capacitance to 0.3 or less, ESR raised 10× or more, leakage of 20× the load
  resistance or less, weak diodes; counted only where the noiseless truth moves at least one
  available measurement by more than 5× the healthy reading's spread (others are listed as
  out of reach);
- open and short (shorts over the catalog's 0.01–10 Ω range and the midpoints between).

The truth of every measurement is solved the way ``fieldtool expect`` shows it: DC with the
meter on the node (one solve per node), ripple, AC volts, currents and DC under the test load
from ``readouts.powered_readouts`` (80 steps a period, instruments in place), diode tests from
``readouts.diode_tests``; each reading gets an instrument error drawn uniformly within its
accuracy (``spread.accuracy_sigma`` × √3).

Guided: ``diagnose().next_measurement`` each time (its effort counted with the board's power
state, as ``ranking.effort_of``) until it suggests nothing. In order: every measurement the
board allows in ``channel_keys`` order (DC, ripple, AC, current, test load, diode tests).
Effort to pass 90 %: the effort spent until the top hypothesis first passes 0.9 (``CONFIDENT``),
guided and in order, over the trials where both pass. Right: the true fault is top-1 / among
the top three, or shares a reported ambiguity group with one of them. Speed: the wall time of
each ``diagnose`` call in the guided loops (the next measurement over every kind from a
reading), median and 95th percentile.

Run: ``python benchmarks/kinds_accuracy.py [--trials N] [--seed S] [--only NAME]``.
"""

from __future__ import annotations

import argparse
import math
import os
import platform
import sys
import time
from dataclasses import dataclass, replace
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from diagnosis_accuracy import as_read, draw_board, fault_instances, right  # noqa: E402
from ten_stage import ten_stage_profile  # noqa: E402

from fieldtool.core.circuit.netlist import build_circuit, stack  # noqa: E402
from fieldtool.core.circuit.profile import load_profile  # noqa: E402
from fieldtool.core.circuit.readouts.diode_test import diode_tests  # noqa: E402
from fieldtool.core.circuit.readouts.powered import powered_readouts  # noqa: E402
from fieldtool.core.circuit.readouts.spread import accuracy_sigma  # noqa: E402
from fieldtool.core.circuit.solver import steady_state  # noqa: E402
from fieldtool.core.circuit.spec import LoadResistor, display_name  # noqa: E402
from fieldtool.core.diagnosis.dictionary_cache import load_or_build  # noqa: E402
from fieldtool.core.diagnosis.faults import apply_fault  # noqa: E402
from fieldtool.core.diagnosis.modes.base import load_ohms_equivalent  # noqa: E402
from fieldtool.core.diagnosis.priors import published_priors  # noqa: E402
from fieldtool.core.diagnosis.ranking import (  # noqa: E402
    CONFIDENT,
    diagnose,
    effort_of,
    predicted_reading,
)
from fieldtool.core.measurement import QUANTITIES, TYPED, Measurement  # noqa: E402

STEPS = 80
VISIBLE_SIGMAS = 5.0
SHARE_HARD = 0.4  # of the trials: open and short; the rest soft


@dataclass(frozen=True)
class Trial:
    key: str
    spec: str
    cls: str  # "open/short", "soft", "soft, out of reach"
    truth: dict  # channel key → noiseless reading (None: OL)


def soft_in_scope(fault, profile) -> bool:
    """The issue's soft faults: lowcap ≤ 0.3, ESR ≥ 10×, leak ≤ 20× the load, weak."""
    m, s = fault.mode, fault.severity
    if m == "lowcap":
        return s <= 0.3
    if m == "esr":
        esr = profile.capacitor_overrides.get(fault.target, profile.capacitor).esr_ohms
        return s >= 10 * esr
    if m == "leaky":
        return s <= 20 * load_ohms_equivalent(profile)
    return m == "weak"


def truths(profile, d, rows) -> list[dict]:
    """Every channel's noiseless as-read value for each board row."""
    circuit, nominal = build_circuit(profile)
    dc, ok = as_read(circuit, rows, profile.meter_ohms, nominal)
    params = stack(rows)
    ss = steady_state(circuit, params, steps_per_period=STEPS)
    loads = tuple(t.ohms for t in profile.test_loads)
    pr = powered_readouts(circuit, params, ss.period, profile, loads, STEPS, spreads=False)
    dt = diode_tests(circuit, params, profile.instruments)
    out = []
    for b in range(len(rows)):
        if not (ok[b] and ss.converged[b] and pr.converged[b]):
            out.append(None)
            continue
        t = {}
        for key in d.channel_keys():
            at, q, cond = key
            if q == "dc":
                t[key] = float(dc[b, d.node_index(at)])
            elif q == "ripple-pp":
                t[key] = float(pr.ripple_pp[b, d.node_index(at)])
            elif q == "ac-rms":
                t[key] = float(pr.ac_rms[b, d.node_index(at)])
            elif q == "current":
                t[key] = float(pr.supply_amps[b] if at == "supply" else pr.rail_amps[b])
            elif q == "dc-loaded":
                li = d.load_index(dict(cond)["test_load_ohms"])
                t[key] = float(pr.dc_loaded[b, li, d.node_index(at)])
            else:
                i = dt.diodes.index(d.resolve_part(at))
                t[key] = None if dt.over_range[b, i, 0] else float(dt.volts[b, i, 0])
        out.append(t)
    return out


def visible(d, truth: dict) -> bool:
    """The truth moves some available measurement beyond 5× the healthy reading's spread."""
    h = np.array([d.rows_of("healthy")[0]])
    for key, value in truth.items():
        mu, sd, over = predicted_reading(d, key, h, set())
        if value is None or over[0]:
            if (value is None) != bool(over[0]):
                return True
            continue
        if abs(value - mu[0]) > VISIBLE_SIGMAS * sd[0]:
            return True
    return False


def make_trials(profile, d, n, rng) -> tuple[list[Trial], int]:
    circuit, nominal = build_circuit(profile)
    pool = fault_instances(d)
    hard = pool["open/short"]
    soft = [f for f in pool["soft"] if soft_in_scope(f, profile)]
    n_hard = max(1, round(n * SHARE_HARD))
    picks = [("open/short", hard[i]) for i in rng.choice(len(hard), min(n_hard, len(hard)), False)]
    k = min(n - len(picks), len(soft))
    picks += [("soft", soft[i]) for i in rng.choice(len(soft), k, False)]
    rows = [
        apply_fault(circuit, draw_board(circuit, nominal, profile, rng), f, profile)
        for _, f in picks
    ]
    trials, dropped = [], 0
    for (cls, f), truth in zip(picks, truths(profile, d, rows), strict=True):
        if truth is None:
            dropped += 1
            continue
        if cls == "soft" and not visible(d, truth):
            cls = "soft, out of reach"
        key = f"{display_name(profile, f.target)}:{f.mode}"
        trials.append(Trial(key, f.spec(profile), cls, truth))
    return trials, dropped


def noisy(d, truth: dict, rng) -> dict:
    out = {}
    for key, v in truth.items():
        if v is None:
            out[key] = None
            continue
        acc = float(accuracy_sigma(d.profile, key[1], v)) * math.sqrt(3.0)
        out[key] = v + acc * rng.uniform(-1.0, 1.0)
    return out


def _m(key, value) -> Measurement:
    at, q, cond = key
    return Measurement(at, QUANTITIES[q], value, TYPED, settled=True, conditions=cond)


def run_trial(d, priors, trial: Trial, rng, times: list[float]) -> dict:
    read = noisy(d, trial.truth, rng)
    efforts = d.profile.efforts
    readings: list[Measurement] = []
    powered, spent, passed_at = True, 0.0, None
    t0 = time.perf_counter()
    result = diagnose(d, readings, priors, powered=powered)
    times.append(time.perf_counter() - t0)
    while result.next_measurement is not None and len(readings) < 60:
        s = result.next_measurement
        spent += effort_of(d, s.quantity, efforts, powered)
        key = (s.at, s.quantity, s.conditions)
        readings.append(_m(key, read[key]))
        powered = QUANTITIES[s.quantity].powered
        t0 = time.perf_counter()
        result = diagnose(d, readings, priors, powered=powered)
        times.append(time.perf_counter() - t0)
        if passed_at is None and result.top.probability >= CONFIDENT and not result.fit.no_fit:
            passed_at = spent
    ordered: list[Measurement] = []
    powered, cost, order_at = True, 0.0, None
    for key in d.channel_keys():
        cost += effort_of(d, key[1], efforts, powered)
        powered = QUANTITIES[key[1]].powered
        ordered.append(_m(key, read[key]))
        r = diagnose(d, ordered, priors, powered=powered)
        if r.top.probability >= CONFIDENT and not r.fit.no_fit:
            order_at = cost
            break
    return {
        "top1": right(result, trial.key, 1),
        "top3": right(result, trial.key, 3),
        "no_fit": result.fit.no_fit,
        "guided_effort": passed_at,
        "ordered_effort": order_at,
        "readings": len(readings),
        "kinds": sorted({r.quantity.name for r in readings}),
        "miss": None if right(result, trial.key, 3) else (trial.spec, result.top.key),
    }


def pct(rows, key) -> str:
    return f"{100 * sum(r[key] for r in rows) / len(rows):5.1f} %" if rows else "  –"


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=40, help="trials per board (default 40)")
    ap.add_argument("--seed", type=int, default=20261203)
    ap.add_argument("--cache", help="dictionary cache folder (default: fieldtool's)")
    ap.add_argument("--only", help="run boards whose name contains this")
    args = ap.parse_args()
    load = os.getloadavg()[0]
    print(
        f"python {platform.python_version()}, numpy {np.__version__}, {os.cpu_count()} CPUs, "
        f"load average {load:.1f} at start; seed {args.seed}; {args.trials} trials a board"
    )
    boards = [load_profile(p) for p in sorted((ROOT / "fieldtool" / "profiles").glob("*.toml"))]
    boards.append(ten_stage_profile())
    rng = np.random.default_rng(args.seed)
    lines = [
        "| board | class | trials | top-1 | top-3 | no-fit | effort guided / in order "
        "(to pass 90 %) |",
        "|---|---|---:|---:|---:|---:|---:|",
    ]
    notes, misses, times = [], [], []
    for profile in boards:
        if args.only and args.only not in profile.name:
            continue
        profile = replace(profile, test_loads=(LoadResistor(float(load_ohms_equivalent(profile))),))
        t0 = time.perf_counter()
        d = load_or_build(profile, args.cache)
        priors = published_priors(profile, d.hypotheses)
        trials, dropped = make_trials(profile, d, args.trials, rng)
        results = [(t, run_trial(d, priors, t, rng, times)) for t in trials]
        for cls in ("open/short", "soft", "soft, out of reach"):
            rows = [r for t, r in results if t.cls == cls]
            if not rows:
                continue
            both = [r for r in rows if r["guided_effort"] is not None and r["ordered_effort"]]
            g = sum(r["guided_effort"] for r in both)
            o = sum(r["ordered_effort"] for r in both)
            ratio = f"{g / len(both):.1f} / {o / len(both):.1f} = {g / o:.2f}" if both else "–"
            lines.append(
                f"| {profile.name} | {cls} | {len(rows)} | {pct(rows, 'top1')} | "
                f"{pct(rows, 'top3')} | {pct(rows, 'no_fit')} | {ratio} ({len(both)}) |"
            )
            print(lines[-1], file=sys.stderr)
        kinds: dict[str, int] = {}
        for _, r in results:
            for k in r["kinds"]:
                kinds[k] = kinds.get(k, 0) + 1
        notes.append(
            f"{profile.name}: test load {profile.test_loads[0].ohms:.4g} Ω; {dropped} "
            f"truths not converged; trials using each kind {kinds}; "
            f"{time.perf_counter() - t0:.0f} s"
        )
        misses += [f"{profile.name}: {m[0]} → {m[1]}" for _, r in results if (m := r["miss"])]
    ms = np.array(times) * 1e3
    print("\n".join(lines))
    print()
    print("\n".join(notes))
    print(
        f"\nnext measurement from a reading: median {np.median(ms):.1f} ms, 95th percentile "
        f"{np.percentile(ms, 95):.1f} ms, max {ms.max():.1f} ms over {len(ms)} calls; load "
        f"average {os.getloadavg()[0]:.1f} at the end"
    )
    print(f"\ntop-3 misses ({len(misses)}):")
    print("\n".join(f"  {m}" for m in misses))


if __name__ == "__main__":
    main()
