"""How often the diagnosis names the right part, and how many probes it takes to get there.

For each shipped profile and a 10-stage DC-fed ladder (``ten_stage.py``), trials are drawn with
a fixed seed from every catalogued single fault at the catalog's severities and at the
geometric midpoints between them, plus healthy boards. Each trial is its own board: every
part capacitor drawn uniformly within its tolerance, every diode's saturation current moved
for a forward-drop shift drawn uniformly within ±15 mV, the drive swing drawn within the
profile's drive tolerance; then ``apply_fault`` on that row. The truth is solved the way
``fieldtool expect`` solves it (periodic steady state with the meter on the node read, one
solve per node); each reading gets a meter error drawn uniformly within the meter's accuracy.

Two probing strategies per trial, both stopping once the top hypothesis passes 0.9:
guided (``diagnose().next_probe`` each time, until it has no next probe) and in order (the
nodes stage by stage in ladder order from S0). Accuracy is scored on the guided result: right
when the true fault is the top suspect (top-1) or among the top three (top-3), or shares a
reported ambiguity group with one of them; a healthy trial is right when healthy is.

Classes: open/short (parts); soft (leaky, weak, lost capacitance, high ESR), split after the
fact into "soft, visible" (the noiseless truth leaves the dictionary's healthy ~95 % band at
some node) and "soft, hidden" (inside the healthy band at every node: at DC such a board
reads as a healthy one, whatever its grid severity); board (drive, supply, load); healthy.
Trials are sampled per class (the output says how); not converged truths are dropped and
counted. Run: ``python benchmarks/diagnosis_accuracy.py [--trials N] [--seed S]``.
"""

from __future__ import annotations

import argparse
import math
import platform
import sys
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from ten_stage import ten_stage_profile  # noqa: E402

from fieldtool.core.circuit.expect import period_average  # noqa: E402
from fieldtool.core.circuit.netlist import Params, build_circuit, stack, with_meter  # noqa: E402
from fieldtool.core.circuit.profile import load_profile  # noqa: E402
from fieldtool.core.circuit.solver import steady_state  # noqa: E402
from fieldtool.core.circuit.spec import display_name  # noqa: E402
from fieldtool.core.circuit.staged import staged_steady_state  # noqa: E402
from fieldtool.core.diagnosis.dictionary_cache import load_or_build  # noqa: E402
from fieldtool.core.diagnosis.faults import BOARD_TARGETS, Fault, apply_fault  # noqa: E402
from fieldtool.core.diagnosis.priors import published_priors  # noqa: E402
from fieldtool.core.diagnosis.ranking import CONFIDENT, diagnose  # noqa: E402
from fieldtool.core.measurement import DC, TYPED, Measurement  # noqa: E402

DIODE_SPREAD_V = 0.015  # ± forward-drop spread between parts (as the dictionary assumes)
STEPS = 80  # as fieldtool expect
DRAWN = ("open/short", "soft", "board", "healthy")
SHARE = {"open/short": 0.3, "soft": 0.4, "board": 0.15, "healthy": 0.15}
CLASSES = ("open/short", "soft, visible", "soft, hidden", "board", "healthy")


@dataclass(frozen=True)
class Trial:
    """One board to diagnose: its fault (None: healthy), class, and as-read node volts."""

    key: str  # the right answer as the diagnosis spells it ("D5:open", "healthy")
    spec: str
    cls: str
    volts: np.ndarray  # (P,) as read, before meter error


def fault_instances(d) -> dict[str, list[Fault | None]]:
    """Every catalogued fault at its grid severities and the midpoints, sorted into classes."""
    out: dict[str, list[Fault | None]] = {c: [] for c in DRAWN}
    for hyp in d.hypotheses:
        if hyp.target is None:
            continue
        if math.isnan(hyp.severities[0]):
            cls = "board" if hyp.target in BOARD_TARGETS else "open/short"
            out[cls].append(Fault(hyp.target, hyp.mode))
            continue
        grid = list(hyp.severities)
        mids = [math.sqrt(a * b) for a, b in zip(grid, grid[1:], strict=False)]
        cls = "board" if hyp.target in BOARD_TARGETS else "soft"
        for sev in sorted(grid + mids):
            out[cls].append(Fault(hyp.target, hyp.mode, sev))
    return out


def draw_board(circuit, nominal: Params, profile, rng) -> Params:
    """One board's parts drawn within tolerance (capacitors, diode drops, drive swing)."""
    p = nominal.copy()
    c = len(circuit.cap_refs) - circuit.stray_caps
    tol = np.array(
        [profile.capacitor_overrides.get(r, profile.capacitor).tolerance for r in circuit.cap_refs]
    )[:c]
    p.c_f[0, :c] *= 1.0 + tol * rng.uniform(-1.0, 1.0, c)
    shift = rng.uniform(-DIODE_SPREAD_V, DIODE_SPREAD_V, len(circuit.diode_refs))
    p.d_is[0] *= np.exp(-shift / p.d_nvt[0])
    k = 1.0 + profile.drive_tolerance * rng.uniform(-1.0, 1.0)
    for i, s in enumerate(circuit.sources):
        if s.kind == "dc":
            continue
        if profile.topology == "ac-ladder":
            p.s_high[0, i] *= k
            p.s_low[0, i] *= k
        else:
            p.s_high[0, i] = p.s_low[0, i] + (p.s_high[0, i] - p.s_low[0, i]) * k
    return p


def as_read(
    circuit, rows: list[Params], meter_ohms: float, nominal: Params
) -> tuple[np.ndarray, np.ndarray]:
    """As-read volts (B, P) with the meter on each node in turn, and which boards converged."""
    P = len(circuit.probe_nodes)
    metered = stack([with_meter(circuit, r, meter_ohms) for r in rows])
    # the same staged starts the engine uses (healthy board first, then surer starts)
    healthy = steady_state(circuit, nominal, steps_per_period=STEPS)
    start = healthy.period if healthy.converged[0] else None
    ss = staged_steady_state(circuit, metered, STEPS, start=start)
    avg = period_average(ss.period)
    idx = np.array(circuit.probe_nodes) - 1
    B = len(rows)
    volts = avg[np.arange(B * P).reshape(B, P), idx[None, :]]
    ok = ss.converged.reshape(B, P).all(axis=1)
    return volts, ok


def make_trials(profile, d, n_trials: int, rng) -> tuple[list[Trial], list[str], dict[str, int]]:
    """Sampled trials with their truths; also the faults dropped and the population sizes."""
    circuit, nominal = build_circuit(profile)
    pool = fault_instances(d)
    chosen: list[tuple[str, Fault | None]] = []
    for cls in DRAWN:
        want = max(1, round(n_trials * SHARE[cls]))
        if cls == "healthy":
            chosen += [(cls, None)] * want
            continue
        items = pool[cls]
        if not items:
            continue
        picks = rng.choice(len(items), size=min(want, len(items)), replace=False)
        chosen += [(cls, items[i]) for i in sorted(picks)]
    rows = []
    for _, fault in chosen:
        board = draw_board(circuit, nominal, profile, rng)
        rows.append(board if fault is None else apply_fault(circuit, board, fault, profile))
    volts, ok = as_read(circuit, rows, profile.meter_ohms, nominal)
    bands = [d.band(node) for node in d.nodes]
    trials, dropped = [], []
    for (cls, fault), v, good in zip(chosen, volts, ok, strict=True):
        if not good:
            dropped.append("healthy" if fault is None else fault.spec(profile))
            continue
        if cls == "soft":
            outside = any(not b.contains(float(x)) for b, x in zip(bands, v, strict=True))
            cls = "soft, visible" if outside else "soft, hidden"
        if fault is None:
            key = spec = "healthy"
        else:
            key = f"{display_name(profile, fault.target)}:{fault.mode}"
            spec = fault.spec(profile)
        trials.append(Trial(key, spec, cls, v))
    sizes = {c: len(pool[c]) for c in DRAWN if c != "healthy"}
    return trials, dropped, sizes


def right(result, key: str, k: int) -> bool:
    """The true key is among the top k, or shares an ambiguity group with one of them."""
    top = [s.key for s in result.suspects[:k]]
    if key in top:
        return True
    return any(key in a.members and any(t in a.members for t in top) for a in result.ambiguity)


def run_trial(d, priors, trial: Trial, rng) -> dict:
    """Guided and in-order probing on one trial's readings (meter error added)."""
    p = d.profile
    acc = np.abs(trial.volts) * p.meter_percent / 100 + p.meter_volts
    noisy = trial.volts + acc * rng.uniform(-1.0, 1.0, len(acc))
    read = {
        n: Measurement(n, DC, float(v), TYPED, settled=True)
        for n, v in zip(d.nodes, noisy, strict=True)
    }

    readings: list[Measurement] = []
    result = diagnose(d, readings, priors)
    while result.next_probe is not None:
        readings.append(read[result.next_probe])
        result = diagnose(d, readings, priors)
    guided, guided_ok = len(readings), result.top.probability >= CONFIDENT

    ordered: list[Measurement] = []
    order_ok = False
    for node in d.nodes:
        ordered.append(read[node])
        if diagnose(d, ordered, priors).top.probability >= CONFIDENT:
            order_ok = True
            break
    return {
        "top1": right(result, trial.key, 1),
        "top3": right(result, trial.key, 3),
        "no_fit": result.fit.no_fit,
        "guided": guided,
        "guided_ok": guided_ok,
        "ordered": len(ordered),
        "ordered_ok": order_ok,
        "miss": None if right(result, trial.key, 3) else (trial.spec, result.top.key),
        "hard_miss": None
        if trial.cls != "open/short" or right(result, trial.key, 1)
        else (trial.spec, result.top.key),
    }


def summarise(rows: list[dict]) -> str:
    """One table row's figures."""
    n = len(rows)

    def pct(key: str) -> str:
        return f"{100 * sum(r[key] for r in rows) / n:5.1f} %"

    g = sum(r["guided"] for r in rows) / n
    o = sum(r["ordered"] for r in rows) / n
    return (
        f"{n:>6} | {pct('top1')} | {pct('top3')} | {pct('no_fit')} | {g:5.2f} ({pct('guided_ok')})"
        f" | {o:5.2f} ({pct('ordered_ok')})"
    )


def _ratio(rows: list[dict]) -> float:
    """Mean guided probes over mean in-order probes."""
    return sum(r["guided"] for r in rows) / max(sum(r["ordered"] for r in rows), 1)


def main() -> None:
    """Run every board and print the tables."""
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--trials", type=int, default=80, help="trials per board (default 80)")
    ap.add_argument("--seed", type=int, default=20261202)
    ap.add_argument("--cache", help="dictionary cache folder (default: fieldtool's)")
    ap.add_argument("--only", help="run boards whose name contains this")
    args = ap.parse_args()
    print(f"python {platform.python_version()}, numpy {np.__version__}; seed {args.seed}")
    shares = ", ".join(f"{c} {SHARE[c]:.0%}" for c in DRAWN)
    print(f"{args.trials} trials a board, sampled by class ({shares})")
    print("probes: mean count (share of trials whose top hypothesis passed 0.9)\n")
    boards = [load_profile(p) for p in sorted((ROOT / "fieldtool" / "profiles").glob("*.toml"))]
    boards.append(ten_stage_profile())
    rng = np.random.default_rng(args.seed)
    header = (
        "| board | class | trials | top-1 | top-3 | no-fit | guided probes | in-order probes |\n"
        "|---|---|---:|---:|---:|---:|---:|---:|"
    )
    lines, misses, hard_misses, notes = [header], [], [], []
    for profile in boards:
        if args.only and args.only not in profile.name:
            continue
        t0 = time.perf_counter()
        d = load_or_build(profile, args.cache)
        priors = published_priors(profile, d.hypotheses)
        trials, dropped, sizes = make_trials(profile, d, args.trials, rng)
        results = [(t, run_trial(d, priors, t, rng)) for t in trials]
        for cls in CLASSES:
            rows = [r for t, r in results if t.cls == cls]
            if rows:
                lines.append(f"| {profile.name} | {cls} | {summarise(rows)} |")
        faults = [r for t, r in results if t.cls != "healthy"]
        lines.append(f"| {profile.name} | all faults | {summarise(faults)} |")
        hard = [r for t, r in results if t.cls == "open/short"]
        notes.append(
            f"{profile.name}: {len(d.nodes)} nodes, population {sizes}, {len(dropped)} truths "
            f"not converged (dropped: {', '.join(dropped) or 'none'}); "
            f"guided/in-order probes: open/short {_ratio(hard):.2f}, "
            f"all faults {_ratio(faults):.2f}; {time.perf_counter() - t0:.0f} s"
        )
        misses += [f"{profile.name}: {m[0]} → {m[1]}" for _, r in results if (m := r["miss"])]
        hard_misses += [
            f"{profile.name}: {m[0]} → {m[1]}" for _, r in results if (m := r["hard_miss"])
        ]
        print(lines[-1], file=sys.stderr)
    print("\n".join(lines))
    print()
    print("\n".join(notes))
    print(f"\nopen/short faults not top-1 ({len(hard_misses)}):")
    print("\n".join(f"  {m}" for m in hard_misses))
    print(f"\ntop-3 misses ({len(misses)}):")
    print("\n".join(f"  {m}" for m in misses))


if __name__ == "__main__":
    main()
