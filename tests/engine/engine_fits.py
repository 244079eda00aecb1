"""Measurements on rendered signals, written independently of the engine.

Each function estimates a frequency or a decay rate from samples alone, by a
published method, so the engine's output can be checked against its plan.
"""

from __future__ import annotations

import numpy as np
from scipy import signal


def prony_one_mode(x: np.ndarray, sample_rate: float) -> tuple[float, float]:
    """Frequency (Hz) and amplitude decay rate (1/s) of one damped sinusoid.

    A sampled ``A r^n sin(theta n + phi)`` obeys ``x[n] = 2 r cos(theta) x[n-1]
    - r^2 x[n-2]`` exactly; least squares on that recursion gives ``r`` and
    ``theta`` (linear prediction of order 2).

    References
    ----------
    Prony, G. R. de, "Essai experimental et analytique...", J. Ecole
    Polytechnique 1(22), 24-76, 1795 (volume and pages from memory); in
    modern form Hua, Y. and Sarkar, T. K., IEEE Trans. ASSP 38(5), 814-824,
    1990 (physics.md, section 11).
    """
    x = np.asarray(x, dtype=np.float64)
    a = np.column_stack([x[1:-1], x[:-2]])
    (c1, c2), *_ = np.linalg.lstsq(a, x[2:], rcond=None)
    r = np.sqrt(-c2)
    theta = np.arccos(c1 / (2 * r))
    return float(theta * sample_rate / (2 * np.pi)), float(-np.log(r) * sample_rate)


def fft_peak_hz(x: np.ndarray, sample_rate: float, near_hz: float, *,
                search_rel: float = 0.02, pad_to: int = 2 ** 21) -> float:
    """Frequency of the largest spectral peak within ``near_hz * (1 +- search_rel)``.

    Hann window, zero padding to ``pad_to`` points, then a parabola through the
    log magnitudes of the peak bin and its neighbours.

    References
    ----------
    Smith, J. O. and Serra, X., "PARSHL: an analysis/synthesis program for
    non-harmonic sounds based on a sinusoidal representation", Proc. ICMC
    1987 (quadratic interpolation of spectral peaks).
    """
    x = np.asarray(x, dtype=np.float64)
    spec = np.abs(np.fft.rfft(x * np.hanning(x.size), n=pad_to))
    freqs = np.fft.rfftfreq(pad_to, 1.0 / sample_rate)
    band = np.flatnonzero(np.abs(freqs - near_hz) <= search_rel * near_hz)
    k = int(band[np.argmax(spec[band])])
    a, b, c = np.log(spec[k - 1:k + 2])
    offset = 0.5 * (a - c) / (a - 2 * b + c)
    return float((k + offset) * sample_rate / pad_to)


def log_envelope_decay(x: np.ndarray, sample_rate: float, centre_hz: float,
                       t_from_s: float, t_to_s: float, *, half_band_hz: float = 100.0) -> float:
    """Amplitude decay rate (1/s) of the partial at ``centre_hz``.

    Zero-phase band-pass (4th-order Butterworth, forward and backward),
    Hilbert envelope, least-squares line through ln(envelope) between
    ``t_from_s`` and ``t_to_s``; returns minus its slope (physics.md, section
    11: Q = pi f / |slope|).
    """
    sos = signal.butter(4, [centre_hz - half_band_hz, centre_hz + half_band_hz],
                        btype="bandpass", fs=sample_rate, output="sos")
    y = signal.sosfiltfilt(sos, x)
    env = np.abs(signal.hilbert(y))
    t = np.arange(x.size) / sample_rate
    sel = (t >= t_from_s) & (t <= t_to_s)
    slope, _ = np.polyfit(t[sel], np.log(env[sel]), 1)
    return float(-slope)
