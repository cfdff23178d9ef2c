"""Prior odds of each hypothesis before any reading: published failure-mode shares, then fleet.

Single-fault prior ∝ the part's failure rate × the share of its failures in that mode. Every
part of the multiplier is given the same failure rate (no rate source is assumed; the board's
own repair history corrects it below), so the published mode shares set the odds:

- Capacitors (share of failures by mode): aluminium electrolytic open 35 %, short 53 %, value
  change 2 %, electrolyte leakage 10 %; ceramic open 22 %, short 49 %, value change 29 %.
  Source: RAC FMD-97 *Failure Mode/Mechanism Distributions* (Reliability Analysis Center,
  1997), as tabulated in MIL-HDBK-338B §7 (from a secondary table: verify before relying on
  it). Value change is split between lost capacitance and high ESR for electrolytics (their
  usual wear-out pair) and goes to lost capacitance for ceramics.
- Diodes: general short 49 %, open 36 %, parameter change 15 %; rectifier 51 / 29 / 20;
  small-signal 18 / 24 / 58 (FMD-97 family; from memory, verify against FMD-2016).
  Parameter change is split evenly between leaky and weak.
- A mode the tables give no share gets a floor of 1 % so it stays reachable (common practice,
  no source).
- Board-level causes (drive stuck or low, supply low, load heavier than rated) each weigh as
  half a part, and the board is healthy with probability 10 % (a board on the bench usually
  has a fault, but readings can be misread): modelling choices, common practice, no source.

Fleet: confirmed failures of this board type blend in as counts over a pseudo-count of 20
repairs' worth of published prior (a Dirichlet–multinomial update; Gelman et al., *Bayesian
Data Analysis*, 3rd ed., 2013, §2.4 and §3.4), among the faults only: the healthy share stays.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.profile import Profile
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.faults import BOARD_TARGETS, Hypothesis
from fieldtool.core.words import count

PUBLISHED = "RAC FMD-97 mode shares (capacitors via MIL-HDBK-338B; diodes from memory)"
HEALTHY_PRIOR = 0.10
BOARD_LEVEL_WEIGHT = 0.5  # of one part
MODE_FLOOR = 0.01
FLEET_PSEUDO_COUNT = 20.0

CAPACITOR_SHARES = {
    "aluminium-electrolytic": {
        "open": 0.35,
        "short": 0.53,
        "lowcap": 0.01,
        "esr": 0.01,
        "leaky": 0.10,
    },
    "ceramic": {"open": 0.22, "short": 0.49, "lowcap": 0.29, "esr": 0.0, "leaky": 0.0},
}
DIODE_SHARES = {
    "general": {"short": 0.49, "open": 0.36, "leaky": 0.075, "weak": 0.075},
    "rectifier": {"short": 0.51, "open": 0.29, "leaky": 0.10, "weak": 0.10},
    "small-signal": {"short": 0.18, "open": 0.24, "leaky": 0.29, "weak": 0.29},
}


@dataclass(frozen=True)
class Priors:
    """Prior probability of each hypothesis (same order as the catalog) and where it came from."""

    keys: tuple[str, ...]
    probability: np.ndarray  # (H,) sums to 1
    source: tuple[str, ...]

    def of(self, key: str) -> float:
        """Prior probability of one hypothesis by key."""
        return float(self.probability[self.keys.index(key)])

    @property
    def from_fleet(self) -> bool:
        """True when confirmed failures of the fleet changed any of them."""
        return any(s.startswith("fleet:") for s in self.source)


def _shares(profile: Profile, hyp: Hypothesis) -> float:
    if hyp.kind == "diode":
        spec = profile.diode_overrides.get(hyp.target, profile.diode)
        table = DIODE_SHARES[spec.family]
    else:
        spec = profile.capacitor_overrides.get(hyp.target, profile.capacitor)
        table = CAPACITOR_SHARES[spec.dielectric]
    return max(table.get(hyp.mode, 0.0), MODE_FLOOR)


def _part_weights(profile: Profile, hypotheses: Sequence[Hypothesis]) -> np.ndarray:
    """Unnormalised weights: each part 1 split by mode shares, board causes 0.5 each."""
    w = np.zeros(len(hypotheses))
    by_part: dict[str, list[int]] = {}
    for i, h in enumerate(hypotheses):
        if h.kind in ("diode", "capacitor"):
            w[i] = _shares(profile, h)
            by_part.setdefault(h.target, []).append(i)
        elif h.target in BOARD_TARGETS:
            w[i] = BOARD_LEVEL_WEIGHT
    for rows in by_part.values():
        w[rows] /= w[rows].sum()  # one part's modes share that part's single failure rate
    return w


def published_priors(profile: Profile, hypotheses: Sequence[Hypothesis]) -> Priors:
    """Priors from the published failure-mode shares alone."""
    w = _part_weights(profile, hypotheses)
    p = np.zeros(len(hypotheses))
    faults = np.array([h.kind != "healthy" for h in hypotheses])
    p[faults] = (1.0 - HEALTHY_PRIOR) * w[faults] / w[faults].sum()
    p[~faults] = HEALTHY_PRIOR
    source = tuple(
        "healthy share (common practice, no source)"
        if h.kind == "healthy"
        else "board-level share (common practice, no source)"
        if h.target in BOARD_TARGETS
        else f"published: {PUBLISHED}"
        for h in hypotheses
    )
    return Priors(tuple(h.key for h in hypotheses), p / p.sum(), source)


def fleet_priors(
    profile: Profile,
    hypotheses: Sequence[Hypothesis],
    confirmed: Mapping[tuple[str, str], int],
) -> Priors:
    """Published priors updated with this board type's confirmed failures.

    ``confirmed`` maps (designator as the board shows it, or the default one; mode) to a count
    of confirmed failures across the fleet. Counts that match no hypothesis are ignored.
    """
    base = published_priors(profile, hypotheses)
    counts = np.zeros(len(hypotheses))
    index = {}
    for i, h in enumerate(hypotheses):
        if h.target is not None:
            index[(h.target.lower(), h.mode)] = i
            index[(display_name(profile, h.target).lower(), h.mode)] = i
    for (designator, mode), n in confirmed.items():
        i = index.get((str(designator).lower(), str(mode)))
        if i is not None and n > 0:
            counts[i] += n
    total = counts.sum()
    if total == 0:
        return base
    faults = np.array([h.kind != "healthy" for h in hypotheses])
    share = base.probability[faults] / base.probability[faults].sum()
    blended = (FLEET_PSEUDO_COUNT * share + counts[faults]) / (FLEET_PSEUDO_COUNT + total)
    p = base.probability.copy()
    p[faults] = (1.0 - HEALTHY_PRIOR) * blended
    source = list(base.source)
    for i in np.flatnonzero(counts):
        source[i] = (
            f"fleet: {int(counts[i])} confirmed of {count(int(total), 'repair')} on this board "
            "type, "
            f"blended with published ({PUBLISHED})"
        )
    return Priors(base.keys, p / p.sum(), tuple(source))
