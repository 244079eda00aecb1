"""Partials of one strike: frequency, decay, Q, T60, amplitude and phase.

:func:`find_partials` combines three estimates, each where it is strongest:

1. **Peak picking on a long FFT** of everything after the attack finds where the
   partials are.  The window is flat at the start and falls as cos^2 to zero at
   the end, so fast-decaying partials keep their weight; a peak counts when it
   stands ``min_snr_db`` above the noise floor (block medians of a Hann-window
   spectrum, divided by ln 2) and is a local maximum with at least 6 dB of
   prominence.
2. **A subspace estimate per band** (ESPRIT or matrix pencil) gives the
   frequency and a first decay rate.  Each band is cut out by heterodyne and
   decimation (see :mod:`synth.analysis._bands`): a zero-phase complex FIR
   band-pass around the peak, computed only at the decimated rate, so a
   48 kHz recording with partials from 150 Hz to 15 kHz costs a few
   milliseconds per partial.  The band's half width scales with the measured
   line width (30 times the -3 dB width, between ``min_half_band_hz`` and
   ``max_half_band_hz``) and stays clear of neighbouring peaks.  The model
   order comes from the noise level of the band (``"noise"`` criterion of
   :func:`synth.analysis.select_order`); poles outside the pass band, growing
   poles and poles more than 40 dB below the strongest in the band are
   rejected, and of the rest each spectral peak takes the nearest pole (the
   others model noise).  Peaks closer than ``min_half_band_hz`` share a band, so
   a split pair resolved by the long FFT is reported as two partials.
3. **A log-envelope line fit** on the band's analytic envelope over the whole
   stretch at least 10 dB above its noise floor gives the decay of a lone
   partial; for sustained tones whose time constant exceeds the subspace window
   it is the stronger estimate (physics note, section 11).  When the band holds
   two poles, or the envelope beats, the subspace decay is used instead.

Amplitude and phase come from a least-squares fit of the final poles to the
band samples, corrected by the band filter's response at each complex pole, and
are referred to the strike onset, so that ``A exp(-decay (t - t_onset)) cos(2 pi
f (t - t_onset) + phase)`` is the partial's model for ``t`` after the attack.

References
----------
.. [1] Roy, R. and Kailath, T., IEEE Trans. ASSP 37(7), 984-995, 1989 (ESPRIT).
.. [2] Hua, Y. and Sarkar, T. K., IEEE Trans. ASSP 38(5), 814-824, 1990 (matrix
   pencil).
.. [3] Laroche, J., J. Acoust. Soc. Am. 94(4), 1958-1965, 1993 (band-wise
   high-resolution analysis of musical tones; from memory).
.. [4] Smith, J. O. and Serra, X., "PARSHL: an analysis/synthesis program for
   non-harmonic sounds based on a sinusoidal representation", Proc. ICMC 1987
   (quadratic interpolation of spectral peaks in dB; from memory).
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
import scipy.signal as ss

from synth.analysis._bands import (
    band_signal,
    filter_gain,
    moving_average,
    segment_spectrum,
    taps_for,
)
from synth.analysis.checks import prepare
from synth.analysis.decay import fit_envelope_decay
from synth.analysis.onset import strike_in
from synth.analysis.subspace import (
    LN_1000,
    _poles_esprit,
    _poles_pencil,
    complex_amplitudes,
    one_blas_thread,
)
from synth.errors import AudioError, ConfigError

METHODS = ("esprit", "matrix_pencil")

AUDIBLE_LIMIT_HZ = 20000.0
"""Default top of the search band, Hz: the usual upper edge of the audio band
[common practice, no source]."""

BAND_SNR_MIN = 2.0
"""A pole must start at least this many times (6 dB) above the band's noise
amplitude; weaker poles are noise the order criterion let through [common
practice, no source]."""


@dataclass(frozen=True)
class Partial:
    """One partial of a strike.

    Attributes
    ----------
    frequency_hz : float
        Frequency, Hz.
    decay_per_s : float
        Amplitude decay rate, 1/s (1/tau), from ``decay_method``.
    q : float
        ``pi f / decay`` (physics note, section 6); ``inf`` if no decay.
    t60_s : float
        ``ln(1000) / decay``, s; ``inf`` if no decay.
    amplitude : float
        Peak amplitude at the strike onset (model extrapolated back through the
        attack), units of full scale.
    phase_rad : float
        Phase at the strike onset, rad, cosine convention.
    level_db : float
        ``20 log10(amplitude)``, dB re full scale amplitude.
    snr_db : float
        Amplitude at the start of the band's analysis against the band's noise
        amplitude, dB.
    decay_method : str
        ``"envelope"`` (log-envelope line fit) or ``"subspace"``.
    decay_subspace_per_s : float
        Decay rate from the subspace estimate, 1/s.
    decay_envelope_per_s : float
        Decay rate from the envelope fit, 1/s; NaN when there was none.
    envelope_range_db : float
        Range the envelope fit covered, dB; NaN when there was none.
    beating : bool
        The band held two poles or the envelope did not follow one line.
    band_hz : tuple of float
        Pass band used, ``(low, high)``, Hz.
    """

    frequency_hz: float
    decay_per_s: float
    q: float
    t60_s: float
    amplitude: float
    phase_rad: float
    level_db: float
    snr_db: float
    decay_method: str
    decay_subspace_per_s: float
    decay_envelope_per_s: float
    envelope_range_db: float
    beating: bool
    band_hz: tuple[float, float]


@dataclass(frozen=True)
class PartialsResult:
    """Result of :func:`find_partials`.

    Attributes
    ----------
    partials : tuple of Partial
        Sorted by frequency.
    sample_rate : float
        Hz.
    onset_s : float
        Strike onset, s from the first sample; amplitudes and phases refer to it.
    analysis_start_s, analysis_end_s : float
        Stretch analysed (after the attack, before any second onset), s.
    fmin_hz, fmax_hz : float
        Band searched, Hz (``fmax_hz`` possibly clamped to 0.45 x sample rate).
    method : str
        ``"esprit"`` or ``"matrix_pencil"``.
    warnings : tuple of str
        Everything worth knowing about the input and the estimates.
    """

    partials: tuple[Partial, ...]
    sample_rate: float
    onset_s: float
    analysis_start_s: float
    analysis_end_s: float
    fmin_hz: float
    fmax_hz: float
    method: str
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class _Peak:
    freq: float
    power: float
    floor: float
    fwhm: float


def _pick_peaks(spec, fmin, fmax, min_snr_db, dynamic_range_db):
    p = spec.power
    lo = max(1, int(math.ceil(fmin / spec.bin_hz)))
    hi = min(p.size - 2, int(fmax / spec.bin_hz))
    if hi <= lo + 2:
        return []
    pdb = 10 * np.log10(np.maximum(p, 1e-300))
    fdb = 10 * np.log10(np.maximum(np.maximum(spec.floor, spec.local), 1e-300))
    region = pdb[lo:hi]
    idx, props = ss.find_peaks(region, height=fdb[lo:hi] + min_snr_db, prominence=6.0)
    if idx.size == 0:
        return []
    idx = idx + lo
    top = float(pdb[idx].max())
    idx = idx[pdb[idx] >= top - dynamic_range_db]
    peaks = []
    for k in idx:
        a, b, c = pdb[k - 1], pdb[k], pdb[k + 1]
        den = a - 2 * b + c
        delta = 0.5 * (a - c) / den if den < 0 else 0.0
        freq = (k + delta) * spec.bin_hz
        height = b - 0.25 * (a - c) * delta
        # -3 dB width by walking down each side, interpolated between bins.
        half = height - 3.0
        j = k
        while j > 1 and pdb[j] > half:
            j -= 1
        left = j + (half - pdb[j]) / (pdb[j + 1] - pdb[j]) if pdb[j + 1] != pdb[j] else j
        j = k
        while j < p.size - 2 and pdb[j] > half:
            j += 1
        right = j - (half - pdb[j]) / (pdb[j - 1] - pdb[j]) if pdb[j - 1] != pdb[j] else j
        fwhm = max((right - left) * spec.bin_hz, spec.bin_hz)
        peaks.append(_Peak(float(freq), float(10 ** (height / 10)), float(spec.floor[k]),
                           float(fwhm)))
    return peaks


def _band_poles(y, rate, method, noise_std, max_order):
    """Subspace poles of a complex band window (frequency offsets, decays, amplitudes)."""
    n = y.size
    rows = max(2, n // 3)
    if method == "esprit":
        z, s, k, _ = _poles_esprit(y, rows, None, "noise", max_order, noise_std, False, "ls")
    else:
        z, s, k, _ = _poles_pencil(y, rows, None, "noise", max_order, noise_std, False)
    z = z[np.abs(z) > 0]
    return z


def find_partials(
    signal,
    sample_rate: float,
    *,
    max_partials: int = 12,
    fmin_hz: float = 20.0,
    fmax_hz: float | None = None,
    min_snr_db: float = 15.0,
    dynamic_range_db: float = 80.0,
    method: str = "esprit",
    skip_s: float | None = None,
    end_s: float | None = None,
    min_half_band_hz: float = 20.0,
    max_half_band_hz: float = 1000.0,
    max_window_samples: int = 400,
) -> PartialsResult:
    """Find the partials of a struck bar in a recording or render.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        One strike; channels are averaged (see :mod:`synth.analysis.checks`).
    sample_rate : float
        Hz, > 0.
    max_partials : int, default 12
        Keep at most this many, the strongest (by level above the noise floor in
        the long spectrum).
    fmin_hz : float, default 20.0
        Lowest frequency searched, Hz.
    fmax_hz : float, optional
        Highest frequency searched, Hz.  Default: 20 kHz or 0.45 x sample rate,
        whichever is lower.  A value above 0.45 x sample rate is clamped to it
        with a warning.
    min_snr_db : float, default 15.0
        A spectral peak must stand this far above the noise floor (per bin) of
        the long spectrum, dB.  Noise alone peaks about 11 dB above its mean in
        a spectrum of 10^5 bins (``ln(10^5) = 11.5`` times the mean power), so
        15 dB keeps chance peaks out.
    dynamic_range_db : float, default 80.0
        Ignore peaks more than this below the strongest, dB.
    method : {"esprit", "matrix_pencil"}, default "esprit"
        Subspace method per band.
    skip_s : float, optional
        Time after the onset to skip as attack, s.  Default: from
        :func:`synth.analysis.find_strike` (top of the attack + 10 ms).
    end_s : float, optional
        End of the analysis, s from the first sample.  Default: the end, or
        just before a second onset.
    min_half_band_hz, max_half_band_hz : float, default 20.0 and 1000.0
        Limits of the band half widths (stop-band edges), Hz.  Peaks closer
        than ``min_half_band_hz`` share a band.
    max_window_samples : int, default 400
        Longest subspace window per band, decimated samples (cost grows as the
        cube).

    Returns
    -------
    PartialsResult
        Partials sorted by frequency, the stretch analysed, warnings.  An empty
        tuple of partials comes with a warning, never silently.

    Raises
    ------
    AudioError
        Unusable input: silence, NaN, too short (less than 0.05 s after the
        attack), a band the sample rate cannot carry.
    ConfigError
        Bad parameters.
    """
    if method not in METHODS:
        raise ConfigError(f"method = {method!r}: must be one of {', '.join(METHODS)}")
    if not (isinstance(max_partials, int) and max_partials >= 1):
        raise ConfigError(f"max_partials = {max_partials!r}: must be an integer >= 1")
    if not (0 < min_half_band_hz <= max_half_band_hz):
        raise ConfigError(
            f"min_half_band_hz = {min_half_band_hz!r}, max_half_band_hz = {max_half_band_hz!r}: "
            "need 0 < min <= max"
        )
    if not max_window_samples >= 16:
        raise ConfigError(f"max_window_samples = {max_window_samples!r}: must be >= 16")
    prep = prepare(signal, sample_rate, fmin_hz=fmin_hz, fmax_hz=fmax_hz, min_duration_s=0.05,
                   what="partial analysis")
    fs = prep.sample_rate
    if fmax_hz is None and prep.fmax_hz > AUDIBLE_LIMIT_HZ:
        prep = dataclasses.replace(prep, fmax_hz=AUDIBLE_LIMIT_HZ)
    x = prep.samples
    warnings = list(prep.warnings)
    strike = strike_in(x, fs)
    warnings.extend(strike.warnings)
    onset = strike.onset_s
    t_start = strike.attack_end_s if skip_s is None else onset + float(skip_s)
    t_end = x.size / fs
    if end_s is not None:
        t_end = min(t_end, float(end_s))
    elif math.isfinite(strike.next_onset_s):
        t_end = min(t_end, strike.next_onset_s - 0.005)
    if t_end - t_start < 0.05:
        raise AudioError(
            f"only {max(0.0, t_end - t_start):.3f} s of signal after the attack "
            f"({t_start:.3f} s to {t_end:.3f} s); partial analysis needs at least 0.05 s"
        )
    i0, i1 = int(round(t_start * fs)), int(round(t_end * fs))
    seg = x[i0:i1]
    with one_blas_thread():
        partials, more = _analyse(x, fs, i0, i1, seg, onset, prep, max_partials, min_snr_db,
                                  dynamic_range_db, method, min_half_band_hz, max_half_band_hz,
                                  max_window_samples)
    warnings.extend(more)
    return PartialsResult(
        partials=tuple(partials),
        sample_rate=fs,
        onset_s=onset,
        analysis_start_s=i0 / fs,
        analysis_end_s=i1 / fs,
        fmin_hz=prep.fmin_hz,
        fmax_hz=prep.fmax_hz,
        method=method,
        warnings=tuple(warnings),
    )


def _analyse(x, fs, i0, i1, seg, onset, prep, max_partials, min_snr_db, dynamic_range_db,
             method, min_half, max_half, max_window):
    warnings: list[str] = []
    spec = segment_spectrum(seg, fs)
    peaks = _pick_peaks(spec, prep.fmin_hz, prep.fmax_hz, min_snr_db, dynamic_range_db)
    if not peaks:
        warnings.append(
            f"no partials found: no spectral peak stands {min_snr_db:g} dB above the noise "
            f"floor between {prep.fmin_hz:g} and {prep.fmax_hz:g} Hz"
        )
        return [], warnings
    # The shortest filter the segment affords: at most a third of it.
    n_seg = i1 - i0
    half_floor = min_half
    while taps_for(fs, 0.5 * half_floor, half_floor) > n_seg // 3 and half_floor < max_half * 8:
        half_floor *= 1.25
    chosen = sorted(peaks, key=lambda p: p.power / p.floor, reverse=True)
    groups: list[list[_Peak]] = []
    for p in chosen:
        for g in groups:
            if abs(p.freq - g[0].freq) < half_floor:
                g.append(p)
                break
        else:
            if len(groups) < max_partials:
                groups.append([p])
    partials: list[Partial] = []
    n_weak = 0
    for g in groups:
        centre = g[0].freq
        spread = max(abs(p.freq - centre) for p in g)
        others = [p.freq for p in peaks if p not in g]
        dist = min((abs(f - centre) for f in others), default=math.inf)
        half = min(max(30.0 * g[0].fwhm, half_floor), max(max_half, half_floor))
        half = min(half, max(0.6 * (dist - spread), 0.6 * half_floor))
        pas = max(0.5 * half, spread + 2.0 * max(p.fwhm for p in g))
        if pas >= 0.9 * half:
            half = pas / 0.5
        half = min(half, centre - 1.0, 0.5 * fs - centre - 1.0)
        pas = min(pas, 0.9 * half)
        if half <= 0 or taps_for(fs, pas, half) > n_seg // 2:
            warnings.append(f"peak near {centre:.1f} Hz: too close to its neighbours or to the "
                            "band edge for this signal length; skipped")
            continue
        band = band_signal(x, fs, centre, pas, half, i0, i1)
        y = band.samples
        if y.size < 16:
            warnings.append(f"peak near {centre:.1f} Hz: fewer than 16 band samples; skipped")
            continue
        floor_power = float(np.interp(centre, spec.freqs_hz, spec.floor))
        noise = math.sqrt(floor_power * band.noise_gain)  # band units (A/2 scale)
        env = np.abs(y)
        env_db = 20 * np.log10(np.maximum(env, 1e-300))
        smooth = moving_average(env_db, max(5, y.size // 50))
        above = np.flatnonzero(smooth >= 20 * math.log10(max(noise, 1e-300)) + 10.0)
        n_clean = int(above[-1]) + 1 if above.size else min(y.size, 16)
        n_win = int(min(max(n_clean, 16), max_window, y.size))
        yw = y[:n_win]
        # Relative order cap: a pole per grouped peak plus room for noise poles.
        max_order = min(max(4, 2 * len(g) + 2), n_win // 3 - 1)
        z = _band_poles(yw, band.rate_hz, method, noise, max_order)
        off_hz = np.angle(z) * band.rate_hz / (2 * np.pi)
        dec = -np.log(np.abs(z)) * band.rate_hz
        c = complex_amplitudes(yw, z)
        t_win = n_win / band.rate_hz
        keep = (np.abs(off_hz) <= pas) & (dec >= -1.0 / t_win)
        if keep.any():
            strongest = float(np.max(np.abs(c[keep])))
            keep &= np.abs(c) >= strongest * 10 ** (-40 / 20)
        if not keep.any():
            warnings.append(f"peak near {centre:.1f} Hz: no stable pole in its band; skipped")
            continue
        weak = keep & (np.abs(c) < BAND_SNR_MIN * noise)
        if weak.any() and not (keep & ~weak).any():
            n_weak += 1
            continue
        keep &= ~weak
        # One pole per spectral peak of the group: the nearest stable pole within
        # the peak's tolerance, else (for a lone peak) the strongest stable pole.
        cand = list(np.flatnonzero(keep))
        chosen_idx = []
        for pk in sorted(g, key=lambda p: -p.power):
            others_f = [o.freq for o in g if o is not pk]
            tol = max(pk.fwhm, 3 * spec.bin_hz)
            if others_f:
                tol = min(tol, 0.5 * min(abs(pk.freq - f) for f in others_f))
            near = [i for i in cand if abs(centre + off_hz[i] - pk.freq) <= tol]
            if near:
                i = min(near, key=lambda i: abs(centre + off_hz[i] - pk.freq))
            elif len(g) == 1 and cand:
                i = max(cand, key=lambda i: abs(c[i]))
            else:
                continue
            chosen_idx.append(i)
            cand.remove(i)
        if not chosen_idx:
            warnings.append(f"peak near {centre:.1f} Hz: no pole matches it; skipped")
            continue
        zk = z[chosen_idx]
        off_sel = off_hz[chosen_idx]
        split = zk.size > 1
        efit = None
        if not split:
            efit = fit_envelope_decay(band.times_s, env, centre + float(off_sel[0]),
                                      noise_floor=noise)
        finals = []
        for zj in zk:
            f_off = float(np.angle(zj) * band.rate_hz / (2 * np.pi))
            d_sub = float(-np.log(abs(zj)) * band.rate_hz)
            use_env = efit is not None and efit.valid and not efit.beating
            d = efit.decay_per_s if use_env and efit is not None else d_sub
            finals.append((centre + f_off, d, d_sub, "envelope" if use_env else "subspace"))
        # Amplitudes with the final poles, then undo the band filter and refer to the onset.
        zf = np.array([np.exp((-d + 2j * np.pi * (f - centre)) / band.rate_hz)
                       for f, d, _, _ in finals])
        cf = complex_amplitudes(yw, zf)
        t0 = float(band.times_s[0])
        for (f, d, d_sub, how), cj in zip(finals, cf, strict=True):
            u = complex(-d, 2 * np.pi * (f - centre))
            gain = filter_gain(band.taps, fs, u)
            s = complex(-d, 2 * np.pi * f)
            # c = (A/2) e^{i phi} e^{s (t0 - onset)} e^{-i w_c t0} H(u)
            half_amp = cj / gain * np.exp(-s * (t0 - onset)) * np.exp(2j * np.pi * centre * t0)
            amp = 2.0 * abs(half_amp)
            snr = 20 * math.log10(max(abs(cj), 1e-300) / max(noise, 1e-300))
            q = math.pi * f / d if d > 0 else math.inf
            t60 = LN_1000 / d if d > 0 else math.inf
            if d <= 0:
                warnings.append(f"partial at {f:.2f} Hz: no decay measurable over "
                                f"{t_win:.2f} s; Q and T60 are reported as infinite")
            if how == "subspace" and d > 0 and efit is not None and not split:
                if not efit.valid:
                    warnings.append(
                        f"partial at {f:.2f} Hz: envelope fit unusable "
                        f"({'; '.join(efit.warnings) or 'too short'}); decay from the "
                        f"subspace estimate over {t_win:.2f} s"
                    )
                elif efit.beating:
                    warnings.append(
                        f"partial at {f:.2f} Hz: envelope beats or curves (curvature "
                        f"{efit.curvature_db:+.1f} dB); decay from the subspace estimate"
                    )
            partials.append(Partial(
                frequency_hz=float(f),
                decay_per_s=float(d),
                q=float(q),
                t60_s=float(t60),
                amplitude=float(amp),
                phase_rad=float(np.angle(half_amp)),
                level_db=20 * math.log10(amp) if amp > 0 else -math.inf,
                snr_db=float(snr),
                decay_method=how,
                decay_subspace_per_s=d_sub,
                decay_envelope_per_s=float(efit.decay_per_s) if efit is not None else math.nan,
                envelope_range_db=float(efit.fit_range_db) if efit is not None else math.nan,
                beating=bool(split or (efit is not None and efit.beating)),
                band_hz=(float(centre - pas), float(centre + pas)),
            ))
        if split:
            warnings.append(
                f"split pair near {centre:.1f} Hz: {zk.size} poles "
                f"({', '.join(f'{centre + float(np.angle(v) * band.rate_hz / (2 * np.pi)):.2f}' for v in zk)} Hz) "  # noqa: E501
                "beat against each other; each decay is from the subspace estimate"
            )
    if n_weak:
        warnings.append(
            f"{n_weak} spectral peak(s) dropped: in their band the estimate stood less than "
            f"{20 * math.log10(BAND_SNR_MIN):.0f} dB above the band noise"
        )
    partials.sort(key=lambda p: p.frequency_hz)
    return partials, warnings
