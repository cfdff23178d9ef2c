"""Which part failed, how sure we are, and what to measure next.

From any mix of readings (DC at nodes, ripple, AC volts, supply or drive-rail current, DC under
a test load, diode tests with the board off) the posterior over hypotheses follows from Bayes'
rule: each dictionary row (a hypothesis at one severity) predicts every reading as a normal
distribution (its tolerance spread plus the instrument's own accuracy,
``readouts.spread.accuracy_sigma``), severities are marginalised with equal weight, and the
priors come from ``fieldtool.core.diagnosis.priors``. Fault dictionaries and tolerance-band
diagnosis: Bandler & Salama, Proc. IEEE 73(8), 1985; Hochwald & Bastian, IEEE Trans. Circuits
Syst. 26(7), 1979 (from memory).

An over-range reading (OL) is an outcome too: a diode test's OL (the reading would pass the
meter's open-circuit voltage) against the rows that predict it, a DC OL against the meter's
range where the profile gives one (``[meter] range_volts``); elsewhere it carries no value and
is listed under ``ignored``.

A reading under a test load and the same node's reading without it, with the same meter on the
same range, share the meter's gain and offset error; their difference is known to about the
meter's resolution (GUM, JCGM 100:2008 §5.2, correlated input quantities). Where both are
read, the loaded one enters as the drop (unloaded minus loaded) with the drop's own spread:
the tolerances that move both readings alike cancel in it (``dictionary.drop_channel``), and of
the meter only its gain error on the drop itself and the resolution of the two readings remain.

The next measurement is the available (place, kind) with the largest expected information
gain per unit of effort: the expected drop in the posterior's entropy (de Kleer & Williams,
Artificial Intelligence 32(1), 1987), over the profile's ``[efforts]`` (common practice, no
source), the power-off step only with its discharge-and-verify caution; none once the top
hypothesis passes 0.9. Readings that no hypothesis explains are flagged by a goodness-of-fit
test (χ² of the best-fitting row) rather than forced onto the nearest fault: the odds are then
said to be conditional on a single fault, the worst-fitting reading leads ("re-read S4"), and
the suggestions go on.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from fieldtool.core.circuit.reading_range import reading_problem
from fieldtool.core.circuit.readouts.powered import load_watts
from fieldtool.core.circuit.readouts.spread import RECT, accuracy_sigma
from fieldtool.core.circuit.safety import POWER_OFF_CAUTION, TEST_LOAD_CAUTION
from fieldtool.core.circuit.spec import display_name
from fieldtool.core.diagnosis.dictionary import Channel, FaultDictionary
from fieldtool.core.diagnosis.faults import Fault, describe
from fieldtool.core.diagnosis.priors import Priors, published_priors
from fieldtool.core.errors import InputError
from fieldtool.core.measurement import (
    AC_RMS,
    CURRENT,
    DC,
    DC_LOADED,
    DIODE_TEST,
    QUANTITIES,
    RIPPLE_PP,
    Measurement,
)

CONFIDENT = 0.9  # stop suggesting measurements once the top hypothesis passes this
NO_FIT_P = 1e-3  # below this the best hypothesis does not explain the readings
SPLIT_SIGMAS = 2.0  # hypotheses closer than this at every reading are not split yet
MIN_GAIN_BITS = 0.02
OL_SLIP = 1e-3  # chance a row predicting OL shows a number, or the reverse (common practice)
LOG_2PI = math.log(2 * math.pi)
SPLITTER_CANDIDATES = 12  # the measurements tried as splitters of an ambiguity group
KEEP_ROWS = 1e-6  # rows below this share of the heaviest are left out of the expected gains
_GH_T, _GH_W = np.polynomial.hermite.hermgauss(6)
_GH_W = _GH_W / _GH_W.sum()

Conditions = tuple[tuple[str, float], ...]


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
class Suggestion:
    """One measurement worth taking next: where, which kind, its settings, why and at what cost.

    ``caution`` is the discharge-and-verify caution for a power-off step, or the test load's
    power and caution for a reading under a test load (None for the others).
    """

    at: str
    quantity: str  # a QUANTITIES name
    conditions: Conditions
    gain_bits: float
    effort: float
    words: str
    caution: str | None

    def to_json(self) -> dict:
        """The shape ``diagnose --json`` prints under ``next_measurement``."""
        return {
            "at": self.at,
            "quantity": self.quantity,
            "conditions": dict(self.conditions),
            "gain_bits": round(self.gain_bits, 4),
            "effort": self.effort,
            "words": self.words,
            "caution": self.caution,
        }


@dataclass(frozen=True)
class Ambiguity:
    """Hypotheses the readings so far cannot tell apart, and the measurement that would."""

    members: tuple[str, ...]
    split_by: str | None  # where that measurement is taken (a node, rail or part)
    text: str
    split_with: Suggestion | None = None


@dataclass(frozen=True)
class Fit:
    """How well the best hypothesis explains the readings."""

    score: float  # p-value of the best-fitting row's χ² (1: perfect, near 0: nothing fits)
    no_fit: bool
    worst_node: str | None  # where the worst-fitting reading was taken
    text: str
    worst_quantity: str | None = None  # its kind
    all_but_one: str | None = None  # words of a hypothesis explaining every reading but that


@dataclass(frozen=True)
class Diagnosis:
    """The ranked hypotheses, the next measurement and what stays ambiguous.

    ``conditional``: the readings fit no hypothesis, so the probabilities are the odds *if* a
    single catalogued fault is to blame. ``next_probe`` is the best DC node (for callers that
    probe DC only); ``next_measurement`` the best over every kind per unit of effort.
    """

    suspects: tuple[Suspect, ...]
    next_probe: str | None
    next_probe_gain_bits: float
    ambiguity: tuple[Ambiguity, ...]
    fit: Fit
    gains: dict[str, float]  # DC node → expected gain (bits)
    ignored: tuple[str, ...]
    next_measurement: Suggestion | None = None
    worth: dict[tuple[str, str], float] = field(default_factory=dict)  # bits per effort
    conditional: bool = False

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
            "conditional_on_single_fault": self.conditional,
            "next_probe": self.next_probe,
            "next_probe_gain_bits": round(self.next_probe_gain_bits, 4),
            "next_measurement": (
                None if self.next_measurement is None else self.next_measurement.to_json()
            ),
            "worth": [
                {"at": at, "quantity": q, "bits_per_effort": round(v, 4)}
                for (at, q), v in sorted(self.worth.items(), key=lambda kv: -kv[1])
            ],
            "ambiguity": [list(a.members) for a in self.ambiguity],
            "ambiguity_text": [a.text for a in self.ambiguity],
            "fit": {
                "score": self.fit.score,
                "no_fit": self.fit.no_fit,
                "worst_node": self.fit.worst_node,
                "worst_quantity": self.fit.worst_quantity,
                "all_but_one": self.fit.all_but_one,
                "text": self.fit.text,
            },
            "ignored": list(self.ignored),
        }


# --- readings as likelihood terms ---------------------------------------------------------


@dataclass(frozen=True)
class _Term:
    """One reading's likelihood under every row, and what the fit check needs of it."""

    name: str  # for people: "S4", "S4 ripple", "D5 diode test"
    at: str
    quantity: str
    logp: np.ndarray  # (R,) log-likelihood of the reading under each row
    z2: np.ndarray  # (R,) its χ² contribution (a squared z, or −2 log P of an OL outcome)
    mu: np.ndarray  # (R,) predicted value (NaN where the row predicts OL)
    sd: np.ndarray  # (R,) its spread, the instrument included


def _gauss(y: float, mu: np.ndarray, sd: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    z2 = ((y - mu) / sd) ** 2
    return -0.5 * z2 - np.log(sd) - 0.5 * LOG_2PI, z2


_ERFC = np.frompyfunc(math.erfc, 1, 1)


def _norm_sf(x: np.ndarray) -> np.ndarray:
    """P(Z > x) for a standard normal Z."""
    return 0.5 * _ERFC(np.asarray(x, dtype=float) / math.sqrt(2.0)).astype(float)


def _total_sd(d: FaultDictionary, ch: Channel, value: float | np.ndarray) -> np.ndarray:
    return np.sqrt(ch.sigma**2 + accuracy_sigma(d.profile, ch.quantity.name, value) ** 2)


def _label(d: FaultDictionary, m: Measurement) -> str:
    q = m.quantity
    if q == DC:
        return m.at
    if q == DC_LOADED:
        return f"{m.at} under {_ohms(m.condition('test_load_ohms'))}"
    if q == DIODE_TEST:
        return f"{m.at} diode test"
    if q == CURRENT:
        return f"{m.at} current"
    return f"{m.at} {'ripple' if q == RIPPLE_PP else 'AC'}"


def _ohms(ohms: float) -> str:
    for scale, prefix in ((1e6, "M"), (1e3, "k"), (1.0, "")):
        if ohms >= scale:
            return f"{ohms / scale:.3g} {prefix}Ω"
    return f"{ohms:.3g} Ω"


def _terms(d: FaultDictionary, readings: Sequence[Measurement]):
    """Each usable reading as a likelihood term; the channels read; what was left out."""
    chans: dict[tuple, tuple[Channel, Measurement]] = {}
    ignored: list[str] = []
    wrong: list[tuple[str, str]] = []  # (place, note) of readings this board could not show
    for r in readings:
        if r.at is None:
            raise InputError(f"a {r.quantity.words} reading has no place; say where it was taken")
        if r.quantity.taken_at == "node" and r.at not in d.nodes:
            raise InputError(f"node {r.at!r} is not on {d.profile.name} ({', '.join(d.nodes)})")
        try:
            ch = d.channel(r.at, r.quantity.name, r.conditions)
        except InputError as exc:
            ignored.append(f"{r.at}: {exc.message}")
            continue
        if ch.key in chans:
            raise InputError(
                f"{_label(d, r)}: {r.quantity.words} read twice; keep one reading of each"
            )
        chans[ch.key] = (ch, r)
        problem = reading_problem(d.profile, r)
        if problem:  # left out: it would only overflow the likelihood
            wrong.append((r.at, f"{problem}; left out"))
            ignored.append(wrong[-1][1])
            del chans[ch.key]
    dc_at = {
        key[0]: m.value
        for key, (_, m) in chans.items()
        if key[1] == DC.name and m.value is not None
    }
    terms: list[_Term] = []
    unexplained: list[str] = []
    for ch, r in chans.values():
        term = _term(d, ch, r, dc_at, ignored, unexplained)
        if term is not None:
            terms.append(term)
    return terms, [key for key in chans], ignored, wrong, unexplained


def _term(
    d: FaultDictionary, ch: Channel, r: Measurement, dc_at, ignored, unexplained
) -> _Term | None:
    name = _label(d, r)
    q = ch.quantity
    p = d.profile
    if r.value is None:
        return _overload_term(d, ch, r, name, ignored, unexplained)
    y = float(r.value)
    if q == DC_LOADED and r.at in dc_at:
        # The drop the load causes, read with the same meter: its shared gain and offset
        # error cancel but for the gain on the drop itself and each reading's resolution.
        mu, tol = d.drop_channel(r.at, r.condition("test_load_ohms"))
        y = dc_at[r.at] - y
        gain = p.meter_percent / 100.0 * RECT
        resolution = p.meter_volts * RECT
        sd = np.sqrt(tol**2 + (gain * y) ** 2 + 2 * resolution**2)
        name = f"{r.at} drop under {_ohms(r.condition('test_load_ohms'))}"
    else:
        mu = ch.mean
        sd = _total_sd(d, ch, y)
    logp, z2 = _gauss(y, mu, sd)
    if ch.over.any():  # a number where the row predicts OL: only by a slip
        v_oc = p.instruments.diode_test_volts
        logp = np.where(ch.over, math.log(OL_SLIP / v_oc), logp)
        z2 = np.where(ch.over, -2 * math.log(OL_SLIP), z2)
    unknown = ch.unknown | ~np.isfinite(mu)
    unknown &= ~ch.over
    if unknown.any():  # no prediction for these rows: a broad density, no evidence either way
        width = 2 * max(abs(y), float(np.nanmax(np.abs(mu))) if np.isfinite(mu).any() else 1.0)
        logp = np.where(unknown, -math.log(width), logp)
        z2 = np.where(unknown, 0.0, z2)
    return _Term(name, r.at, q.name, logp, z2, np.where(ch.over, np.nan, mu), sd)


def _overload_term(d, ch: Channel, r: Measurement, name: str, ignored, unexplained):
    """An OL reading as a censored one: it says the value is beyond what the meter shows.

    A diode test's OL against the rows that predict it (past the open-circuit voltage); a DC
    OL against the meter's range where the profile gives one, P(|V| > range) under each row;
    an OL no row can explain is noted in ``unexplained``. Elsewhere it carries no value.
    """
    q = ch.quantity
    p = d.profile
    if q == DIODE_TEST:
        sd = _total_sd(d, ch, np.nan_to_num(ch.mean))
        limit = p.instruments.diode_test_volts
        prob = np.where(ch.over, 1.0 - OL_SLIP, _norm_sf((limit - ch.mean) / sd) + OL_SLIP)
    elif q == DC and p.meter_range_volts is not None:
        limit = p.meter_range_volts
        sd = _total_sd(d, ch, limit)
        prob = _norm_sf((limit - ch.mean) / sd) + _norm_sf((limit + ch.mean) / sd)
        if prob.max() < NO_FIT_P:
            unexplained.append(r.at)
        prob = prob + OL_SLIP
    elif q == DC:
        ignored.append(
            f"{r.at}: OL (over range) tells nothing without the meter's range: add [meter] "
            "range_volts to the profile, or read it on a higher range"
        )
        return None
    else:
        ignored.append(f"{name}: OL (over range) carries no value; read it on a higher range")
        return None
    prob = np.clip(prob, 1e-300, 1.0)
    mu = np.where(ch.over, np.nan, ch.mean)
    return _Term(f"{name} OL", r.at, q.name, np.log(prob), -2 * np.log(prob), mu, sd)


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
    d: FaultDictionary,
    readings: Sequence[Measurement],
    priors: Priors | None = None,
    efforts=None,
    powered: bool = True,
) -> Diagnosis:
    """Rank every hypothesis from the measurements taken; suggest the next measurement.

    Args:
        d: the board type's fault dictionary.
        readings: the measurements of this phase, any mix of kinds and places.
        priors: from ``session.choose_priors``; None for the published shares.
        efforts: each step's effort (``spec.Efforts``); None for the profile's.
        powered: whether the board is powered now (False after a power-off step until it is
            powered again): diode tests are then cheap and powered readings cost the re-power.
    """
    profile = d.profile
    priors = priors or published_priors(profile, d.hypotheses)
    efforts = efforts or profile.efforts
    terms, read, ignored, wrong, unexplained = _terms(d, readings)
    R = len(d.row_hypothesis)
    loglik = sum((t.logp for t in terms), np.zeros(R))
    _, counts = _hyp_slices(d)
    log_prior_row = np.log(priors.probability[d.row_hypothesis]) - np.log(counts[d.row_hypothesis])
    post, row_w = _posterior(d, log_prior_row + loglik)
    order = np.argsort(-post, kind="stable")
    best_row = _best_rows(d, loglik)
    suspects = tuple(_suspect(d, priors, h, post[h], best_row[h]) for h in order)
    fit, leave_out, birge = _fit(d, terms, loglik, suspects)
    if wrong:  # a reading this board cannot show leads: wrong range, unit or node
        fit = Fit(0.0, True, wrong[0][0], f"wrong range, unit or node? {wrong[0][1]}")
    elif unexplained:  # an OL no hypothesis reaches: say so rather than a bare misfit
        fit = Fit(
            0.0,
            True,
            unexplained[0],
            f"{unexplained[0]} reads OL but no hypothesis puts it beyond the meter's "
            f"{profile.meter_range_volts:g} V range: check the range the meter was on, the "
            "probe, and [meter] range_volts in the profile",
            DC.name,
        )
    if leave_out is not None:  # suggest as if the one reading that fits nothing were wrong
        _, row_w = _posterior(d, log_prior_row + loglik - terms[leave_out].logp)
    elif fit.no_fit:  # spreads widened until the best row fits (χ²/k = 1): keep suggesting
        _, row_w = _posterior(d, log_prior_row + loglik / birge)
    taken = set(read)
    candidates = [key for key in d.channel_keys() if key not in taken]
    dc_read = {key[0] for key in read if key[1] == DC.name}
    gains = _gains(d, row_w, candidates, dc_read)
    worth, best = _worth(d, gains, efforts, powered)
    top_p = float(post[order[0]])
    stop = top_p >= CONFIDENT and not fit.no_fit
    next_measurement = None
    if not stop and best is not None and gains[best] >= MIN_GAIN_BITS:
        next_measurement = _suggestion(d, best, gains[best], efforts, powered)
    dc_gains = {k[0]: g for k, g in gains.items() if k[1] == DC.name}
    next_probe, gain = None, 0.0
    if not stop and dc_gains:
        node = max(dc_gains, key=lambda k: dc_gains[k])
        if dc_gains[node] >= MIN_GAIN_BITS:
            next_probe, gain = node, dc_gains[node]
    # splitters are sought among the measurements that tell most overall (speed: each one
    # costs an expected-entropy pass over the group's rows)
    splitters = sorted(gains, key=lambda k: -gains[k])[:SPLITTER_CANDIDATES]
    ambiguity = _ambiguity(d, post, order, best_row, terms, splitters, efforts, powered)
    return Diagnosis(
        suspects,
        next_probe,
        gain,
        ambiguity,
        fit,
        dc_gains,
        tuple(ignored),
        next_measurement,
        worth,
        fit.no_fit,
    )


def _posterior(d: FaultDictionary, log_row: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """(H,) posterior over hypotheses and (R,) normalised row weights."""
    log_post = _logsumexp_rows(log_row, d)
    post = np.exp(log_post - log_post.max())
    post /= post.sum()
    row_w = np.exp(log_row - log_row.max())
    return post, row_w / row_w.sum()


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


# --- what each measurement would tell -----------------------------------------------------


def predicted_reading(d: FaultDictionary, key, rows: np.ndarray, dc_read: set[str]):
    """(mu, sd, over) of a channel over ``rows``, as its reading would enter the likelihood
    (the drop where the node's DC is in ``dc_read``; the instrument's accuracy included)."""
    at, quantity, conditions = key
    ch = d.channel(at, quantity, conditions)
    if quantity == DC_LOADED.name and at in dc_read:
        mu, tol = d.drop_channel(at, dict(conditions)["test_load_ohms"])
        mu, tol = mu[rows], tol[rows]
        p = d.profile
        sd = np.sqrt(
            tol**2 + (p.meter_percent / 100.0 * RECT * mu) ** 2 + 2 * (p.meter_volts * RECT) ** 2
        )
    else:
        mu = ch.mean[rows]
        sd = np.sqrt(
            ch.sigma[rows] ** 2 + accuracy_sigma(d.profile, quantity, np.nan_to_num(mu)) ** 2
        )
    over = ch.over[rows]
    unknown = ~np.isfinite(mu) & ~over
    if unknown.any():  # no prediction: as wide as the channel's whole span
        known = mu[np.isfinite(mu)]
        centre = float(np.median(known)) if len(known) else 0.0
        span = float(np.ptp(known)) + float(np.abs(known).max()) if len(known) else 1.0
        mu = np.where(unknown, centre, mu)
        sd = np.where(unknown, max(span, 1e-9), sd)
    sd = np.where(np.isfinite(sd) & (sd > 0), sd, 1e-9)
    return mu, sd, over


def _gains(d: FaultDictionary, row_w: np.ndarray, candidates, dc_read) -> dict:
    """Expected information gain (bits) of each measurement not yet taken."""
    keep = row_w > KEEP_ROWS * row_w.max()
    rows = np.flatnonzero(keep)
    w = row_w[rows] / row_w[rows].sum()
    return {key: max(g, 0.0) for key, g in _gain_each(d, rows, w, candidates, dc_read)}


def _gain_each(d: FaultDictionary, rows: np.ndarray, w: np.ndarray, candidates, dc_read):
    """(key, expected gain in bits) of each candidate over ``rows`` (grouped by hypothesis)
    weighted ``w``: the entropy now less the expected entropy after the reading."""
    hyp_of = d.row_hypothesis[rows]
    starts = np.flatnonzero(np.r_[True, np.diff(hyp_of) != 0])
    h_now = float(_entropy(np.add.reduceat(w, starts)))
    limit = d.profile.instruments.diode_test_volts
    for key in candidates:
        mu, sd, over = predicted_reading(d, key, rows, dc_read)
        if over.any():
            e = _expected_entropy_ol(mu, sd, over, w, starts, limit)
        else:
            e = _expected_entropy(mu, sd, w, starts)
        yield key, h_now - e


def _cluster_points(mu: np.ndarray, sd: np.ndarray, w: np.ndarray):
    """Quadrature points of the predicted reading: rows predicting alike share points."""
    key = np.round(mu / (0.25 * sd.min())).astype(np.int64) * 1000 + np.round(
        np.log(sd) * 8
    ).astype(np.int64)
    _, first, inverse = np.unique(key, return_index=True, return_inverse=True)
    cw = np.bincount(inverse, weights=w)
    pts = mu[first, None] + np.sqrt(2.0) * sd[first, None] * _GH_T[None, :]  # (C, K)
    return pts.ravel(), (cw[:, None] * _GH_W[None, :]).ravel()


def _expected_entropy(mu, sd, w, starts) -> float:
    """E over the predicted reading of the posterior entropy (Gauss–Hermite per cluster).

    Rows come grouped by hypothesis; ``starts`` marks where each group begins.
    """
    y, qw = _cluster_points(mu, sd, w)
    zz = (y[:, None] - mu[None, :]) / sd[None, :]
    like = w[None, :] * np.exp(-0.5 * zz**2) / sd[None, :]  # (Y, R)
    per_h = np.add.reduceat(like, starts, axis=1)  # (Y, hypotheses present)
    total = per_h.sum(axis=1, keepdims=True)
    p = per_h / np.where(total > 0, total, 1.0)
    return float((qw * _entropy(p)).sum())


def _expected_entropy_ol(mu, sd, over, w, starts, limit: float) -> float:
    """As ``_expected_entropy`` for a reading that may be OL (rows ``over`` predict it)."""
    p_ol = np.where(over, 1.0 - OL_SLIP, OL_SLIP)
    numeric = ~over
    total = 0.0
    if numeric.any():
        y, qw = _cluster_points(mu[numeric], sd[numeric], w[numeric])
        m = np.where(over, 0.0, mu)
        zz = (y[:, None] - m[None, :]) / sd[None, :]
        dens = np.where(over[None, :], OL_SLIP / limit, np.exp(-0.5 * zz**2) / sd[None, :])
        dens = np.where(numeric[None, :], dens / math.sqrt(2 * math.pi), dens)
        like = w[None, :] * dens
        per_h = np.add.reduceat(like, starts, axis=1)
        s = per_h.sum(axis=1, keepdims=True)
        total += float((qw * _entropy(per_h / np.where(s > 0, s, 1.0))).sum())
    mass = w * p_ol
    per_h = np.add.reduceat(mass, starts)
    total_ol = float(per_h.sum())
    if total_ol > 0:
        h_ol = float(_entropy(per_h / total_ol))
        share = float((w * over).sum())  # the chance of an OL outcome
        total = (1.0 - share) * total + share * h_ol
    return total


def effort_of(d: FaultDictionary, quantity: str, efforts, powered: bool) -> float:
    """One reading's effort with the board as it is (see ``spec.Efforts``)."""
    if quantity == DIODE_TEST.name:
        return efforts.power_off if powered else efforts.diode_test
    return efforts.of(quantity) + (0.0 if powered else efforts.power_on)


def _worth(d: FaultDictionary, gains: dict, efforts, powered: bool):
    """(at, quantity) → best gain per effort there; and the best measurement overall."""
    worth: dict[tuple[str, str], float] = {}
    best, best_score = None, -1.0
    for key, gain in gains.items():
        at, quantity, _ = key
        score = gain / effort_of(d, quantity, efforts, powered)
        worth[at, quantity] = max(worth.get((at, quantity), 0.0), score)
        if score > best_score:
            best, best_score = key, score
    return worth, best


def _where(d: FaultDictionary, node: str) -> str:
    label = d.labels.get(node)
    return f"{node} ({label})" if label else node


def _suggestion(d: FaultDictionary, key, gain: float, efforts, powered: bool) -> Suggestion:
    """The words and caution for one measurement."""
    at, quantity, conditions = key
    p = d.profile
    caution = None
    if quantity == DC.name:
        words = f"DC volts at {_where(d, at)}"
    elif quantity == RIPPLE_PP.name:
        words = f"ripple peak to peak at {_where(d, at)} (scope, 10× probe)"
    elif quantity == AC_RMS.name:
        words = f"AC volts at {_where(d, at)} (true-RMS meter on AC)"
    elif quantity == CURRENT.name:
        lead = "supply lead" if at == "supply" else "driver's supply rail"
        words = f"{at} current (meter in series with the {lead})"
    elif quantity == DC_LOADED.name:
        ohms = dict(conditions)["test_load_ohms"]
        out = d.output_node
        volts = float(d.unloaded[0, d.node_index(out)])
        watts = load_watts(volts, ohms)
        words = f"DC volts at {_where(d, at)} with the {_ohms(ohms)} test load on {out}"
        caution = (
            f"The {_ohms(ohms)} test load takes about {watts:.3g} W at {abs(volts):.4g} V. "
            + TEST_LOAD_CAUTION
        )
    else:
        words = f"diode test across {at}, board off and discharged (red lead on the anode)"
        if powered:
            caution = POWER_OFF_CAUTION.format(safe=p.safe_volts)
    if not powered and quantity != DIODE_TEST.name:
        words += " (power the board again first)"
    return Suggestion(
        at, quantity, conditions, gain, effort_of(d, quantity, efforts, powered), words, caution
    )


# --- ambiguity ----------------------------------------------------------------------------


def _ambiguity(d, post, order, best_row, terms, candidates, efforts, powered):
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
            if any(_unsplit(h, other, best_row, terms) for other in g):
                g.append(h)
                break
        else:
            groups.append([h])
    out = []
    dc_read = {t.at for t in terms if t.quantity == DC.name}
    for g in groups:
        if len(g) < 2:
            continue
        key = _splitter(d, g, post, candidates, dc_read, efforts, powered)
        names = [_spec(d, h) for h in g]
        words = " or ".join(_words(d, h) for h in g)
        if key is None:
            text = (
                f"{words}: no measurement on this board splits them; check the parts out of circuit"
            )
            out.append(Ambiguity(tuple(names), None, text))
            continue
        at, quantity, _ = key
        split = _suggestion(d, key, 0.0, efforts, powered)
        if quantity == DC.name:
            text = f"{words}: probe {_where(d, at)} to split"
        else:
            text = f"{words}: take {split.words} to split"
        out.append(Ambiguity(tuple(names), at, text, split))
    return tuple(out)


def _unsplit(a: int, b: int, best_row, terms) -> bool:
    ra, rb = best_row[a], best_row[b]
    for t in terms:
        ma, mb = t.mu[ra], t.mu[rb]
        if np.isnan(ma) != np.isnan(mb):
            return False  # one predicts OL, the other a number
        if np.isnan(ma):
            continue
        if abs(ma - mb) / math.hypot(t.sd[ra], t.sd[rb]) >= SPLIT_SIGMAS:
            return False
    return True


def _splitter(d, group, post, candidates, dc_read, efforts, powered):
    """The measurement not yet taken that best separates the group per effort, if any does."""
    rows = np.flatnonzero(np.isin(d.row_hypothesis, group))  # grouped by hypothesis
    counts = np.bincount(d.row_hypothesis[rows], minlength=len(post))
    w = post[d.row_hypothesis[rows]] / counts[d.row_hypothesis[rows]]
    w = w / w.sum()
    best, best_score = None, 0.0
    for key, gain in _gain_each(d, rows, w, candidates, dc_read):
        if gain <= MIN_GAIN_BITS * 5:
            continue
        score = gain / effort_of(d, key[1], efforts, powered)
        if score > best_score:
            best, best_score = key, score
    return best


def _spec(d: FaultDictionary, h: int) -> str:
    hyp = d.hypotheses[h]
    return "healthy" if hyp.target is None else f"{display_name(d.profile, hyp.target)}:{hyp.mode}"


def _words(d: FaultDictionary, h: int) -> str:
    hyp = d.hypotheses[h]
    return describe(None if hyp.target is None else Fault(hyp.target, hyp.mode), d.profile)


# --- goodness of fit ----------------------------------------------------------------------


def _fit(d, terms: list[_Term], loglik, suspects) -> tuple[Fit, int | None, float]:
    """χ² goodness of fit of the best-fitting row, the reading furthest from it, (when nothing
    fits) the one reading without which a hypothesis explains the rest, and the Birge ratio
    χ²/k of the best row (the factor by which the variances would have to grow for it to fit;
    R. T. Birge, Phys. Rev. 40, 1932, from memory), 1 where the readings fit."""
    k = len(terms)
    if k == 0:
        return Fit(1.0, False, None, "no readings yet"), None, 1.0
    z2 = np.stack([t.z2 for t in terms], axis=1)  # (R, k)
    chi2 = z2.sum(axis=1)
    best = int(np.argmin(chi2))
    p = chi2_sf(float(chi2[best]), k)
    worst = int(np.argmax(z2[best]))
    if p >= NO_FIT_P:
        return (
            Fit(
                p,
                False,
                terms[worst].at,
                f"readings fit {suspects[0].words} (p = {p:.2f})",
                terms[worst].quantity,
            ),
            None,
            1.0,
        )
    # Which single reading, left out, lets one hypothesis explain all the others?
    leave_out, explained, best_p = None, None, NO_FIT_P
    if k >= 2:
        for i in range(k):
            rest = chi2 - z2[:, i]
            r = int(np.argmin(rest))
            q = chi2_sf(float(rest[r]), k - 1)
            if q >= best_p:
                leave_out, explained, best_p = i, r, q
    if leave_out is not None:
        worst = leave_out
    t = terms[worst]
    sigmas = math.sqrt(float(z2[best, worst]))
    kind = QUANTITIES[t.quantity].words
    text = f"re-read {t.name} ({kind}): it fits nothing ({sigmas:.0f}σ off); wrong node or range?"
    all_but_one = None
    if explained is not None:
        h = int(d.row_hypothesis[explained])
        all_but_one = _words(d, h)
        text += f" {all_but_one} explains every reading but that one."
    text += (
        " No hypothesis explains these readings together: the odds below assume a single "
        "catalogued fault; check the profile, or suspect two faults at once "
        f"(best fit p = {p:.1e})."
    )
    return Fit(p, True, t.at, text, t.quantity, all_but_one), leave_out, max(chi2[best] / k, 1.0)


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
