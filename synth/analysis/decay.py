"""Decay of one partial: log-envelope line fit and Schroeder backward integration.

With amplitude ``A(t) = A0 exp(-t / tau)`` the natural log of the envelope is a
line of slope ``s = -1 / tau``; the quality factor is ``Q = pi f / |s|`` and the
60 dB decay time ``T60 = ln(1000) / |s|`` (physics note, section 6).

:func:`fit_decay` band-passes the signal around the partial (zero phase),
takes its Hilbert envelope or the STFT peak track, skips the attack and fits
that line by least squares over the stretch at least ``floor_margin_db`` above
the noise floor.  A second fit with a quadratic term measures curvature: a
partial that beats against a near neighbour (its split twin, a torsional mode)
or decays with two slopes does not follow one line, and the result says so
instead of forcing one slope.

:func:`schroeder_decay` integrates the squared band signal backwards (Schroeder
1965) and reads EDT, T20 and T30 from the decay curve as ISO 3382-1 does for
rooms, each extrapolated to 60 dB, with the noise floor handled by truncation at
the point where the decay meets it plus a correction for the energy cut off
(after Lundeby et al. 1995), by subtraction, or not at all.

References
----------
.. [1] Schroeder, M. R., "New method of measuring reverberation time", J. Acoust.
   Soc. Am. 37(3), 409-412, 1965, doi:10.1121/1.1909343.
.. [2] ISO 3382-1:2009, Acoustics -- Measurement of room acoustic parameters --
   Part 1: Performance spaces (EDT from 0 to -10 dB, T20 from -5 to -25 dB, T30
   from -5 to -35 dB, each by a least-squares line, extrapolated to 60 dB;
   bottom of each range at least 10 dB above the noise, as the physics note,
   section 11, states).
.. [3] Lundeby, A., Vigran, T. E., Bietz, H. and Vorlander, M., "Uncertainties of
   measurements in room acoustics", Acustica 81, 344-355, 1995 (truncation at
   the crossing of decay and noise, compensation for the lost tail; volume and
   pages from memory).
.. [4] Fletcher, N. H. and Rossing, T. D., *The Physics of Musical Instruments*,
   2nd ed., Springer, 1998, ISBN 0-387-98374-0 (Q, decay time and bandwidth of
   a damped oscillator, ch. 1).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Final

import numpy as np

from synth.analysis._bands import band_signal, moving_average, segment_spectrum, taps_for
from synth.analysis.checks import prepare
from synth.analysis.onset import strike_in
from synth.constants import LN_1000
from synth.errors import AudioError, ConfigError

NP_TO_DB: Final[float] = 20.0 / math.log(10.0)
"""dB per neper of amplitude, 8.685890."""

MODEL_SPREAD_NP: Final[float] = 0.1 / NP_TO_DB
"""Spread (0.1 dB, in nepers) allowed for the envelope's departure from a line
that noise does not explain; it caps the weight of the cleanest samples in the
weighted fit [common practice, no source]."""

BEATING_RESIDUAL_DB: Final[float] = 1.0
"""RMS wobble of the envelope around the fitted line, beyond what the noise
explains, above which a decay is flagged as beating, dB [common practice, no
source: a 1 dB ripple is a beat depth of about 12%]."""

BEATING_SAG_DB: Final[float] = 1.5
"""Midpoint departure of a quadratic fit from the straight chord above which a
decay is flagged as curved (two slopes or slow beating), dB [common practice, no
source]."""


@dataclass(frozen=True)
class DecayFit:
    """A straight-line fit of the log envelope of one partial.

    Attributes
    ----------
    frequency_hz : float
        Partial frequency used for Q, Hz.
    slope_per_s : float
        Slope of ln(amplitude), 1/s (negative while decaying).
    decay_per_s : float
        ``-slope_per_s``: amplitude decay rate, 1/s (1/tau).
    q : float
        ``pi f / |slope|``; ``inf`` when the envelope does not fall.
    t60_s : float
        ``ln(1000) / |slope|``, s; ``inf`` when the envelope does not fall.
    level_db : float
        Fitted envelope level at ``fit_start_s``, dB re an amplitude of 1.
    fit_start_s, fit_end_s : float
        Stretch used, s from the first sample.
    fit_range_db : float
        Fall of the fitted line over that stretch, dB.
    noise_floor_db : float
        Noise level of the envelope, dB re an amplitude of 1 (same scale as
        ``level_db``).
    residual_db : float
        RMS of the envelope (dB) around the line.
    excess_residual_db : float
        Part of ``residual_db`` that the noise does not explain, dB.
    curvature_db : float
        Midpoint sag of a quadratic fit below the chord of the stretch, dB;
        positive when the decay slows down (double slope), negative when it
        speeds up.
    beating : bool
        True when ``excess_residual_db > BEATING_RESIDUAL_DB`` or
        ``|curvature_db| > BEATING_SAG_DB``: one slope does not describe it.
    valid : bool
        False when the stretch is too short or covers too small a range; the
        numbers are then only indicative and a warning says why.
    warnings : tuple of str
        Problems worth knowing.
    """

    frequency_hz: float
    slope_per_s: float
    decay_per_s: float
    q: float
    t60_s: float
    level_db: float
    fit_start_s: float
    fit_end_s: float
    fit_range_db: float
    noise_floor_db: float
    residual_db: float
    excess_residual_db: float
    curvature_db: float
    beating: bool
    valid: bool
    warnings: tuple[str, ...]


def _db_amp(a: float) -> float:
    return 20.0 * math.log10(a) if a > 0 else -math.inf


def fit_envelope_decay(
    times_s,
    envelope,
    frequency_hz: float,
    *,
    noise_floor: float | None = None,
    floor_margin_db: float = 10.0,
    start_s: float | None = None,
    end_s: float | None = None,
    min_range_db: float = 5.0,
) -> DecayFit:
    """Fit ``ln A = c + s t`` to an amplitude envelope over its clean stretch.

    Parameters
    ----------
    times_s : array_like, shape (n,)
        Sample times, s, ascending.
    envelope : array_like, shape (n,)
        Amplitude envelope (>= 0), any linear unit.
    frequency_hz : float
        Frequency of the partial, Hz (> 0), for Q.
    noise_floor : float, optional
        RMS noise amplitude of the envelope, same unit.  Default: the median of
        the last 10% of the envelope, with a warning when the envelope still
        falls there (the floor is then overestimated and the stretch shortened).
    floor_margin_db : float, default 10.0
        The fit stops where the smoothed envelope last stands this far above the
        noise floor, dB (physics note, section 11).
    start_s, end_s : float, optional
        Limits of the stretch, s; default: the whole envelope.
    min_range_db : float, default 5.0
        Smallest fall of the fitted line that counts as a valid fit, dB.

    Returns
    -------
    DecayFit
        Slope, Q, T60, stretch, residual, curvature and the beating flag.

    Raises
    ------
    AudioError
        Fewer than 5 envelope samples in the stretch, or an envelope with
        negative, NaN or infinite values.
    ConfigError
        ``frequency_hz <= 0``.

    Notes
    -----
    Noise of RMS amplitude ``sigma`` spreads the log envelope of a decay of
    amplitude ``A`` by about ``sigma / (sqrt(2) A)`` nepers per sample (the
    radial component of the noise).  After a plain least-squares line, the fit is
    repeated with weights ``1 / (that^2 + (0.1 dB)^2)``, the minimum-variance
    weighting for independent errors of that size, so the noisy end of the
    stretch cannot pull the slope.  The same spread, removed in quadrature from
    the residual, separates beating from noise.

    References
    ----------
    .. [1] Fletcher, N. H. and Rossing, T. D., *The Physics of Musical
       Instruments*, 2nd ed., Springer, 1998, ch. 1 (Q = pi f tau).
    """
    t = np.asarray(times_s, dtype=float)
    env = np.asarray(envelope, dtype=float)
    if t.shape != env.shape or t.ndim != 1:
        raise AudioError(f"times_s {t.shape} and envelope {env.shape} must be 1-D and equal")
    if not (np.all(np.isfinite(env)) and np.all(env >= 0)):
        raise AudioError("envelope holds negative, NaN or infinite values")
    if not (frequency_hz > 0):
        raise ConfigError(f"frequency_hz = {frequency_hz!r}: must be > 0 Hz")
    warnings: list[str] = []
    sel = np.ones(t.size, bool)
    if start_s is not None:
        sel &= t >= start_s
    if end_s is not None:
        sel &= t <= end_s
    t, env = t[sel], env[sel]
    if t.size < 5:
        raise AudioError(f"only {t.size} envelope samples in the stretch; a decay fit needs 5")
    tiny = max(float(env.max()) * 1e-15, 1e-300)
    env_db = 20.0 * np.log10(np.maximum(env, tiny))
    if noise_floor is None:
        tail = env[int(0.9 * env.size) :]
        noise = float(np.median(tail))
        tail_t = t[int(0.9 * env.size) :]
        if tail.size >= 5:
            s_tail = np.polyfit(tail_t - tail_t[0], 20 * np.log10(np.maximum(tail, tiny)), 1)[0]
            fall = -s_tail * (tail_t[-1] - tail_t[0])
            if fall > 3.0:
                warnings.append(
                    f"the envelope still falls {fall:.1f} dB over its last 10%: the noise "
                    "floor taken there is overestimated and the fit stretch shortened"
                )
    else:
        noise = float(noise_floor)
    floor_db = _db_amp(noise)
    smooth = moving_average(env_db, max(5, env.size // 50))
    above = np.flatnonzero(smooth >= floor_db + floor_margin_db)
    if above.size == 0:
        warnings.append(
            f"the envelope never stands {floor_margin_db:g} dB above the noise floor "
            f"({floor_db:.1f} dB): no clean stretch; the fit uses everything and is unreliable"
        )
        last = t.size - 1
    else:
        last = int(above[-1])
    first = 0
    n_fit = last - first + 1
    if n_fit < 5:
        last = min(t.size - 1, first + 4)
        n_fit = last - first + 1
    tt = t[first : last + 1]
    yy = np.log(np.maximum(env[first : last + 1], tiny))
    t0 = tt[0]
    tc = tt - t0
    slope, intercept = np.polyfit(tc, yy, 1)
    line = intercept + slope * tc
    # What noise alone gives per sample: radial noise sigma/sqrt(2) against A(t),
    # in nepers.  Weighted least squares with 1/(that^2 + model^2) keeps the
    # noisy end from pulling the slope while a clean decay stays a plain fit.
    amp = np.exp(line)
    sig_np = noise / (math.sqrt(2.0) * np.maximum(amp, tiny)) if noise > 0 else 0 * amp
    sig_np = np.minimum(sig_np, 1.0)
    if noise > 0:
        weights = 1.0 / np.sqrt(sig_np**2 + MODEL_SPREAD_NP**2)  # polyfit squares them
        slope, intercept = np.polyfit(tc, yy, 1, w=weights)
        line = intercept + slope * tc
        amp = np.exp(line)
        sig_np = np.minimum(noise / (math.sqrt(2.0) * np.maximum(amp, tiny)), 1.0)
    else:
        weights = np.ones_like(tc)
    resid_db = (yy - line) * NP_TO_DB
    residual_db = float(np.sqrt(np.mean(resid_db**2)))
    expected_db = float(np.sqrt(np.mean((sig_np * NP_TO_DB) ** 2)))
    excess = math.sqrt(max(0.0, residual_db**2 - expected_db**2))
    span = float(tc[-1]) if tc.size else 0.0
    if tc.size >= 7:
        c2 = np.polyfit(tc, yy, 2, w=weights)[0]
        curvature_db = float(c2 * span**2 / 4.0 * NP_TO_DB)
    else:
        curvature_db = 0.0
    fit_range_db = float(-slope * span * NP_TO_DB)
    beating = excess > BEATING_RESIDUAL_DB or abs(curvature_db) > BEATING_SAG_DB
    valid = above.size > 0 and n_fit >= 5 and fit_range_db >= min_range_db
    if above.size > 0 and fit_range_db < min_range_db:
        warnings.append(
            f"the fitted line falls only {fit_range_db:.1f} dB over the clean stretch "
            f"(< {min_range_db:g} dB): the decay rate is poorly determined; use a longer "
            "recording"
        )
    if beating:
        warnings.append(
            f"the envelope does not follow one line (excess residual {excess:.1f} dB, "
            f"curvature {curvature_db:+.1f} dB): beating against a near partial or a "
            "double-slope decay; treat Q and T60 as an average"
        )
    decay = -float(slope)
    if decay > 0:
        q = math.pi * frequency_hz / decay
        t60 = LN_1000 / decay
    else:
        q = t60 = math.inf
        valid = False
        warnings.append("the envelope does not fall over the stretch: no decay measured")
    return DecayFit(
        frequency_hz=float(frequency_hz),
        slope_per_s=float(slope),
        decay_per_s=decay,
        q=q,
        t60_s=t60,
        level_db=float(intercept * NP_TO_DB),
        fit_start_s=float(tt[0]),
        fit_end_s=float(tt[-1]),
        fit_range_db=fit_range_db,
        noise_floor_db=floor_db,
        residual_db=residual_db,
        excess_residual_db=float(excess),
        curvature_db=curvature_db,
        beating=bool(beating),
        valid=bool(valid),
        warnings=tuple(warnings),
    )


def default_half_band_hz(frequency_hz: float) -> float:
    """Half-width of the default analysis band around a partial, Hz.

    5% of the frequency (about +-85 cents), at least 10 Hz and at most 200 Hz: wide
    enough for the line of a partial with Q >= 50 and for a partial detuned by
    tens of cents, narrow enough to keep the next partial of a tuned bar out
    [common practice, no source].
    """
    return float(min(200.0, max(10.0, 0.05 * frequency_hz)))


def _band_envelope(x, fs, f, half_hz, i0, i1):
    """Zero-phase analytic band around f: times, envelope, noise amplitude."""
    stop = half_hz
    pas = 0.5 * half_hz
    band = band_signal(x, fs, f, pas, stop, i0, i1)
    env = np.abs(band.samples)
    spec = segment_spectrum(x[i0:i1], fs)
    floor_power = float(np.interp(f, spec.freqs_hz, spec.floor))
    # Envelope of A cos(...) is A/2 in the baseband; double to read A.
    noise = 2.0 * math.sqrt(floor_power * band.noise_gain)
    return band.times_s, 2.0 * env, noise, band


def _stft_envelope(x, fs, f, half_hz, i0, i1):
    """STFT peak track at f: times, amplitude envelope, noise amplitude."""
    nwin = int(round(4.0 / half_hz * fs))
    nwin = max(64, nwin + (nwin % 2 == 0))
    hop = max(1, nwin // 4)
    seg = x[i0:i1]
    if seg.size < nwin:
        raise AudioError(
            f"{seg.size / fs:.3g} s after the attack is shorter than one STFT frame "
            f"({nwin / fs:.3g} s for a {half_hz:g} Hz half band)"
        )
    w = np.hanning(nwin)
    frames = np.lib.stride_tricks.sliding_window_view(seg, nwin)[::hop]
    n = np.arange(nwin)
    # Goertzel-style single-frequency DFT plus neighbours at +-1/3 bin for the peak.
    bin_hz = fs / nwin
    offsets = np.array([-1.0, 0.0, 1.0]) * bin_hz / 3.0
    basis = np.exp(-2j * np.pi * (f + offsets)[:, None] * n[None, :] / fs) * w[None, :]
    mags = np.abs(frames @ basis.T)  # (n_frames, 3)
    amp = mags.max(axis=1) * 2.0 / w.sum()
    times = (i0 + np.arange(frames.shape[0]) * hop + (nwin - 1) / 2.0) / fs
    spec = segment_spectrum(seg, fs)
    floor_power = float(np.interp(f, spec.freqs_hz, spec.floor))
    noise = 2.0 * math.sqrt(floor_power * np.sum(w * w)) / w.sum()
    return times, amp, noise


def _start_end(x, fs, start_s, end_s):
    strike = strike_in(x, fs)
    warnings = list(strike.warnings)
    t_start = strike.attack_end_s if start_s is None else float(start_s)
    t_end = x.size / fs
    if end_s is not None:
        t_end = min(t_end, float(end_s))
    elif math.isfinite(strike.next_onset_s):
        t_end = min(t_end, strike.next_onset_s - 0.005)
    if not (0 <= t_start < t_end):
        raise AudioError(
            f"nothing to analyse between {t_start:.4g} s and {t_end:.4g} s "
            f"(signal lasts {x.size / fs:.4g} s)"
        )
    return t_start, t_end, warnings, strike


def fit_decay(
    signal,
    sample_rate: float,
    frequency_hz: float,
    *,
    bandwidth_hz: float | None = None,
    start_s: float | None = None,
    end_s: float | None = None,
    envelope: str = "hilbert",
    floor_margin_db: float = 10.0,
    min_range_db: float = 5.0,
) -> DecayFit:
    """Decay rate, Q and T60 of one partial from its log envelope.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Recording or render of one strike; channels are averaged.
    sample_rate : float
        Hz, > 0.
    frequency_hz : float
        Partial frequency, Hz (from :func:`synth.analysis.find_partials` or
        known); must lie below 0.45 x sample rate.
    bandwidth_hz : float, optional
        Full width of the band-pass (stop-band edges at ``+-bandwidth_hz / 2``),
        Hz.  Default ``2 * default_half_band_hz(frequency_hz)``.  Keep the next
        partial outside it.
    start_s : float, optional
        Start of the analysis, s.  Default: the end of the attack found by
        :func:`synth.analysis.find_strike`.
    end_s : float, optional
        End of the analysis, s.  Default: the end of the file, or just before a
        second onset.
    envelope : {"hilbert", "stft"}, default "hilbert"
        ``"hilbert"``: magnitude of the zero-phase analytic band-pass output
        (a band-pass followed by a Hilbert transform, computed in one step by
        heterodyne and linear-phase low-pass).  ``"stft"``: the largest
        magnitude near ``frequency_hz`` in Hann frames of ``8 / bandwidth_hz``
        seconds, hop a quarter frame.
    floor_margin_db : float, default 10.0
        The fit stops where the envelope last stands this far above the noise
        floor, dB.
    min_range_db : float, default 5.0
        Smallest fall that counts as a valid fit, dB.

    Returns
    -------
    DecayFit
        Levels are amplitudes of the partial (``A`` in ``A cos``), dB re 1.  The
        noise floor comes from the median of a Hann-window spectrum of the
        analysed stretch near ``frequency_hz``, scaled by the noise bandwidth of
        the band-pass.

    Raises
    ------
    AudioError
        Unusable input, a frequency the sample rate cannot carry, or too little
        signal after the attack for the band-pass.
    ConfigError
        Bad ``envelope``, ``bandwidth_hz`` or ``frequency_hz``.
    """
    if envelope not in ("hilbert", "stft"):
        raise ConfigError(f"envelope = {envelope!r}: must be 'hilbert' or 'stft'")
    if not (frequency_hz > 0 and math.isfinite(frequency_hz)):
        raise ConfigError(f"frequency_hz = {frequency_hz!r}: must be a finite number > 0 Hz")
    half = default_half_band_hz(frequency_hz) if bandwidth_hz is None else 0.5 * bandwidth_hz
    if not half > 0:
        raise ConfigError(f"bandwidth_hz = {bandwidth_hz!r}: must be > 0 Hz")
    prep = prepare(signal, sample_rate, fmin_hz=max(0.0, frequency_hz - half),
                   fmax_hz=frequency_hz + half, what="a decay fit")
    fs = prep.sample_rate
    if frequency_hz >= prep.fmax_hz:
        raise AudioError(
            f"frequency_hz = {frequency_hz:g} lies above what a sample rate of {fs:g} Hz "
            f"carries ({prep.fmax_hz:g} Hz)"
        )
    x = prep.samples
    t_start, t_end, warn_strike, _ = _start_end(x, fs, start_s, end_s)
    i0, i1 = int(round(t_start * fs)), int(round(t_end * fs))
    if envelope == "hilbert":
        ntaps = taps_for(fs, 0.5 * half, half)
        if ntaps > (i1 - i0) // 2:
            raise AudioError(
                f"{(i1 - i0) / fs:.3g} s after the attack is too short for a {2 * half:g} Hz "
                f"band-pass ({ntaps / fs:.3g} s long); widen bandwidth_hz or record longer"
            )
        times, env, noise, _ = _band_envelope(x, fs, frequency_hz, half, i0, i1)
    else:
        times, env, noise = _stft_envelope(x, fs, frequency_hz, half, i0, i1)
    fit = fit_envelope_decay(times, env, frequency_hz, noise_floor=noise,
                             floor_margin_db=floor_margin_db, min_range_db=min_range_db)
    return DecayFit(**{**fit.__dict__,
                       "warnings": prep.warnings + tuple(warn_strike) + fit.warnings})


@dataclass(frozen=True)
class DecayRange:
    """One evaluation range of a Schroeder decay curve.

    Attributes
    ----------
    name : str
        ``"EDT"``, ``"T20"`` or ``"T30"``.
    start_db, end_db : float
        Range on the decay curve, dB re its start (0, -10; -5, -25; -5, -35).
    t60_s : float
        ``-60 / slope`` of the least-squares line over the range, s; NaN when
        the curve does not cross both ends.  When it does but the noise floor
        is too close, the value is given with ``reachable = False`` and a
        warning: treat it as doubtful.
    reachable : bool
        True when the curve reaches ``end_db`` before the truncation point and
        the noise floor lies at least 10 dB below ``end_db``.
    fit_start_s, fit_end_s : float
        Times where the curve crosses ``start_db`` and ``end_db``, s (NaN when
        not reached).
    """

    name: str
    start_db: float
    end_db: float
    t60_s: float
    reachable: bool
    fit_start_s: float
    fit_end_s: float


@dataclass(frozen=True)
class SchroederDecay:
    """Schroeder backward-integrated decay curve and its ISO 3382-1 style times.

    Attributes
    ----------
    times_s : numpy.ndarray, shape (n,)
        Times of the curve, s from the first sample of the signal.
    edc_db : numpy.ndarray, shape (n,)
        Energy decay curve, dB re its value at ``times_s[0]``.
    edt, t20, t30 : DecayRange
        Early decay time and T20, T30.
    noise_floor_db : float
        Noise energy relative to the energy envelope at the start, dB
        (``-inf`` with ``noise="none"`` or when no noise stretch was found).
    truncation_s : float
        Where integration stops (decay meets noise), s.
    noise : str
        Noise handling used.
    frequency_hz : float
        Band centre, Hz; NaN for broadband.
    warnings : tuple of str
        Problems worth knowing.
    """

    times_s: np.ndarray = field(compare=False, repr=False)
    edc_db: np.ndarray = field(compare=False, repr=False)
    edt: DecayRange
    t20: DecayRange
    t30: DecayRange
    noise_floor_db: float
    truncation_s: float
    noise: str
    frequency_hz: float
    warnings: tuple[str, ...]


NOISE_MODES: Final[tuple[str, ...]] = ("compensate", "truncate", "subtract", "none")
_RANGES: Final[tuple[tuple[str, float, float], ...]] = (
    ("EDT", 0.0, -10.0), ("T20", -5.0, -25.0), ("T30", -5.0, -35.0),
)


def _blocks(e: np.ndarray, n_block: int) -> np.ndarray:
    nb = e.size // n_block
    return e[: nb * n_block].reshape(nb, n_block).mean(axis=1)


def _crosspoint(e: np.ndarray, rate: float, warnings: list[str]):
    """Noise power and the time index where the decay meets it (after [3])."""
    n_block = max(1, int(round(0.01 * rate)))
    eb = _blocks(e, n_block)
    if eb.size < 10:
        return 0.0, e.size, False
    tb = (np.arange(eb.size) + 0.5) * n_block / rate
    tiny = max(float(eb.max()) * 1e-30, 1e-300)
    lb = 10 * np.log10(np.maximum(eb, tiny))
    tail = slice(int(0.9 * eb.size), eb.size)
    noise = float(np.mean(eb[tail]))
    s_tail = np.polyfit(tb[tail], lb[tail], 1)[0] if eb[tail].size >= 3 else 0.0
    if -s_tail * (tb[-1] - tb[tail.start]) > 3.0:
        warnings.append(
            "the decay does not reach the noise floor within the file: no noise "
            "correction; the last part of the curve is integrated as it is"
        )
        return 0.0, e.size, False
    cross = eb.size
    for _ in range(5):
        ndb = 10 * math.log10(max(noise, tiny))
        above = np.flatnonzero(lb > ndb + 10.0)
        if above.size < 3:
            return noise, int(cross * n_block), True
        k_end = int(above[-1])
        k_start = int(np.argmax(lb))
        if k_end - k_start < 2:
            return noise, int(cross * n_block), True
        slope, icpt = np.polyfit(tb[k_start : k_end + 1], lb[k_start : k_end + 1], 1)
        if slope >= 0:
            return noise, e.size, True
        t_cross = (ndb - icpt) / slope
        cross = int(min(eb.size, max(k_end, round(t_cross * rate / n_block))))
        # Noise from 5 dB of decay past the crossing to the end, if long enough.
        k_noise = int(min(eb.size, cross + round(-5.0 / slope * rate / n_block)))
        if eb.size - k_noise >= max(3, eb.size // 10):
            noise = float(np.mean(eb[k_noise:]))
        else:
            noise = float(np.mean(eb[tail]))
    return noise, int(min(e.size, cross * n_block)), True


def schroeder_decay(
    signal,
    sample_rate: float,
    *,
    frequency_hz: float | None = None,
    bandwidth_hz: float | None = None,
    start_s: float | None = None,
    end_s: float | None = None,
    noise: str = "compensate",
) -> SchroederDecay:
    """Schroeder backward integration with EDT, T20 and T30.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Recording or render of one strike; channels are averaged.
    sample_rate : float
        Hz, > 0.
    frequency_hz : float, optional
        Band-pass around this partial first (zero phase, as in
        :func:`fit_decay`).  Default: broadband.
    bandwidth_hz : float, optional
        Full band width, Hz; default as in :func:`fit_decay`.
    start_s : float, optional
        Where the curve starts (its 0 dB), s.  Default: the top of the attack
        (``StrikeOnset.peak_s`` of :func:`synth.analysis.find_strike`).
    end_s : float, optional
        Where the signal ends for the integral, s.  Default: the end of the
        file, or just before a second onset.
    noise : {"compensate", "truncate", "subtract", "none"}, default "compensate"
        ``"truncate"``: integrate only up to the crossing of the decay with
        the noise floor [3].  ``"compensate"``: as truncate, plus the energy the
        fitted decay would have had after the crossing [3].  ``"subtract"``:
        subtract the mean noise power, then truncate.  ``"none"``: integrate
        everything, noise included (biases the late curve upwards).

    Returns
    -------
    SchroederDecay
        Curve, the three ranges with ``reachable`` flags, noise floor,
        truncation time, warnings.

    Raises
    ------
    AudioError
        Unusable input or nothing after ``start_s``.
    ConfigError
        Bad ``noise`` or band.

    Notes
    -----
    ``EDC(t) = integral_t^inf h^2 dt`` [1], here ``sum_{n >= t fs} e[n]`` of the
    energy ``e`` (squared samples, or squared analytic envelope of the band),
    in dB re ``EDC(start)``.  Each range is fitted by least squares between the
    times the curve crosses its ends [2]; ``T = -60 / slope``.

    References
    ----------
    .. [1] Schroeder, M. R., J. Acoust. Soc. Am. 37(3), 409-412, 1965.
    .. [2] ISO 3382-1:2009.
    .. [3] Lundeby, A. et al., Acustica 81, 344-355, 1995.
    """
    if noise not in NOISE_MODES:
        raise ConfigError(f"noise = {noise!r}: must be one of {', '.join(NOISE_MODES)}")
    if frequency_hz is not None:
        if not (frequency_hz > 0 and math.isfinite(frequency_hz)):
            raise ConfigError(f"frequency_hz = {frequency_hz!r}: must be a finite number > 0")
        half = default_half_band_hz(frequency_hz) if bandwidth_hz is None else 0.5 * bandwidth_hz
        if not half > 0:
            raise ConfigError(f"bandwidth_hz = {bandwidth_hz!r}: must be > 0 Hz")
        prep = prepare(signal, sample_rate, fmin_hz=max(0.0, frequency_hz - half),
                       fmax_hz=frequency_hz + half, what="a Schroeder decay")
    else:
        prep = prepare(signal, sample_rate, what="a Schroeder decay")
    fs = prep.sample_rate
    x = prep.samples
    strike = strike_in(x, fs)
    t_start = strike.peak_s if start_s is None else float(start_s)
    t_end = x.size / fs
    if end_s is not None:
        t_end = min(t_end, float(end_s))
    elif math.isfinite(strike.next_onset_s):
        t_end = min(t_end, strike.next_onset_s - 0.005)
    if not (0 <= t_start < t_end):
        raise AudioError(f"nothing to analyse between {t_start:.4g} s and {t_end:.4g} s")
    i0, i1 = int(round(t_start * fs)), int(round(t_end * fs))
    warnings = list(prep.warnings) + list(strike.warnings)
    if frequency_hz is not None:
        if frequency_hz >= prep.fmax_hz:
            raise AudioError(f"frequency_hz = {frequency_hz:g} lies above the usable band "
                             f"({prep.fmax_hz:g} Hz at {fs:g} Hz)")
        if taps_for(fs, 0.5 * half, half) > (i1 - i0) // 2:
            raise AudioError(f"{(i1 - i0) / fs:.3g} s is too short for a {2 * half:g} Hz band")
        band = band_signal(x, fs, frequency_hz, 0.5 * half, half, i0, i1)
        e = np.abs(band.samples) ** 2
        times = band.times_s
        rate = band.rate_hz
    else:
        e = x[i0:i1] ** 2
        times = np.arange(i0, i1) / fs
        rate = fs
    if e.size < 10:
        raise AudioError(f"only {e.size} samples to integrate; need at least 10")
    n_block = max(1, int(round(0.01 * rate)))
    e0 = float(np.mean(e[: max(1, min(n_block, e.size))]))
    noise_power, cut, found_noise = (0.0, e.size, False)
    if noise != "none":
        noise_power, cut, found_noise = _crosspoint(e, rate, warnings)
    work = e.copy()
    if noise == "subtract" and found_noise:
        work = np.maximum(work - noise_power, 0.0)
    if noise in ("truncate", "subtract", "compensate") and found_noise:
        work[cut:] = 0.0
    edc = np.cumsum(work[::-1])[::-1]
    if noise == "compensate" and found_noise and cut < e.size:
        # Energy of the fitted decay beyond the crossing: e(t_c) / k per sample step.
        lo = max(0, cut - max(3, cut // 5))
        seg = e[lo:cut]
        tt = np.arange(lo, cut) / rate
        ok = seg > 0
        if ok.sum() >= 3:
            k_slope, k_icpt = np.polyfit(tt[ok], np.log(seg[ok]), 1)
            if k_slope < 0:
                e_cut = math.exp(k_icpt + k_slope * cut / rate)
                tail = e_cut / (1.0 - math.exp(k_slope / rate))
                edc[:cut] += tail
    edc0 = float(edc[0]) if edc[0] > 0 else 1e-300
    edc_db = 10 * np.log10(np.maximum(edc / edc0, 1e-30))
    noise_db = (10 * math.log10(noise_power / e0) if (found_noise and noise_power > 0 and e0 > 0)
                else -math.inf)
    limit = cut if found_noise and noise != "none" else e.size
    ranges = []
    for name, hi, lo_db in _RANGES:
        valid_part = edc_db[:limit]
        i_hi = np.flatnonzero(valid_part <= hi)
        i_lo = np.flatnonzero(valid_part <= lo_db)
        reachable = i_hi.size > 0 and i_lo.size > 0 and noise_db <= lo_db - 10.0
        if i_hi.size and i_lo.size:
            a, b = int(i_hi[0]), int(i_lo[0])
            if b - a >= 2:
                slope = np.polyfit(times[a : b + 1], edc_db[a : b + 1], 1)[0]
                t60 = -60.0 / slope if slope < 0 else math.inf
            else:
                t60 = math.nan
                reachable = False
            fs0, fs1 = float(times[a]), float(times[b])
        else:
            t60 = fs0 = fs1 = math.nan
        if not reachable:
            why = (f"noise floor {noise_db:.1f} dB is not 10 dB below {lo_db:g} dB"
                   if (i_lo.size and noise_db > lo_db - 10.0)
                   else f"the curve does not reach {lo_db:g} dB")
            warnings.append(f"{name} not reachable: {why}" + (
                "; the value shown is doubtful" if math.isfinite(t60) else ""))
        ranges.append(DecayRange(name, hi, lo_db, float(t60), bool(reachable), fs0, fs1))
    return SchroederDecay(
        times_s=times,
        edc_db=edc_db,
        edt=ranges[0],
        t20=ranges[1],
        t30=ranges[2],
        noise_floor_db=noise_db,
        truncation_s=float(times[min(limit, times.size) - 1]),
        noise=noise,
        frequency_hz=float(frequency_hz) if frequency_hz is not None else math.nan,
        warnings=tuple(warnings),
    )


def band_envelope(signal, sample_rate: float, frequency_hz: float, *,
                  bandwidth_hz: float | None = None, start_s: float = 0.0,
                  end_s: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Amplitude envelope of the partial at ``frequency_hz``, cheaply.

    The signal is mixed down by ``frequency_hz`` and low-passed by two passes of a
    moving average ``1 / bandwidth_hz`` long (a triangular window: side lobes
    fall as 1/f^2, so partials several bandwidths away drop out), then sampled
    every half window.  Linear cost, for long renders and many notes; for noisy
    recordings prefer :func:`fit_decay`, which also estimates the noise floor.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Channels are averaged.
    sample_rate, frequency_hz : float
        Hz.
    bandwidth_hz : float, optional
        Default :func:`default_half_band_hz` of the frequency.
    start_s, end_s : float
        Stretch to return, s.

    Returns
    -------
    times_s, envelope : ndarray
        Envelope in the signal's amplitude units (``A`` for ``A cos(...)``).
    """
    x = np.asarray(signal, dtype=float)
    if x.ndim == 2:
        x = x.mean(axis=1)
    fs = float(sample_rate)
    bw = default_half_band_hz(frequency_hz) if bandwidth_hz is None else float(bandwidth_hz)
    m = max(2, int(round(fs / bw)))
    i0 = max(0, int(round(start_s * fs)))
    i1 = x.size if end_s is None else min(x.size, int(round(end_s * fs)))
    if i1 - i0 < 4 * m:
        raise AudioError(f"{(i1 - i0) / fs:.3g} s is too short for a {bw:g} Hz envelope")
    n = np.arange(i0, i1)
    z = x[i0:i1] * np.exp(-2j * np.pi * frequency_hz * n / fs)
    for _ in range(2):
        c = np.concatenate([[0.0], np.cumsum(z)])
        z = (c[m:] - c[:-m]) / m
    hop = max(1, m // 2)
    env = 2.0 * np.abs(z[::hop])
    times = (i0 + np.arange(env.size) * hop + (m - 1)) / fs
    return times, env
