"""Speed of the analysis package (``barwright bench --only analysis``).

The case is a synthetic recording: 0.1 s of noise, then a 5 s strike at 48 kHz
with 8 partials from 150 Hz to 15 kHz (time constants 6 s down to 40 ms), noise
50 dB below the strongest partial.  Every figure is a median over repeats.  The
in-run reference is one real FFT of the whole file (the cheapest look at it that
any analysis must take), so the ratio says how much work the analysis does on
top of reading the spectrum once, independent of the machine's load.

Figures
-------
analysis.find_partials_5s_ms
    Median wall time of :func:`synth.analysis.find_partials` on the case, ms.
analysis.find_partials_realtime_ratio
    That time over the signal duration (5.1 s); below 1 is faster than real
    time.
analysis.find_partials_vs_fft_ratio
    That time over the time of one ``numpy.fft.rfft`` of the file.
analysis.partials_found
    Partials found (8 expected), a check that the timed run did its job.
analysis.fit_decay_ms, analysis.schroeder_ms, analysis.loudness_ms,
analysis.true_peak_ms
    Median wall times of one decay fit, one broadband Schroeder curve, one
    BS.1770-4 loudness and one true peak on the same file, ms.
"""

from __future__ import annotations

import math

import numpy as np

from synth.bench import median_time

FS = 48000.0
_FREQS = (150.0, 600.0, 1500.0, 2900.0, 4100.0, 6800.0, 10400.0, 15000.0)
_TAUS = (6.0, 3.0, 1.2, 0.6, 0.4, 0.15, 0.08, 0.04)
_AMPS = (0.4, 0.2, 0.1, 0.06, 0.05, 0.03, 0.02, 0.01)


def case(seed: int = 7) -> np.ndarray:
    """Return the benchmark recording (see the module docstring)."""
    rng = np.random.default_rng(seed)
    n_lead = int(0.1 * FS)
    n = int(5.0 * FS)
    t = np.arange(n) / FS
    x = np.zeros(n_lead + n)
    phases = rng.uniform(-math.pi, math.pi, len(_FREQS))
    for f, tau, a, ph in zip(_FREQS, _TAUS, _AMPS, phases, strict=True):
        x[n_lead:] += a * np.exp(-t / tau) * np.cos(2 * math.pi * f * t + ph)
    x += rng.standard_normal(x.size) * _AMPS[0] / math.sqrt(2) * 10 ** (-50 / 20)
    return x


def run(quick: bool = False) -> dict[str, float]:
    """Time the analysis of the 5 s, 8-partial recording.

    Parameters
    ----------
    quick : bool
        Fewer repeats (3 instead of 9).

    Returns
    -------
    dict of str to float
        The figures listed in the module docstring.
    """
    from synth.analysis import (
        find_partials,
        fit_decay,
        integrated_loudness,
        schroeder_decay,
        true_peak,
    )

    repeats = 3 if quick else 9
    x = case()
    duration = x.size / FS
    found = find_partials(x, FS)
    t_partials = median_time(lambda: find_partials(x, FS), repeats)
    t_fft = median_time(lambda: np.fft.rfft(x), repeats * 3)
    few = max(2, repeats // 3)
    return {
        "analysis.find_partials_5s_ms": 1e3 * t_partials,
        "analysis.find_partials_realtime_ratio": t_partials / duration,
        "analysis.find_partials_vs_fft_ratio": t_partials / t_fft,
        "analysis.partials_found": float(len(found.partials)),
        "analysis.fit_decay_ms": 1e3 * median_time(lambda: fit_decay(x, FS, 600.0), few),
        "analysis.schroeder_ms": 1e3 * median_time(lambda: schroeder_decay(x, FS), few),
        "analysis.loudness_ms": 1e3 * median_time(lambda: integrated_loudness(x, FS), few),
        "analysis.true_peak_ms": 1e3 * median_time(lambda: true_peak(x, FS), few),
    }
