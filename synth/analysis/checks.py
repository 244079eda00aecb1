"""Checks that catch recordings which would otherwise give misleading numbers.

Every analysis in :mod:`synth.analysis` starts here.  Problems that make a result
meaningless (no samples, NaN, a sample rate of zero, digital silence, a file too
short for the analysis, a band the sample rate cannot carry) raise
:class:`~synth.errors.AudioError` with one line that says what is wrong and what
would work.  Problems that only make a result less trustworthy (clipping, a DC
offset, a very low level, stereo folded to mono, a band cut at 0.45 times the
sample rate) come back as plain-text warnings inside the result, so that no
number leaves this package without the caveat that belongs to it.

Channel policy
--------------
Arrays are ``(n_samples,)`` for mono or ``(n_samples, n_channels)`` as
``soundfile`` returns them.  Partial, decay and onset analysis work on the mean of
the channels (a struck bar is one source, so the channels carry the same partials)
and say so in a warning; when the mean is much weaker than the channels (a
polarity swap or a spaced pair cancelling) a second warning says that the mean is
not representative.  Loudness keeps the channels apart, as ITU-R BS.1770-4
requires.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np

from synth.errors import AudioError, ConfigError

SILENCE_PEAK: Final[float] = 1e-7
"""Peak magnitude (-140 dB re full scale) at or below which a signal counts as
silent.  Below the least significant bit of 24-bit audio (about -144.5 dBFS for a
peak, but dither and converter noise sit well above it) [common practice, no
source]."""

CLIP_LEVEL: Final[float] = 0.999
"""Fraction of full scale at or above which a sample counts as clipped (the top
0.01 dB; a limiter set to -0.1 dB stays below it) [common practice, no source]."""

CLIP_MIN_RUN: Final[int] = 3
"""Consecutive samples at or above :data:`CLIP_LEVEL` that make a clipping run.  A
band-limited signal can touch full scale in one or two samples; three in a row is
the usual sign of a flattened top [common practice, no source]."""

FLAT_TOP_MIN_RUN: Final[int] = 8
"""Consecutive samples exactly at the signal's own peak (when that peak is below
full scale) that flag a recording clipped and then scaled down [common practice,
no source]."""

BAND_LIMIT_FRACTION: Final[float] = 0.45
"""Highest usable frequency as a fraction of the sample rate: converters roll off
between 0.45 and 0.5 times the rate (a 48 kHz converter is flat to about 21.6 kHz)
[common practice, no source]."""

MAX_CHANNELS: Final[int] = 16
"""More columns than this are taken as a channels-first array by mistake."""


@dataclass(frozen=True)
class SignalReport:
    """What :func:`check_signal` found in an audio array.

    Attributes
    ----------
    sample_rate : float
        Samples per second, Hz.
    n_samples : int
        Frames (samples per channel).
    n_channels : int
        1 for a 1-D array, else the number of columns.
    duration_s : float
        ``n_samples / sample_rate``, s.
    peak : float
        Largest absolute sample over all channels, in units of full scale.
    peak_dbfs : float
        ``20 log10(peak)``; ``-inf`` for digital silence.
    rms_dbfs : float
        RMS over all samples of all channels, dB re full scale (a full-scale
        square wave reads 0 dB, a full-scale sine -3.01 dB).
    dc_offset : float
        Mean of the channel with the largest absolute mean, units of full scale.
    clipped_runs : int
        Runs of at least :data:`CLIP_MIN_RUN` consecutive samples at or beyond
        ``+-CLIP_LEVEL`` of full scale (one polarity per run); when there are
        none, runs of at least :data:`FLAT_TOP_MIN_RUN` samples exactly at the
        signal's own positive or negative peak.
    clipped_samples : int
        Samples inside those runs.
    silent : bool
        True when ``peak <= SILENCE_PEAK``.
    warnings : tuple of str
        One line per problem found; empty when the signal looks sound.
    """

    sample_rate: float
    n_samples: int
    n_channels: int
    duration_s: float
    peak: float
    peak_dbfs: float
    rms_dbfs: float
    dc_offset: float
    clipped_runs: int
    clipped_samples: int
    silent: bool
    warnings: tuple[str, ...]


def _as_array(signal) -> np.ndarray:
    try:
        x = np.asarray(signal)
    except Exception as exc:  # noqa: BLE001 - any conversion failure is unusable input
        raise AudioError(f"signal cannot be read as a numeric array ({exc})") from None
    if x.dtype == object or not (np.issubdtype(x.dtype, np.number) or x.dtype == bool):
        raise AudioError(f"signal has dtype {x.dtype}; expected real numbers (float or int PCM)")
    if np.iscomplexobj(x):
        raise AudioError("signal is complex; expected real audio samples")
    if x.ndim == 0 or x.size == 0:
        raise AudioError("signal is empty; expected at least one sample")
    if x.ndim > 2:
        raise AudioError(
            f"signal has shape {x.shape}; expected (n_samples,) or (n_samples, n_channels)"
        )
    if x.ndim == 2 and x.shape[1] > MAX_CHANNELS:
        hint = " (transpose it with .T)" if x.shape[0] <= MAX_CHANNELS else ""
        raise AudioError(
            f"signal has shape {x.shape}: {x.shape[1]} channels; expected "
            f"(n_samples, n_channels) with at most {MAX_CHANNELS} channels{hint}"
        )
    if np.issubdtype(x.dtype, np.integer):
        # Integer PCM: full scale is the type's range.
        info = np.iinfo(x.dtype)
        x = x.astype(np.float64) / float(max(abs(info.min), info.max))
    else:
        x = x.astype(np.float64, copy=False)
    if not np.all(np.isfinite(x)):
        n_bad = int(np.count_nonzero(~np.isfinite(x)))
        raise AudioError(f"signal holds {n_bad} NaN or infinite samples; expected finite values")
    return x


def _check_rate(sample_rate) -> float:
    try:
        fs = float(sample_rate)
    except (TypeError, ValueError):
        raise AudioError(f"sample_rate = {sample_rate!r}: expected a number in Hz") from None
    if not math.isfinite(fs) or fs <= 0:
        raise AudioError(f"sample_rate = {sample_rate!r}: must be a finite number > 0 Hz")
    return fs


def _runs(mask: np.ndarray, min_run: int) -> tuple[int, int]:
    """Count runs of True of length >= min_run in a 1-D mask; return (runs, samples)."""
    if not mask.any():
        return 0, 0
    padded = np.concatenate(([False], mask, [False]))
    edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
    lengths = edges[1::2] - edges[0::2]
    long = lengths[lengths >= min_run]
    return int(long.size), int(long.sum())


def _db(value: float) -> float:
    return 20.0 * math.log10(value) if value > 0 else -math.inf


def check_signal(
    signal,
    sample_rate: float,
    *,
    fmax_hz: float | None = None,
    full_scale: float = 1.0,
) -> SignalReport:
    """Inspect an audio array for problems that would mislead an analysis.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Samples in units of full scale (float) or integer PCM (scaled by the
        type's range).
    sample_rate : float
        Hz, > 0.
    fmax_hz : float, optional
        Highest frequency the caller wants to analyse; a warning is given when
        it lies above ``BAND_LIMIT_FRACTION * sample_rate``.
    full_scale : float, default 1.0
        Magnitude of digital full scale in the units of ``signal`` (float data).

    Returns
    -------
    SignalReport
        Levels, offsets, clipping counts and warnings.

    Raises
    ------
    AudioError
        For input no analysis can use: not numeric, empty, complex, NaN or
        infinite samples, more than :data:`MAX_CHANNELS` columns, a sample rate
        that is not a positive number.

    Notes
    -----
    Digital silence is reported (``silent``) rather than raised here; the
    analyses that cannot work on it raise.
    """
    return _report(_as_array(signal), _check_rate(sample_rate), fmax_hz, full_scale)


def _report(x: np.ndarray, fs: float, fmax_hz: float | None, full_scale: float) -> SignalReport:
    if not (full_scale > 0 and math.isfinite(full_scale)):
        raise ConfigError(f"full_scale = {full_scale!r}: must be a finite number > 0")
    x2 = x.reshape(x.shape[0], -1)
    if full_scale != 1.0:  # dividing by 1 changes nothing: spare the copy of a long file
        x2 = x2 / full_scale
    n, n_ch = x2.shape
    warnings: list[str] = []
    peak = max(float(x2.max()), -float(x2.min()))  # finite samples (checked): max |x|
    rms = float(np.sqrt(np.mean(x2 * x2)))
    silent = peak <= SILENCE_PEAK
    if silent:
        warnings.append(
            f"signal is silent (peak {_db(peak):.0f} dBFS): nothing to analyse; "
            "check the input channel and the recording gain"
        )
    elif peak < 10 ** (-60 / 20):
        warnings.append(
            f"very low level (peak {_db(peak):.1f} dBFS): noise and quantisation may "
            "dominate; record with more gain"
        )
    means = x2.mean(axis=0)
    k_dc = int(np.argmax(np.abs(means)))
    dc = float(means[k_dc])
    if not silent and (abs(dc) >= 1e-3 or (rms > 0 and abs(dc) >= 0.1 * rms)):
        where = f" in channel {k_dc + 1}" if n_ch > 1 else ""
        warnings.append(
            f"DC offset {dc:+.4g} of full scale{where} ({_db(abs(dc)):.1f} dBFS): removed "
            "before partial, decay and onset analysis; a fault of the recorder or "
            "interface (a high-pass filter at the source cures it)"
        )
    # Clipping flattens one polarity at a time: count runs of samples stuck at
    # +level or at -level (a sine at a quarter of the rate alternates ++--).
    runs = samples = 0
    for c in range(n_ch):
        col = x2[:, c]
        for mask in (col >= CLIP_LEVEL, col <= -CLIP_LEVEL):
            r, s = _runs(mask, CLIP_MIN_RUN)
            runs += r
            samples += s
    if runs:
        warnings.append(
            f"clipped: {runs} run(s) of >= {CLIP_MIN_RUN} samples at full scale "
            f"({samples} samples): partial levels, decays and loudness are wrong near "
            "the strike; record again with less gain"
        )
    elif not silent and peak >= 0.1:
        flat_runs = flat_samples = 0
        for c in range(n_ch):
            col = x2[:, c]
            level = peak * (1 - 1e-9)
            for mask in (col >= level, col <= -level):
                r, s = _runs(mask, FLAT_TOP_MIN_RUN)
                flat_runs += r
                flat_samples += s
        if flat_runs:
            runs, samples = flat_runs, flat_samples
            warnings.append(
                f"flat tops: {flat_runs} run(s) of >= {FLAT_TOP_MIN_RUN} samples exactly at "
                f"the peak {peak:.4g}: probably clipped, then scaled; treat levels and "
                "decays near the strike with suspicion"
            )
    if n_ch > 1:
        warnings.append(
            f"{n_ch} channels: partial, decay and onset analysis use the mean of the "
            "channels; loudness uses each channel (BS.1770-4)"
        )
        mix = x2.mean(axis=1)
        p_mix = float(np.mean(mix * mix))
        p_ch = float(np.mean(x2 * x2))
        if p_ch > 0 and p_mix < p_ch * 10 ** (-6 / 10):
            warnings.append(
                f"the mean of the channels is {10 * math.log10(max(p_mix, 1e-300) / p_ch):.1f} dB "
                "below the channels (opposite polarity or spaced microphones cancelling): "
                "analyse one channel instead"
            )
    if fmax_hz is not None and fmax_hz > BAND_LIMIT_FRACTION * fs:
        warnings.append(
            f"the requested band reaches {fmax_hz:g} Hz but a sample rate of {fs:g} Hz "
            f"carries only up to {BAND_LIMIT_FRACTION * fs:g} Hz "
            f"({BAND_LIMIT_FRACTION} x rate): partials above that are not analysed; "
            f"record at >= {fmax_hz / BAND_LIMIT_FRACTION:.0f} Hz to reach them"
        )
    return SignalReport(
        sample_rate=fs,
        n_samples=n,
        n_channels=n_ch,
        duration_s=n / fs,
        peak=peak,
        peak_dbfs=_db(peak),
        rms_dbfs=_db(rms),
        dc_offset=dc,
        clipped_runs=runs,
        clipped_samples=samples,
        silent=silent,
        warnings=tuple(warnings),
    )


@dataclass(frozen=True)
class Prepared:
    """A checked mono signal ready for analysis (returned by :func:`prepare`).

    Attributes
    ----------
    samples : numpy.ndarray, shape (n_samples,)
        Mean of the channels, float64, DC removed, units of full scale.
    sample_rate : float
        Hz.
    fmin_hz, fmax_hz : float
        Band to analyse after clamping ``fmax_hz`` to the usable band.
    report : SignalReport
        The full check.
    warnings : tuple of str
        The report's warnings plus any added while preparing.
    """

    samples: np.ndarray
    sample_rate: float
    fmin_hz: float
    fmax_hz: float
    report: SignalReport
    warnings: tuple[str, ...]


def prepare(
    signal,
    sample_rate: float,
    *,
    fmin_hz: float = 0.0,
    fmax_hz: float | None = None,
    min_duration_s: float = 0.0,
    what: str = "this analysis",
) -> Prepared:
    """Check a signal and turn it into the mono float64 array the analyses use.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Audio samples (see :func:`check_signal`).
    sample_rate : float
        Hz, > 0.
    fmin_hz : float, default 0.0
        Lowest frequency of interest, Hz, >= 0.
    fmax_hz : float, optional
        Highest frequency of interest, Hz; clamped to
        ``BAND_LIMIT_FRACTION * sample_rate`` with a warning.  Default: that limit.
    min_duration_s : float, default 0.0
        Shortest signal the caller can work with, s.
    what : str
        Name of the analysis, used in error messages.

    Returns
    -------
    Prepared
        Mono samples (channel mean, DC removed) with band and warnings.

    Raises
    ------
    AudioError
        Anything :func:`check_signal` raises, plus: digital silence, a signal
        shorter than ``min_duration_s``, or a band that lies entirely above the
        usable band of the sample rate.
    """
    x = _as_array(signal)
    report = _report(x, _check_rate(sample_rate), fmax_hz, 1.0)
    fs = report.sample_rate
    if report.silent:
        raise AudioError(
            f"signal is silent (peak {report.peak_dbfs:.0f} dBFS): {what} needs sound; "
            "check the input channel and the recording gain"
        )
    if report.duration_s < min_duration_s:
        raise AudioError(
            f"signal lasts {report.duration_s:.4g} s ({report.n_samples} samples at "
            f"{fs:g} Hz); {what} needs at least {min_duration_s:g} s"
        )
    limit = BAND_LIMIT_FRACTION * fs
    f_hi = limit if fmax_hz is None else min(float(fmax_hz), limit)
    if fmin_hz < 0 or not math.isfinite(fmin_hz):
        raise ConfigError(f"fmin_hz = {fmin_hz!r}: must be a finite number >= 0 Hz")
    if fmax_hz is not None and not (fmax_hz > fmin_hz):
        raise ConfigError(f"fmax_hz = {fmax_hz!r}: must be above fmin_hz = {fmin_hz!r}")
    if fmin_hz >= f_hi:
        raise AudioError(
            f"the band from {fmin_hz:g} Hz lies above what a sample rate of {fs:g} Hz carries "
            f"({limit:g} Hz); record at >= {fmin_hz / BAND_LIMIT_FRACTION:.0f} Hz"
        )
    mono = x if x.ndim == 1 else x.mean(axis=1)
    mono = mono - mono.mean()
    return Prepared(
        samples=np.ascontiguousarray(mono, dtype=np.float64),
        sample_rate=fs,
        fmin_hz=float(fmin_hz),
        fmax_hz=float(f_hi),
        report=report,
        warnings=report.warnings,
    )
