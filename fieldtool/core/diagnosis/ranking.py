"""Which part failed, how sure we are, and where to probe next.

From any subset of node readings the posterior over hypotheses follows from Bayes' rule: each
dictionary row (a hypothesis at one severity) predicts every reading as a normal distribution
(its tolerance spread plus the meter's accuracy), severities are marginalised with equal
weight, and the priors come from ``fieldtool.core.diagnosis.priors``. Fault dictionaries and
tolerance-band diagnosis: Bandler & Salama, Proc. IEEE 73(8), 1985; Hochwald & Bastian, IEEE
Trans. Circuits Syst. 26(7), 1979 (from memory).

The next probe is the unmeasured node with the largest expected information gain, the
expected drop in the posterior's entropy (de Kleer & Williams, Artificial Intelligence 32(1),
1987), none once the top hypothesis passes 0.9. Readings that no hypothesis explains are
flagged by a goodness-of-fit test (χ² of the best-fitting row) rather than forced onto the
nearest fault.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from fieldtool.core.circuit.reading_range import reading_problem
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.dictionary import RIPPLE_SHARE, FaultDictionary
from fieldtool.core.diagnosis.faults import Fault, describe
from fieldtool.core.diagnosis.priors import Priors, published_priors
from fieldtool.core.errors import InputError
from fieldtool.core.measurement import DC, RIPPLE_PP, Measurement

CONFIDENT = 0.9  # stop suggesting probes once the top hypothesis passes this
NO_FIT_P = 1e-3  # below this the best hypothesis does not explain the readings
SPLIT_SIGMAS = 2.0  # hypotheses closer than this at every measured node are not split yet
MIN_GAIN_BITS = 0.02
RIPPLE_FLOOR_V = 0.01  # a meter's AC range near its floor (common practice, no source)
_GH_T, _GH_W = np.polynomial.hermite.hermgauss(6)
_GH_W = _GH_W / _GH_W.sum()


@dataclass(frozen=True)
class Suspect:
    """One hypothesis with its posterior probability."""

    key: str
    component: str | None
    mode: str
    probability: float
    severity: float | None
    words: str
    prior: float
    prior_source: str


@dataclass(frozen=True)
class Ambiguity:
    """Hypotheses the readings so far cannot tell apart, and the node that would."""

    members: tuple[str, ...]
    split_by: str | None
    text: str


@dataclass(frozen=True)
class Fit:
    """How well the best hypothesis explains the readings."""

    score: float  # p-value of the best-fitting row's χ² (1: perfect, near 0: nothing fits)
    no_fit: bool
    worst_node: str | None
    text: str


@dataclass(frozen=True)
class Diagnosis:
    """The ranked hypotheses, the next node to probe and what stays ambiguous."""

    suspects: tuple[Suspect, ...]
    next_probe: str | None
    next_probe_gain_bits: float
    ambiguity: tuple[Ambiguity, ...]
    fit: Fit
    gains: dict[str, float]
    ignored: tuple[str, ...]

    @property
    def top(self) -> Suspect:
        """The most probable hypothesis."""
        return self.suspects[0]

    def to_json(self) -> dict:
        """The shape ``fieldtool diagnose --json`` prints."""
        return {
            "suspects": [
                {
                    "component": s.component,
                    "mode": s.mode,
                    "probability": round(s.probability, 6),
                    "severity": s.severity,
                    "words": s.words,
                    "prior": round(s.prior, 6),
                    "prior_source": s.prior_source,
                }
                for s in self.suspects
            ],
            "next_probe": self.next_probe,
            "next_probe_gain_bits": round(self.next_probe_gain_bits, 4),
            "ambiguity": [list(a.members) for a in self.ambiguity],
            "ambiguity_text": [a.text for a in self.ambiguity],
            "fit": {
                "score": self.fit.score,
                "no_fit": self.fit.no_fit,
                "worst_node": self.fit.worst_node,
                "text": self.fit.text,
            },
            "ignored": list(self.ignored),
        }


# --- likelihood ---------------------------------------------------------------------------


def _columns(d: FaultDictionary, readings: Sequence[Measurement]):
    """Measured columns, values, predicted means and spreads (rows × readings).

    A ``dc`` reading is a node's column of the dictionary; a ``ripple-pp`` reading is
    compared with the dictionary's ripple at that node. Other kinds are noted and left out
    until the dictionary predicts them.
    """
    cols, ys, mus, sds, names, ignored = [], [], [], [], [], []
    wrong: list[tuple[str, str]] = []  # (node, note) of readings no node could show
    seen = set()
    for r in readings:
        if r.at not in d.nodes:
            raise InputError(f"node {r.at!r} is not on {d.profile.name} ({', '.join(d.nodes)})")
        if (r.at, r.quantity) in seen:
            raise InputError(f"node {r.at} is read twice; keep one reading a node")
        seen.add((r.at, r.quantity))
        j = d.node_index(r.at)
        if r.quantity not in (DC, RIPPLE_PP):
            ignored.append(f"{r.at}: {r.quantity.words} readings are not used by the diagnosis")
            continue
        if r.value is None:
            if r.quantity != DC:
                ignored.append(f"{r.at}: ripple OL (over range) carries no value")
            elif d.profile.meter_range_volts is None:
                ignored.append(
                    f"{r.at}: OL (over range) tells nothing without the meter's range: add "
                    "[meter] range_volts to the profile, or read it on a higher range"
                )
            else:
                cols.append(j)  # read, as beyond the range: see _overload_loglik
            continue
        problem = reading_problem(d.profile, r)
        if problem:
            wrong.append((r.at, f"{problem}; left out"))
            continue
        ys.append(r.value)
        if r.quantity == DC:
            cols.append(j)
            names.append(r.at)
            mus.append(d.mean[:, j])
            sds.append(np.sqrt(d.sigma[:, j] ** 2 + d.meter_sigma(r.value) ** 2))
        else:
            names.append(f"{r.at} ripple")
            rip = d.ripple[:, j]
            mus.append(rip)
            sds.append(RIPPLE_SHARE * rip + RIPPLE_FLOOR_V + 0.02 * abs(r.value))
    ignored += [note for _, note in wrong]
    if not ys:
        R = len(d.mean)
        return cols, np.zeros(0), np.zeros((R, 0)), np.ones((R, 0)), names, ignored, wrong
    return cols, np.array(ys), np.stack(mus, 1), np.stack(sds, 1), names, ignored, wrong


def _overload_loglik(
    d: FaultDictionary, readings: Sequence[Measurement]
) -> tuple[np.ndarray, list[str]]:
    """Per row: log P(|V| > range) summed over the OL readings, and the OL nodes no row can
    explain. An over-range reading is a censored one: it says the node is beyond the meter's
    range, which rules out every hypothesis that keeps the node inside it."""
    total = np.zeros(len(d.mean))
    unexplained: list[str] = []
    limit = d.profile.meter_range_volts
    if limit is None:
        return total, unexplained
    for r in readings:
        if r.quantity != DC or r.value is not None or r.at not in d.nodes:
            continue
        j = d.node_index(r.at)
        mu = d.mean[:, j]
        sd = np.sqrt(d.sigma[:, j] ** 2 + d.meter_sigma(limit) ** 2) * math.sqrt(2.0)
        p = 0.5 * (_erfc((limit - mu) / sd) + _erfc((limit + mu) / sd))
        if p.max() < NO_FIT_P:
            unexplained.append(r.at)
        total += np.log(np.maximum(p, 1e-300))
    return total, unexplained


_erfc = np.vectorize(math.erfc, otypes=[float])


def _row_loglik(y: np.ndarray, mu: np.ndarray, sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    z = (y[None, :] - mu) / sd
    return -0.5 * (z**2).sum(axis=1) - np.log(sd).sum(axis=1), z


def _hyp_slices(d: FaultDictionary) -> tuple[np.ndarray, np.ndarray]:
    """Start of each hypothesis's rows (rows are grouped) and its row count."""
    H = len(d.hypotheses)
    counts = np.bincount(d.row_hypothesis, minlength=H)
    starts = np.concatenate([[0], np.cumsum(counts)[:-1]])
    return starts, counts


def _logsumexp_rows(values: np.ndarray, d: FaultDictionary) -> np.ndarray:
    """Per hypothesis: log Σ exp(values) over its rows (last axis); −inf where it has none."""
    starts, counts = _hyp_slices(d)
    top = values.max(axis=-1, keepdims=True)
    top = np.where(np.isfinite(top), top, 0.0)
    summed = np.add.reduceat(np.exp(values - top), np.minimum(starts, values.shape[-1] - 1), -1)
    summed = np.where(counts > 0, summed, 0.0)
    with np.errstate(divide="ignore"):
        return np.log(summed) + top


def _entropy(p: np.ndarray) -> np.ndarray:
    q = np.where(p > 0, p, 1.0)
    return -(p * np.log2(q)).sum(axis=-1)


# --- the diagnosis ------------------------------------------------------------------------


def diagnose(
    d: FaultDictionary, readings: Sequence[Measurement], priors: Priors | None = None
) -> Diagnosis:
    """Rank every hypothesis from the measurements taken; suggest the next node to probe."""
    profile = d.profile
    priors = priors or published_priors(profile, d.hypotheses)
    cols, y, mu, sd, names, ignored, wrong = _columns(d, readings)
    loglik, z = _row_loglik(y, mu, sd)
    over, unexplained = _overload_loglik(d, readings)
    loglik = loglik + over
    _, counts = _hyp_slices(d)
    log_prior_row = np.log(priors.probability[d.row_hypothesis]) - np.log(counts[d.row_hypothesis])
    log_row = log_prior_row + loglik
    log_post = _logsumexp_rows(log_row, d)
    post = np.exp(log_post - log_post.max())
    post /= post.sum()
    row_w = np.exp(log_row - log_row.max())
    row_w /= row_w.sum()

    order = np.argsort(-post, kind="stable")
    best_row = _best_rows(d, loglik)
    suspects = tuple(_suspect(d, priors, h, post[h], best_row[h]) for h in order)
    gains = _gains(d, row_w, post, set(cols))
    top_p = float(post[order[0]])
    next_probe, gain = None, 0.0
    if top_p < CONFIDENT and gains:
        node = max(gains, key=lambda k: gains[k])
        if gains[node] >= MIN_GAIN_BITS:
            next_probe, gain = node, gains[node]
    ambiguity = _ambiguity(d, post, order, best_row, row_w, mu, sd, set(cols))
    fit = _fit(d, loglik, z, names, suspects)
    if wrong:
        fit = Fit(0.0, True, wrong[0][0], f"wrong range, unit or node? {wrong[0][1]}")
    elif unexplained and not fit.no_fit:
        fit = Fit(
            0.0,
            True,
            unexplained[0],
            f"{unexplained[0]} reads OL but no hypothesis puts it beyond the meter's "
            f"{d.profile.meter_range_volts:g} V range: check the range the meter was on, the "
            "probe, and [meter] range_volts in the profile",
        )
    return Diagnosis(suspects, next_probe, gain, ambiguity, fit, gains, tuple(ignored))


def _best_rows(d: FaultDictionary, loglik: np.ndarray) -> np.ndarray:
    """Per hypothesis, the row (severity) that fits the readings best (−1 when none)."""
    starts, counts = _hyp_slices(d)
    best = np.full(len(d.hypotheses), -1)
    for h in np.flatnonzero(counts):
        seg = loglik[starts[h] : starts[h] + counts[h]]
        best[h] = starts[h] + int(np.argmax(seg))
    return best


def _suspect(d: FaultDictionary, priors: Priors, h: int, p: float, row: int) -> Suspect:
    hyp = d.hypotheses[h]
    severity = None
    if row >= 0 and not math.isnan(d.row_severity[row]):
        severity = float(d.row_severity[row])
    fault = None if hyp.target is None else Fault(hyp.target, hyp.mode, severity)
    return Suspect(
        key=hyp.key if hyp.target is None else f"{display_name(d.profile, hyp.target)}:{hyp.mode}",
        component=None if hyp.target is None else display_name(d.profile, hyp.target),
        mode=hyp.mode,
        probability=float(p),
        severity=severity,
        words=describe(fault, d.profile) + ("" if severity is None else " (best fit)"),
        prior=float(priors.probability[h]),
        prior_source=priors.source[h],
    )


def _gains(d: FaultDictionary, row_w: np.ndarray, post: np.ndarray, measured: set[int]):
    """Expected information gain (bits) of each unmeasured node."""
    keep = row_w > 1e-7 * row_w.max()
    rows = np.flatnonzero(keep)
    w = row_w[rows] / row_w[rows].sum()
    hyp_of = d.row_hypothesis[rows]
    h_now = float(_entropy(post))
    gains = {}
    for j, node in enumerate(d.nodes):
        if j in measured:
            continue
        mu = d.mean[rows, j]
        sd = np.sqrt(d.sigma[rows, j] ** 2 + d.meter_sigma(mu) ** 2)
        gains[node] = max(h_now - _expected_entropy(mu, sd, w, hyp_of, len(post)), 0.0)
    return gains


def _expected_entropy(mu, sd, w, hyp_of, H) -> float:
    """E over the predicted reading of the posterior entropy (Gauss–Hermite per cluster)."""
    # Rows predicting the same reading share quadrature points: cluster them.
    key = np.round(mu / (0.25 * sd.min())).astype(np.int64) * 1000 + np.round(
        np.log(sd) * 8
    ).astype(np.int64)
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    cw = np.bincount(inverse, weights=w)
    pts = mu[first, None] + np.sqrt(2.0) * sd[first, None] * _GH_T[None, :]  # (C, K)
    qw = (cw[:, None] * _GH_W[None, :]).ravel()
    y = pts.ravel()
    zz = (y[:, None] - mu[None, :]) / sd[None, :]
    like = w[None, :] * np.exp(-0.5 * zz**2) / sd[None, :]  # (Y, R)
    # Sum each hypothesis's rows (rows come grouped by hypothesis; sort if they are not).
    if np.any(np.diff(hyp_of) < 0):
        order = np.argsort(hyp_of, kind="stable")
        hyp_of, like = hyp_of[order], like[:, order]
    starts = np.flatnonzero(np.r_[True, np.diff(hyp_of) != 0])
    per_h = np.add.reduceat(like, starts, axis=1)  # (Y, hypotheses present)
    total = per_h.sum(axis=1, keepdims=True)
    p = per_h / np.where(total > 0, total, 1.0)
    return float((qw * _entropy(p)).sum())


def _ambiguity(d, post, order, best_row, row_w, mu, sd, measured) -> tuple[Ambiguity, ...]:
    """Groups of plausible hypotheses the readings taken cannot split."""
    plausible = []
    total = 0.0
    for h in order:
        if post[h] < max(0.01 * post[order[0]], 1e-4) or len(plausible) >= 12 or total > 0.99:
            break
        if best_row[h] >= 0:
            plausible.append(int(h))
        total += post[h]
    groups: list[list[int]] = []
    for h in plausible:
        for g in groups:
            if any(_unsplit(d, h, other, best_row, mu, sd) for other in g):
                g.append(h)
                break
        else:
            groups.append([h])
    out = []
    for g in groups:
        if len(g) < 2:
            continue
        node = _splitter(d, g, post, best_row, measured)
        names = [_spec(d, h) for h in g]
        words = " or ".join(_words(d, h) for h in g)
        if node is None:
            text = (
                f"{words}: no test node on this board splits them; check the parts out of circuit"
            )
        else:
            label = d.labels.get(node)
            where = f"{node} ({label})" if label else node
            text = f"{words}: probe {where} to split"
        out.append(Ambiguity(tuple(names), node, text))
    return tuple(out)


def _unsplit(d, a: int, b: int, best_row, mu, sd) -> bool:
    if mu.shape[1] == 0:
        return True
    ra, rb = best_row[a], best_row[b]
    sep = np.abs(mu[ra] - mu[rb]) / np.sqrt(sd[ra] ** 2 + sd[rb] ** 2)
    return bool((sep < SPLIT_SIGMAS).all())


def _splitter(d, group, post, best_row, measured) -> str | None:
    """The unmeasured node that best separates the group's hypotheses, if any does."""
    rows = np.flatnonzero(np.isin(d.row_hypothesis, group))  # grouped by hypothesis
    counts = np.bincount(d.row_hypothesis[rows], minlength=len(post))
    w = post[d.row_hypothesis[rows]] / counts[d.row_hypothesis[rows]]
    w = w / w.sum()
    local = {h: i for i, h in enumerate(group)}
    hyp_of = np.array([local[h] for h in d.row_hypothesis[rows]])
    gp = np.bincount(hyp_of, weights=w)
    h_now = float(_entropy(gp))
    best, best_gain = None, MIN_GAIN_BITS * 5
    for j, node in enumerate(d.nodes):
        if j in measured:
            continue
        m = d.mean[rows, j]
        s = np.sqrt(d.sigma[rows, j] ** 2 + d.meter_sigma(m) ** 2)
        gain = h_now - _expected_entropy(m, s, w, hyp_of, len(group))
        if gain > best_gain:
            best, best_gain = node, gain
    return best


def _spec(d: FaultDictionary, h: int) -> str:
    hyp = d.hypotheses[h]
    return "healthy" if hyp.target is None else f"{display_name(d.profile, hyp.target)}:{hyp.mode}"


def _words(d: FaultDictionary, h: int) -> str:
    hyp = d.hypotheses[h]
    return describe(None if hyp.target is None else Fault(hyp.target, hyp.mode), d.profile)


def _fit(d, loglik, z, names, suspects) -> Fit:
    """χ² goodness of fit of the best-fitting row, and the reading furthest from it."""
    k = z.shape[1]
    if k == 0:
        return Fit(1.0, False, None, "no readings yet")
    chi2 = (z**2).sum(axis=1)
    best = int(np.argmin(chi2))
    p = chi2_sf(float(chi2[best]), k)
    worst = int(np.argmax(np.abs(z[best])))
    worst_node = names[worst].split()[0]
    top = suspects[0].words
    if p < NO_FIT_P:
        text = (
            f"no hypothesis explains these readings (best fit p = {p:.1e}; {names[worst]} is "
            f"{abs(z[best, worst]):.0f}σ off): check the probe is on the right node, the "
            "meter range, the profile, or suspect two faults at once"
        )
        return Fit(p, True, worst_node, text)
    return Fit(p, False, worst_node, f"readings fit {top} (p = {p:.2f})")


def chi2_sf(x: float, k: int) -> float:
    """Survival function of the χ² distribution with k degrees of freedom (k a whole number).

    Closed forms: even k, e^(−x/2) Σ_{i<k/2} (x/2)^i / i!; odd k, erfc(√(x/2)) plus
    e^(−x/2) Σ (x/2)^(i−½)/Γ(i+½) (Abramowitz & Stegun, *Handbook of Mathematical Functions*,
    1964, 26.4.4–26.4.5).
    """
    if x <= 0:
        return 1.0
    h = x / 2.0
    if k % 2 == 0:
        term, total = 1.0, 1.0
        for i in range(1, k // 2):
            term *= h / i
            total += term
        return min(1.0, math.exp(-h) * total)
    total = math.erfc(math.sqrt(h))
    term = math.sqrt(h) * 2.0 / math.sqrt(math.pi)  # h^(1/2) / Γ(3/2)
    for i in range(1, (k + 1) // 2):
        total += math.exp(-h) * term
        term *= h / (i + 0.5)
    return min(1.0, total)
