"""Which measurement kinds can find each catalogued fault on a board type, before going on site.

For every fault and every severity of its grid (each a row of the fault dictionary) and every
measurement the board allows, the separation from the healthy board is |μ_fault − μ_healthy|
divided by the healthy reading's spread (tolerances, model and the instrument's own accuracy,
as the ranking uses them: the band a healthy board reads within); a kind *finds* the fault at
that severity where one of its measurements separates it by more than ``SIGMAS`` (3, "beyond
3× the spread").
A diode test that shows OL where the healthy part shows a number (or the reverse) finds it
outright. A reading under a test load counts as the drop it causes beside the node's DC
reading (the way the ranking reads it when both are taken), or as itself, whichever separates
more. Diodes whose in-circuit test tells nothing ("lift one leg") offer no measurement.

Faults that no kind finds at any severity are listed plainly: the readings of this board
cannot tell them from healthy, so a demo must not hide them and a technician must check those
parts out of circuit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from fieldtool.core.diagnosis.dictionary import KIND_ORDER, FaultDictionary
from fieldtool.core.diagnosis.faults import Fault, describe
from fieldtool.core.diagnosis.ranking import predicted_reading
from fieldtool.core.measurement import DC_LOADED

SIGMAS = 3.0


@dataclass(frozen=True)
class FaultCoverage:
    """One fault at one severity: how far each kind's best measurement moves from healthy."""

    key: str  # hypothesis key as the ranking shows it, e.g. "C4:lowcap"
    severity: float | None
    words: str  # e.g. "C4 lost capacitance (10% left)"
    separation: dict[str, float]  # kind → the best measurement's |Δ| / spread (inf: OL)
    where: dict[str, str]  # kind → where that best measurement is taken
    default_key: str = ""  # the same with the default designator, e.g. "C4:lowcap" for "C104"

    def kinds(self, sigmas: float = SIGMAS) -> tuple[str, ...]:
        """The kinds that find this fault beyond ``sigmas`` spreads, in kind order."""
        return tuple(k for k in self.separation if self.separation[k] > sigmas)

    @property
    def findable(self) -> bool:
        """True where some kind finds it beyond 3× the spread."""
        return bool(self.kinds())


@dataclass(frozen=True)
class Coverage:
    """Every catalogued fault and severity of a board type against every measurement kind."""

    board: str
    kinds: tuple[str, ...]  # the kinds this board allows, in kind order
    faults: tuple[FaultCoverage, ...]  # healthy left out; catalog order, severities in grid order
    lift_one_leg: dict[str, str]  # diodes whose in-circuit test tells nothing, and why

    def of(self, key: str) -> tuple[FaultCoverage, ...]:
        """The rows of one fault (every severity), by its designator as the board shows it or
        by the default one (``Fault.key``)."""
        return tuple(f for f in self.faults if key in (f.key, f.default_key))

    def findable(self, key: str, severity: float | None = None) -> bool:
        """Whether a fault (at a severity, or at its severity nearest to it) can be found."""
        rows = self.of(key)
        if not rows:
            return False
        if severity is None or rows[0].severity is None:
            return any(r.findable for r in rows)
        nearest = min(rows, key=lambda r: abs(math.log(r.severity / severity)))
        return nearest.findable

    def unfindable(self) -> tuple[str, ...]:
        """Fault keys no available measurement finds at any severity of its grid."""
        keys = dict.fromkeys(f.key for f in self.faults)
        return tuple(k for k in keys if not any(r.findable for r in self.of(k)))

    def to_json(self) -> dict:
        """The shape ``fieldtool coverage --json`` prints."""
        return {
            "board": self.board,
            "sigmas": SIGMAS,
            "kinds": list(self.kinds),
            "faults": [
                {
                    "fault": f.key,
                    "severity": f.severity,
                    "words": f.words,
                    "found_by": list(f.kinds()),
                    "separation": {
                        k: (None if math.isinf(v) else round(v, 2)) for k, v in f.separation.items()
                    },
                    "best_at": f.where,
                }
                for f in self.faults
            ],
            "not_findable": list(self.unfindable()),
            "lift_one_leg": self.lift_one_leg,
        }


def coverage(d: FaultDictionary) -> Coverage:
    """For each catalogued fault and severity, how well each kind tells it from healthy."""
    R = len(d.row_hypothesis)
    every = np.arange(R)
    h = int(d.rows_of("healthy")[0])
    names = [q.name for q in KIND_ORDER]
    best = {k: np.zeros(R) for k in names}
    where = {k: np.full(R, "", dtype=object) for k in names}
    kinds: list[str] = []
    dc_nodes = set(d.nodes)
    for key in d.channel_keys():
        at, quantity, _ = key
        if quantity not in kinds:
            kinds.append(quantity)
        seps = [_separation(*predicted_reading(d, key, every, set()), h)]
        if quantity == DC_LOADED.name:  # beside the node's DC reading: the drop
            seps.append(_separation(*predicted_reading(d, key, every, dc_nodes), h))
        sep = np.fmax.reduce(seps)
        better = sep > best[quantity]
        best[quantity] = np.where(better, sep, best[quantity])
        where[quantity][better] = at
    rows = []
    order = [k for k in names if k in kinds]
    for r in range(R):
        hyp = d.hypotheses[d.row_hypothesis[r]]
        if hyp.target is None:
            continue
        sev = None if math.isnan(d.row_severity[r]) else float(d.row_severity[r])
        rows.append(
            FaultCoverage(
                key=f"{d.part_name(hyp.target)}:{hyp.mode}",
                severity=sev,
                words=describe(Fault(hyp.target, hyp.mode, sev), d.profile),
                separation={k: float(best[k][r]) for k in order},
                where={k: str(where[k][r]) for k in order if best[k][r] > 0},
                default_key=hyp.key,
            )
        )
    return Coverage(d.profile.name, tuple(order), tuple(rows), d.lift_one_leg())


def _separation(mu: np.ndarray, sd: np.ndarray, over: np.ndarray, h: int) -> np.ndarray:
    """(R,) each row's distance from the healthy row in the healthy reading's spread; inf where
    one predicts OL and the other a number; 0 where the row has no prediction."""
    with np.errstate(invalid="ignore"):
        sep = np.abs(mu - mu[h]) / sd[h]
    sep = np.where(np.isfinite(sep), sep, 0.0)
    return np.where(over != over[h], np.inf, np.where(over & over[h], 0.0, sep))
