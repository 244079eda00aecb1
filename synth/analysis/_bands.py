"""Shared signal-processing steps: long spectra, noise floor, band extraction.

Private to :mod:`synth.analysis`; the public functions document the behaviour.

Band extraction is heterodyne plus decimation: the real signal is filtered by a
linear-phase low-pass FIR shifted to the band centre (a complex band-pass, so the
output is analytic) and only every D-th output is computed.  Delay compensation
makes it zero-phase.  An exponentially damped sinusoid keeps its frequency and
decay rate through any linear time-invariant filter once the filter's start-up
transient (its length) has passed; only amplitude and phase change, by the
filter's response evaluated at the complex pole, which is computed and divided
out.  The magnitude of the output is the Hilbert envelope of the band-passed
signal.

References
----------
.. [1] Crochiere, R. E. and Rabiner, L. R., *Multirate Digital Signal
   Processing*, Prentice-Hall, 1983, ISBN 0-13-605162-6 (polyphase decimation,
   complex band-pass by modulating a low-pass prototype).
.. [2] Kaiser, J. F., "Nonrecursive digital filter design using the I0-sinh
   window function", Proc. IEEE Int. Symp. Circuits and Systems, 1974, 20-23
   (window length for a given attenuation and transition width, as implemented
   by ``scipy.signal.kaiserord``).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.signal as ss
from scipy import ndimage

LN2 = math.log(2.0)


def next_pow2(n: int) -> int:
    """Smallest power of two >= n."""
    return 1 << max(0, int(n - 1).bit_length())


@dataclass(frozen=True)
class Spectrum:
    """Power spectra of one analysis segment.

    ``power`` uses the decay window (flat start, cos^2 fall to zero at the end),
    which keeps fast-decaying partials visible; ``floor`` is the noise power per
    bin from a Hann-window spectrum (block medians divided by ln 2, the median of
    an exponential distribution, then the lowest of three neighbouring blocks);
    ``local`` is the same block statistic of ``power`` itself (lowest of seven
    neighbouring blocks, about +-60 Hz), which includes the skirts that the
    abrupt start of the decay window gives strong partials.  All are scaled so that white noise of
    variance sigma^2 reads sigma^2.
    """

    freqs_hz: np.ndarray
    power: np.ndarray
    floor: np.ndarray
    local: np.ndarray
    bin_hz: float


def _power(seg: np.ndarray, w: np.ndarray, nfft: int) -> np.ndarray:
    """``|rfft(seg w)|^2 / sum(w^2)``, freeing each temporary as soon as it is used."""
    spec = np.fft.rfft(seg * w, nfft)
    power = np.abs(spec)
    del spec
    power **= 2
    power /= np.sum(w**2)
    return power


def segment_spectrum(seg: np.ndarray, fs: float, *, block_hz: float = 20.0) -> Spectrum:
    """Decay-window power spectrum and Hann-window noise floor of a segment."""
    n = seg.size
    nfft = next_pow2(2 * n) if n <= (1 << 21) else next_pow2(n)
    # one window and one spectrum at a time (the same numbers, less memory for long segments)
    k = np.arange(n, dtype=np.float64)
    w = 0.5 * (1.0 + np.cos(np.pi * k / n))                 # decay window
    p = _power(seg, w, nfft)
    w = 0.5 * (1.0 - np.cos(2.0 * np.pi * (k + 0.5) / n))   # Hann window
    del k
    q = _power(seg, w, nfft)
    del w
    bin_hz = fs / nfft
    freqs = np.arange(p.size) * bin_hz
    block = max(16, int(round(block_hz / bin_hz)))
    nb = q.size // block
    centres = (np.arange(nb) + 0.5) * block * bin_hz

    def _floor(v, reach):
        med = np.median(v[: nb * block].reshape(nb, block), axis=1) / LN2
        if reach:
            # Lowest block within +-reach blocks: a broad line fills its own block.
            med = ndimage.minimum_filter1d(med, 2 * reach + 1, mode="nearest")
        return np.exp(np.interp(freqs, centres, np.log(np.maximum(med, 1e-300))))

    return Spectrum(freqs_hz=freqs, power=p, floor=_floor(q, 1), local=_floor(p, 3),
                    bin_hz=bin_hz)


def lowpass_taps(fs: float, pass_hz: float, stop_hz: float, atten_db: float = 80.0) -> np.ndarray:
    """Kaiser-window linear-phase low-pass, odd length, unit gain at 0 Hz [2]."""
    width = (stop_hz - pass_hz) / (0.5 * fs)
    ntaps, beta = ss.kaiserord(atten_db, width)
    ntaps = max(3, ntaps | 1)
    h = ss.firwin(ntaps, 0.5 * (pass_hz + stop_hz), window=("kaiser", beta), fs=fs)
    return h / h.sum()


def taps_for(fs: float, pass_hz: float, stop_hz: float, atten_db: float = 80.0) -> int:
    """Length :func:`lowpass_taps` would return, without designing the filter."""
    width = (stop_hz - pass_hz) / (0.5 * fs)
    ntaps, _ = ss.kaiserord(atten_db, width)
    return max(3, ntaps | 1)


@dataclass(frozen=True)
class Band:
    """Complex baseband of one band, valid samples only.

    ``samples[j]`` equals the analytic band-passed signal at absolute time
    ``times_s[j]`` multiplied by ``exp(-i 2 pi center_hz times_s[j])`` and by the
    filter response at the component's complex frequency (about 1 in the pass
    band); see :func:`filter_gain`.
    """

    samples: np.ndarray
    times_s: np.ndarray
    rate_hz: float
    center_hz: float
    pass_hz: float
    stop_hz: float
    taps: np.ndarray
    noise_gain: float


def band_signal(
    x: np.ndarray,
    fs: float,
    center_hz: float,
    pass_hz: float,
    stop_hz: float,
    i0: int,
    i1: int,
    *,
    atten_db: float = 80.0,
) -> Band:
    """Heterodyne, low-pass and decimate ``x[i0:i1]`` around ``center_hz``.

    Only outputs whose filter span lies inside ``x[i0:i1]`` are kept, so no
    start-up or run-out transient reaches the caller.
    """
    h = lowpass_taps(fs, pass_hz, stop_hz, atten_db)
    ntaps = h.size
    m0 = (ntaps - 1) // 2
    decim = max(1, int(fs // (2.5 * stop_hz)))
    seg = x[i0:i1]
    m = np.arange(ntaps)
    om = 2.0 * np.pi * center_hz / fs
    hr = h * np.cos(om * m)
    hi = h * np.sin(om * m)
    j_first = -(-(ntaps - 1) // decim)
    j_last = (seg.size - 1) // decim
    if j_last < j_first:
        return Band(np.zeros(0, complex), np.zeros(0), fs / decim, center_hz, pass_hz,
                    stop_hz, h, float(np.sum(h * h)))
    br = ss.upfirdn(hr, seg, 1, decim)[j_first : j_last + 1]
    bi = ss.upfirdn(hi, seg, 1, decim)[j_first : j_last + 1]
    j = np.arange(j_first, j_last + 1)
    n_centre = j * decim - m0
    times = (i0 + n_centre) / fs
    # y_j = b_j exp(-i om m0) exp(-i 2 pi f_c t_j): the heterodyne referred to t_j.
    phase = -(om * m0) - 2.0 * np.pi * center_hz * times
    y = (br + 1j * bi) * np.exp(1j * phase)
    return Band(
        samples=y,
        times_s=times,
        rate_hz=fs / decim,
        center_hz=center_hz,
        pass_hz=pass_hz,
        stop_hz=stop_hz,
        taps=h,
        noise_gain=float(np.sum(h * h)),
    )


def filter_gain(taps: np.ndarray, fs: float, u: complex) -> complex:
    """Response of the centred FIR to ``exp(u t)``: sum_m h[m] exp(-u (m - m0)/fs).

    ``u = -decay + i 2 pi (f - f_c)`` for a component of frequency ``f`` and
    amplitude decay rate ``decay`` in a band centred on ``f_c``.
    """
    m0 = (taps.size - 1) // 2
    k = (np.arange(taps.size) - m0) / fs
    return complex(np.sum(taps * np.exp(-u * k)))


def moving_average(v: np.ndarray, n: int) -> np.ndarray:
    """Centred moving average of length n (odd), edges averaged over what exists."""
    n = max(1, int(n) | 1)
    if n == 1 or v.size < 2:
        return v.astype(float, copy=True)
    c = np.cumsum(np.concatenate(([0.0], v)))
    half = n // 2
    idx = np.arange(v.size)
    lo = np.clip(idx - half, 0, v.size)
    hi = np.clip(idx + half + 1, 0, v.size)
    return (c[hi] - c[lo]) / (hi - lo)
