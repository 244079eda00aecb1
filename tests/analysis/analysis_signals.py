"""Synthetic strikes for the analysis tests: sums of exponentially damped cosines.

Each partial is ``a exp(-(t - t0)/tau) cos(2 pi f (t - t0) + phase)`` for ``t >= t0``
(the strike onset ``t0 = lead_s``), zero before; white Gaussian noise of standard
deviation ``noise_std`` covers the whole file.  Values are exact by construction,
so every estimate can be compared with the numbers that built the signal.
"""

from __future__ import annotations

import math

import numpy as np


def damped_sum(
    sample_rate: float,
    duration_s: float,
    freqs_hz,
    taus_s,
    amplitudes,
    phases_rad=None,
    *,
    lead_s: float = 0.0,
    noise_std: float = 0.0,
    rng: np.random.Generator | None = None,
) -> np.ndarray:
    """Return ``lead_s + duration_s`` seconds of damped cosines plus noise."""
    n_lead = int(round(lead_s * sample_rate))
    n = int(round(duration_s * sample_rate))
    t = np.arange(n) / sample_rate
    if phases_rad is None:
        phases_rad = [0.0] * len(freqs_hz)
    x = np.zeros(n_lead + n)
    for f, tau, a, ph in zip(freqs_hz, taus_s, amplitudes, phases_rad, strict=True):
        x[n_lead:] += a * np.exp(-t / tau) * np.cos(2 * math.pi * f * t + ph)
    if noise_std > 0:
        x += rng.standard_normal(x.size) * noise_std
    return x


def noise_for_snr(amplitude: float, snr_db: float) -> float:
    """Noise std giving ``snr_db`` between a sine of ``amplitude`` (power a^2/2) and noise."""
    return amplitude / math.sqrt(2.0) * 10 ** (-snr_db / 20.0)


def cents(f: float, ref: float) -> float:
    """1200 log2(f / ref)."""
    return 1200.0 * math.log2(f / ref)


def nearest(partials, freq_hz: float):
    """Return the partial whose frequency is nearest ``freq_hz``."""
    return min(partials, key=lambda p: abs(p.frequency_hz - freq_hz))
