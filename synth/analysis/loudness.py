"""Loudness (ITU-R BS.1770-4), true peak (BS.1770-4 Annex 2) and level matching.

Integrated loudness is computed by ``pyloudnorm``, an open-source
implementation of BS.1770-4: K-weighting (a high shelf and a high-pass biquad),
400 ms blocks overlapping by 75%, channel powers summed with weight 1 for left,
right and centre, an absolute gate at -70 LUFS and a relative gate 10 LU below
the ungated level.  The standard's calibration point is a 997 Hz (or 1 kHz) sine
at 0 dBFS in one channel reading -3.01 LKFS; pyloudnorm 0.2.0 reads -3.05 at
48 kHz (physics note, section 12).

Loudness of a ringing note depends on how much of its tail the file holds (a
full-scale 440 Hz tone with tau = 1 s reads -10.39 / -11.60 / -11.95 LUFS over
2 / 5 / 10 s, physics note, section 12), so compare files of equal length with
aligned onsets; :func:`match_loudness` warns when the lengths differ.

True peak oversamples each channel by at least 4 (at least 192 kHz after
oversampling) with a linear-phase interpolation filter and takes the largest
magnitude, in dBTP.  It is a clip-headroom figure: a file with samples below 0
dBFS can still overshoot between samples when a converter reconstructs it.

.. note:: Hearing safety: a gain found by :func:`match_loudness` can push the
   quieter file towards full scale.  Check ``matched_true_peak_dbtp`` and keep
   playback peaks at or below -1 dBTP; start playback at a low volume.

References
----------
.. [1] ITU-R BS.1770-4 (10/2015), "Algorithms to measure audio programme loudness
   and true-peak audio level", International Telecommunication Union, Geneva
   (Annex 1: loudness, gating; Annex 2: true peak, oversampling >= 4x at 48 kHz).
.. [2] Steinmetz, C. J. and Reiss, J. D., "pyloudnorm: A simple yet flexible
   loudness meter in Python", 150th AES Convention, 2021 (the implementation
   used; from memory).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
import scipy.signal as ss

from synth.analysis.checks import _as_array, _check_rate, _report
from synth.errors import AudioError, ConfigError

BLOCK_S: Final[float] = 0.4
"""Gating block length of BS.1770-4, s; a file must be at least this long."""

TRUE_PEAK_MIN_RATE_HZ: Final[float] = 192_000.0
"""Oversampled rate that true peak reaches at least (4 x 48 kHz, BS.1770-4
Annex 2)."""

TRUE_PEAK_TAPS_PER_PHASE: Final[int] = 64
"""Length of each polyphase branch of the interpolation filter.  The Annex 2
example filter is shorter (12 per phase); this Kaiser-window design (beta 8)
keeps the pass-band error within 0.001 dB up to 0.45 x the original rate and
attenuates images by more than 80 dB from 0.55 x the rate (checked with
``scipy.signal.freqz``) [common practice, no source]."""


@dataclass(frozen=True)
class Loudness:
    """Integrated loudness of a file.

    Attributes
    ----------
    integrated_lufs : float
        BS.1770-4 integrated loudness, LUFS (``-inf`` for silence or when every
        block falls below the absolute gate).
    n_channels : int
        Channels measured (each weighted 1; surround weights are not applied).
    duration_s : float
        Length measured, s.
    sample_rate : float
        Hz.
    warnings : tuple of str
        Problems found in the signal.
    """

    integrated_lufs: float
    n_channels: int
    duration_s: float
    sample_rate: float
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class TruePeak:
    """True peak of a file (BS.1770-4 Annex 2).

    Attributes
    ----------
    true_peak_dbtp : float
        Largest magnitude of the oversampled signal, dBTP (dB re full scale).
    sample_peak_dbfs : float
        Largest sample magnitude, dBFS.
    oversampling : int
        Factor used.
    channel : int
        Channel (0-based) holding the true peak.
    warnings : tuple of str
        Problems found in the signal.
    """

    true_peak_dbtp: float
    sample_peak_dbfs: float
    oversampling: int
    channel: int
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class LevelMatch:
    """Gain that brings one file to another's integrated loudness.

    Attributes
    ----------
    gain_db : float
        Gain to apply to ``other``, dB (``reference_lufs - other_lufs``).
    reference_lufs, other_lufs : float
        Integrated loudness of each, LUFS.
    matched_true_peak_dbtp : float
        True peak of ``other`` after the gain, dBTP.
    warnings : tuple of str
        Length mismatch, clipping after the gain, problems in either signal.
    """

    gain_db: float
    reference_lufs: float
    other_lufs: float
    matched_true_peak_dbtp: float
    warnings: tuple[str, ...]


def _channels(signal, sample_rate, what):
    x = _as_array(signal)
    fs = _check_rate(sample_rate)
    rep = _report(x, fs, None, 1.0)
    x2 = x.reshape(x.shape[0], -1)
    warnings = [w for w in rep.warnings if "channels:" not in w and "mean of the channels" not in w]
    if x2.shape[1] > 5:
        raise AudioError(f"{x2.shape[1]} channels: {what} handles at most 5 (BS.1770-4 weights)")
    return x2, fs, rep, warnings


def integrated_loudness(signal, sample_rate: float) -> Loudness:
    """Measure integrated loudness per ITU-R BS.1770-4 (via pyloudnorm).

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Up to 5 channels, units of full scale.  Channels are measured
        separately and their powers summed, as the standard does (no mono
        downmix); each has weight 1.
    sample_rate : float
        Hz, > 0.

    Returns
    -------
    Loudness
        Integrated loudness in LUFS with warnings.

    Raises
    ------
    AudioError
        Unusable input, more than 5 channels, or shorter than one 0.4 s block.

    References
    ----------
    .. [1] ITU-R BS.1770-4 (10/2015), Annex 1, Eqs. 1-7.
    """
    x2, fs, rep, warnings = _channels(signal, sample_rate, "loudness")
    if rep.duration_s < BLOCK_S:
        raise AudioError(
            f"signal lasts {rep.duration_s:.3f} s; BS.1770-4 loudness needs at least one "
            f"{BLOCK_S} s block"
        )
    if rep.silent:
        return Loudness(-math.inf, x2.shape[1], rep.duration_s, fs, tuple(warnings))
    import pyloudnorm

    meter = pyloudnorm.Meter(fs, block_size=BLOCK_S)
    data = x2[:, 0] if x2.shape[1] == 1 else x2
    with np.errstate(divide="ignore", invalid="ignore"):
        lufs = float(meter.integrated_loudness(data))
    if not math.isfinite(lufs):
        warnings.append("every 400 ms block lies below the -70 LUFS absolute gate: "
                        "loudness is -inf")
        lufs = -math.inf
    return Loudness(lufs, x2.shape[1], rep.duration_s, fs, tuple(warnings))


def _oversampling(fs: float, oversampling: int | None) -> int:
    need = max(4, math.ceil(TRUE_PEAK_MIN_RATE_HZ / fs - 1e-9))
    if oversampling is None:
        return need
    if not (isinstance(oversampling, int) and oversampling >= 4):
        raise ConfigError(f"oversampling = {oversampling!r}: must be an integer >= 4 "
                          "(BS.1770-4 Annex 2)")
    return oversampling


def _interpolator(factor: int) -> np.ndarray:
    ntaps = TRUE_PEAK_TAPS_PER_PHASE * factor + 1
    # Cut-off at the original Nyquist frequency, i.e. 1/factor of the new one.
    h = ss.firwin(ntaps, 1.0 / factor, window=("kaiser", 8.0))
    return h * factor


def true_peak(signal, sample_rate: float, *, oversampling: int | None = None) -> TruePeak:
    """Measure the true peak level per ITU-R BS.1770-4 Annex 2, in dBTP.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Units of full scale.
    sample_rate : float
        Hz, > 0.
    oversampling : int, optional
        Factor, >= 4.  Default: the smallest >= 4 that reaches 192 kHz.

    Returns
    -------
    TruePeak
        True peak, sample peak, factor, channel, warnings.

    Raises
    ------
    AudioError
        Unusable input.
    ConfigError
        ``oversampling`` below 4.

    Notes
    -----
    Each channel is upsampled by zero-stuffing and a Kaiser-window
    (beta 8) linear-phase low-pass cut at the original Nyquist frequency
    (``scipy.signal.upfirdn``); the peak is the largest magnitude of the result.
    The signal is treated as silent before and after the file, so a file that
    starts or ends on a step shows the overshoot a converter would produce.

    References
    ----------
    .. [1] ITU-R BS.1770-4 (10/2015), Annex 2.
    """
    x2, fs, rep, warnings = _channels(signal, sample_rate, "true peak")
    factor = _oversampling(fs, oversampling)
    h = _interpolator(factor)
    best, best_ch = 0.0, 0
    for ch in range(x2.shape[1]):
        up = ss.upfirdn(h, x2[:, ch], up=factor)
        peak = float(np.max(np.abs(up)))
        peak = max(peak, float(np.max(np.abs(x2[:, ch]))))
        if peak > best:
            best, best_ch = peak, ch
    tp = 20 * math.log10(best) if best > 0 else -math.inf
    if tp > 0:
        warnings.append(f"true peak {tp:+.2f} dBTP is above full scale: it clips on playback "
                        "or conversion; lower the level by at least that much")
    return TruePeak(tp, rep.peak_dbfs, factor, best_ch, tuple(warnings))


def match_loudness(reference, other, sample_rate: float,
                   other_sample_rate: float | None = None) -> LevelMatch:
    """Gain in dB that brings ``other`` to the integrated loudness of ``reference``.

    Parameters
    ----------
    reference : array_like, shape (n_samples,) or (n_samples, n_channels)
        File A, units of full scale.
    other : array_like, shape (m_samples,) or (m_samples, n_channels)
        File B, units of full scale.
    sample_rate : float
        Rate of ``reference`` (and of ``other`` unless given), Hz.
    other_sample_rate : float, optional
        Rate of ``other``, Hz.

    Returns
    -------
    LevelMatch
        ``gain_db`` to apply to ``other``; both loudnesses; the true peak of
        ``other`` after the gain; warnings (different lengths, clipping after
        the gain, either file silent).

    Raises
    ------
    AudioError
        Either file unusable or shorter than 0.4 s.

    Notes
    -----
    Gating makes BS.1770 loudness scale exactly with gain as long as no block
    crosses the -70 LUFS absolute gate, so one pass suffices; the result is
    checked by measuring again, and a residual above 0.01 LU is reported.
    Match to within 0.1-0.2 LU before preference tests (physics note,
    section 12).
    """
    rate_b = sample_rate if other_sample_rate is None else other_sample_rate
    la = integrated_loudness(reference, sample_rate)
    lb = integrated_loudness(other, rate_b)
    warnings = [f"reference: {w}" for w in la.warnings] + [f"other: {w}" for w in lb.warnings]
    if not (math.isfinite(la.integrated_lufs) and math.isfinite(lb.integrated_lufs)):
        raise AudioError(
            f"cannot match loudness: reference reads {la.integrated_lufs} LUFS, other reads "
            f"{lb.integrated_lufs} LUFS (silent or below the -70 LUFS gate)"
        )
    gain = la.integrated_lufs - lb.integrated_lufs
    if abs(la.duration_s - lb.duration_s) > 0.01 * max(la.duration_s, lb.duration_s):
        warnings.append(
            f"lengths differ ({la.duration_s:.2f} s vs {lb.duration_s:.2f} s): the integrated "
            "loudness of a ringing note depends on how much tail is included; trim both to "
            "the same length from aligned onsets"
        )
    scaled = np.asarray(_as_array(other)) * 10 ** (gain / 20)
    check = integrated_loudness(scaled, rate_b).integrated_lufs
    if abs(check - la.integrated_lufs) > 0.01:
        warnings.append(
            f"after the gain the other file reads {check:.3f} LUFS against "
            f"{la.integrated_lufs:.3f} (gating moved); apply the gain and match again"
        )
    tp = true_peak(scaled, rate_b).true_peak_dbtp
    if tp > -1.0:
        warnings.append(
            f"after {gain:+.2f} dB the other file peaks at {tp:+.2f} dBTP: above the -1 dBTP "
            "ceiling (it clips at 0); lower both files instead of raising one. Start "
            "playback at a low volume"
        )
    return LevelMatch(gain, la.integrated_lufs, lb.integrated_lufs, tp, tuple(warnings))
