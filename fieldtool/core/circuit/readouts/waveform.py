"""What an instrument makes of one period of a node's waveform: peak to peak, true RMS.

A period comes from the solver as node voltages at the ends of its time steps (a grid graded
after each drive edge, ``fieldtool.core.circuit.solver.period_grid``). The steps are coarse late
in each half period, where a reservoir node's smooth maximum (the diode current falling
through the load current) can fall between two of them; the extremes are therefore refined by
fitting a parabola through the extreme sample and its two neighbours (three-point peak
interpolation on an uneven grid). The vertex is used only where it lies between those
neighbours on the side of the extreme, and never moves the value by more than the larger step
to a neighbour; a corner (a drive edge, where the grid has points on the edge itself: pass
them as ``corners``) keeps its sample. ``tests/core/test_readouts.py`` checks it against a solve on
a four times finer grid.
"""

from __future__ import annotations

import numpy as np

RESAMPLE_POINTS = 1024  # per period, for the spectrum; ≥ 10 points on a 1 % drive edge
SINE_FORM_FACTOR = np.pi / (2 * np.sqrt(2))  # rms / rectified mean of a sine, ≈ 1.1107


def _periodic(times: np.ndarray, wave: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Times and values one sample either side of the period, wrapped (…, T+2)."""
    period = times[-1]
    t = np.concatenate([[times[-2] - period], times[1:], [period + times[1]]])
    v = np.concatenate([wave[..., -2:-1], wave, wave[..., :1]], axis=-1)
    return t, v


def _vertex(
    t: np.ndarray, v: np.ndarray, i: np.ndarray, sign: float, corners: np.ndarray | None
) -> np.ndarray:
    """The extreme of the parabola through samples i−1, i, i+1 (rows of v), where trusted."""
    rows = np.arange(v.shape[0])
    t0, t1, t2 = t[i - 1], t[i], t[i + 1]
    v0, v1, v2 = v[rows, i - 1], v[rows, i], v[rows, i + 1]
    d1 = (v1 - v0) / (t1 - t0)
    d2 = (v2 - v1) / (t2 - t1)
    curve = (d2 - d1) / (t2 - t0)  # half the second derivative
    with np.errstate(divide="ignore", invalid="ignore"):
        tv = 0.5 * (t0 + t1) - d1 / (2 * curve)  # where the parabola's slope is zero
        peak = v1 + curve * (tv - t0) * (tv - t1) + d1 * (tv - t1)
    bound = np.maximum(np.abs(v1 - v0), np.abs(v1 - v2))
    trusted = (sign * curve < 0) & (tv > t0) & (tv < t2) & np.isfinite(peak)
    trusted &= np.abs(peak - v1) <= bound
    if corners is not None:
        trusted &= ~corners[i - 1]
    return np.where(trusted, peak, v1)


def extremes(
    times: np.ndarray, wave: np.ndarray, corners: np.ndarray | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Refined (min, max) of each waveform row: ``wave`` (…, T) on the grid ``times`` (T+1,).

    ``corners`` (T,) marks the samples that sit on a drive edge; those are never refined.
    """
    shape = wave.shape[:-1]
    flat = wave.reshape(-1, wave.shape[-1])
    t, v = _periodic(times, flat)
    hi = _vertex(t, v, np.argmax(flat, axis=1) + 1, +1.0, corners)
    lo = _vertex(t, v, np.argmin(flat, axis=1) + 1, -1.0, corners)
    return lo.reshape(shape), hi.reshape(shape)


def peak_to_peak(
    times: np.ndarray, wave: np.ndarray, corners: np.ndarray | None = None
) -> np.ndarray:
    """Peak-to-peak of each waveform row, extremes refined (see the module docstring)."""
    lo, hi = extremes(times, wave, corners)
    return hi - lo


def edge_samples(times: np.ndarray, edge_s: float, square: bool) -> np.ndarray:
    """(T,) True for the samples on a square drive's edges (none for a sine drive)."""
    t = times[1:]
    if not square:
        return np.zeros(len(t), dtype=bool)
    half = times[-1] / 2
    tiny = 1e-9 * times[-1]
    on_first = t <= edge_s + tiny
    on_second = (t >= half - tiny) & (t <= half + edge_s + tiny)
    return on_first | on_second | (t >= times[-1] - tiny)


def resample_matrix(times: np.ndarray, points: int = RESAMPLE_POINTS) -> np.ndarray:
    """(T, points): a period's samples on ``times`` (T+1,) times this matrix are the waveform
    on ``points`` equal steps (linear between samples, periodic: v(0) = v(T))."""
    period = times[-1]
    grid = np.arange(points) * (period / points)
    t = np.concatenate([[0.0], times[1:]])
    right = np.clip(np.searchsorted(t, grid, side="right"), 1, len(t) - 1)
    left = right - 1
    w = (grid - t[left]) / (t[right] - t[left])
    W = np.zeros((len(t), points))
    cols = np.arange(points)
    np.add.at(W, (left, cols), 1.0 - w)
    np.add.at(W, (right, cols), w)
    W[-1] += W[0]  # sample 0 is the period's last sample again
    return W[1:]


def resample(times: np.ndarray, wave: np.ndarray, points: int = RESAMPLE_POINTS) -> np.ndarray:
    """The waveform on ``points`` equal steps over one period (linear between samples)."""
    flat = wave.reshape(-1, wave.shape[-1])
    return (flat @ resample_matrix(times, points)).reshape(*wave.shape[:-1], points)


def rms_form(times: np.ndarray, gain: np.ndarray) -> np.ndarray:
    """(…, T, T) symmetric Q with ``true_rms(times, w, gain)`` = √(w·Q·w) for any waveform w
    on ``times``: resampling, the spectrum and the instrument's gain are all linear, so the
    AC power is a quadratic form of the samples (``gain`` (…, K) as for ``true_rms``)."""
    W = resample_matrix(times)  # (T, N)
    N = W.shape[1]
    F = np.fft.rfft(W, axis=1)[:, 1:-1] * (2.0 / N)  # (T, K) each sample's harmonics
    g2 = np.asarray(gain) ** 2
    return 0.5 * np.real(np.einsum("tk,...k,sk->...ts", F, g2, F.conj()))


def harmonics(times: np.ndarray, wave: np.ndarray) -> np.ndarray:
    """Complex amplitudes of harmonics 1 … N/2−1 of each row (…, K), peak volts."""
    x = resample(times, wave)
    spectrum = np.fft.rfft(x, axis=-1) * (2.0 / x.shape[-1])
    return spectrum[..., 1:-1]


def true_rms(times: np.ndarray, wave: np.ndarray, gain: np.ndarray | None = None) -> np.ndarray:
    """RMS of the AC component of each row, each harmonic k scaled by ``gain[..., k−1]``.

    Parseval: the AC power is half the sum of the harmonics' squared peak amplitudes.
    ``gain`` (broadcast against the harmonics) is the instrument's response, |H| per harmonic.
    """
    a = np.abs(harmonics(times, wave))
    if gain is not None:
        a = a * gain
    return np.sqrt(0.5 * (a**2).sum(axis=-1))


def average_responding(times: np.ndarray, wave: np.ndarray) -> np.ndarray:
    """What an average-responding meter calibrated for sine reads: 1.111 × rectified mean."""
    x = resample(times, wave)
    ac = x - x.mean(axis=-1, keepdims=True)
    return SINE_FORM_FACTOR * np.abs(ac).mean(axis=-1)


def first_order_rolloff(freqs: np.ndarray, corner_hz: float) -> np.ndarray:
    """|H| of a first-order low-pass with its −3 dB point at ``corner_hz``."""
    return 1.0 / np.sqrt(1.0 + (freqs / corner_hz) ** 2)


def shunt_divider(
    freqs: np.ndarray,
    node_siemens: np.ndarray,
    node_farads: np.ndarray,
    shunt_siemens: float,
    shunt_farads: float,
) -> np.ndarray:
    """|H| of a node whose own admittance shares its AC current with an instrument's input.

    The ripple at a ladder node is a current (or a drive edge through a capacitor) working into
    the admittance on the node, G + jωC (its capacitors, a source's conductance); an
    instrument in parallel (G_in ‖ C_in) takes its share:
    H = (G + jωC) / (G + jωC + G_in + jωC_in). ``node_siemens`` and ``node_farads`` (…,)
    broadcast against ``freqs``.
    """
    w = 2 * np.pi * freqs
    g = np.asarray(node_siemens)[..., None]
    b = w * np.asarray(node_farads)[..., None]
    bs = w * shunt_farads
    # |y / (y + y_in)| in real arithmetic (the same number, without complex temporaries)
    return np.sqrt((g * g + b * b) / ((g + shunt_siemens) ** 2 + (b + bs) ** 2))
