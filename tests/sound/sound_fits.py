"""Fits shared by the sound tests (imported by name: a module of its own, since every
test folder's conftest is called ``conftest``).
"""

from __future__ import annotations

import numpy as np


def heterodyne_fit(x: np.ndarray, fs: float, f0: float, t0: float, t1: float,
                   bandwidth_hz: float = 8.0):
    """Frequency and amplitude decay rate of the partial near f0, by demodulation.

    x is mixed down by f0, averaged over blocks of ~1/bandwidth seconds (a
    moving-average low-pass that rejects the other partials, which lie far
    away), and a straight line is fitted to the unwrapped phase (frequency
    offset) and to the log magnitude (decay) between t0 and t1.  A textbook
    method (heterodyne / phase-slope estimation; e.g. Smith, Spectral Audio
    Signal Processing, 2011), independent of the engine.
    """
    n = np.arange(len(x))
    z = x * np.exp(-2j * np.pi * f0 * n / fs)
    m = int(fs / bandwidth_hz)
    k = len(z) // m
    blocks = z[: k * m].reshape(k, m).mean(axis=1)
    t = (np.arange(k) * m + 0.5 * (m - 1)) / fs
    sel = (t >= t0) & (t <= t1)
    ph = np.unwrap(np.angle(blocks[sel]))
    slope = np.polyfit(t[sel], ph, 1)[0]
    decay = -np.polyfit(t[sel], np.log(np.abs(blocks[sel])), 1)[0]
    return f0 + slope / (2 * np.pi), decay
