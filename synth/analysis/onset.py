"""Onsets: where a strike begins, and where its attack is over.

Detection uses two functions of a short-time Fourier transform.  The spectral
flux is the mean, over frequency bins, of the rise in level (dB) from one frame
to the next, counting rises only (half-wave rectified): a strike lifts many bins
at once, a decaying or beating tone lifts almost none, and a second strike on a
ringing bar still lifts the bins between its partials.  The energy rise is the
growth of the in-band frame energy across one frame length: a strike out of
noise lifts it by far more than ``ENERGY_JUMP_DB`` even when its few partials
barely move the mean flux.  Frames whose flux stands above the local median by
``threshold_db``, or whose energy rise exceeds ``ENERGY_JUMP_DB``, and whose
energy rises by at least ``min_rise_db`` are onsets.  Each is then refined to
the sample: the first sample, in a window around the detected frame, whose
magnitude exceeds six times the standard deviation of the noise just before it
(or -60 dB re the local peak in digital silence).  Out of noise this lands
within a few samples of the true start; a second strike on a ringing bar is
placed where it first exceeds the ringing, a few milliseconds late.

The file is treated as if preceded by silence, so a recording that starts while
the bar already rings shows an onset at t = 0; :func:`find_strike` recognises that
case and says so.

References
----------
.. [1] Masri, P., *Computer modelling of sound for transformation and synthesis
   of musical signals*, PhD thesis, University of Bristol, 1996 (spectral
   difference as an onset detection function; from memory).
.. [2] Bello, J. P., Daudet, L., Abdallah, S., Duxbury, C., Davies, M. and
   Sandler, M. B., "A tutorial on onset detection in music signals", IEEE Trans.
   Speech Audio Process. 13(5), 1035-1047, 2005, doi:10.1109/TSA.2005.851998
   (spectral flux with rectification, median-based adaptive thresholds).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np
import scipy.signal as ss

from synth.analysis._bands import moving_average, next_pow2
from synth.analysis.checks import prepare
from synth.errors import ConfigError

ENERGY_JUMP_DB: Final[float] = 6.0
"""Rise of the in-band frame energy within one frame length that counts as an
onset by itself, dB: a strike out of silence or noise rises far more, a beating
or slowly swelling tone far less [common practice, no source]."""


LEAD_IN_DB: Final[float] = 20.0
"""Sound at the very start of a file counts as an onset only when its level is
within this many dB of the loudest frame; quieter sound there is a lead-in
(room noise, handling) [common practice, no source]."""


@dataclass(frozen=True)
class Onsets:
    """Onsets found by :func:`detect_onsets`.

    Attributes
    ----------
    times_s : tuple of float
        Sample-accurate onset times, s from the first sample, ascending.
    strengths_db : tuple of float
        Spectral flux at each onset (mean rise over the bins), dB.
    levels_dbfs : tuple of float
        RMS level of the frame just after each onset, dB re full scale.
    sample_rate : float
        Hz.
    warnings : tuple of str
        Problems found in the signal.
    """

    times_s: tuple[float, ...]
    strengths_db: tuple[float, ...]
    levels_dbfs: tuple[float, ...]
    sample_rate: float
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class StrikeOnset:
    """The strike in a recording of one struck bar (from :func:`find_strike`).

    Attributes
    ----------
    found : bool
        False when no onset stood out; the times then refer to the first
        sample and a warning says so.
    onset_s : float
        Start of the strike, s from the first sample.
    peak_s : float
        First time the 1 ms RMS envelope comes within 3 dB of its largest value
        in the 50 ms after the onset (the top of the attack), s.
    attack_end_s : float
        ``peak_s + attack_margin_s``: where a free decay may be assumed, s.
    next_onset_s : float
        The next onset after the strike (a second strike, a rattle), s;
        ``inf`` if none.  Decay analysis should stop there.
    level_dbfs : float
        RMS of the 20 ms after the onset, dB re full scale.
    starts_loud : bool
        True when the file begins at full level (cut mid-ring, or a render that
        starts on a step): there is no attack in the file.
    warnings : tuple of str
        Problems worth knowing.
    """

    found: bool
    onset_s: float
    peak_s: float
    attack_end_s: float
    next_onset_s: float
    level_dbfs: float
    starts_loud: bool
    warnings: tuple[str, ...]


def _db_power(p: float) -> float:
    return 10.0 * math.log10(p) if p > 0 else -math.inf


_FLUX_CHUNK = 2048
"""Frames whose spectra are held at once (the flux is computed in chunks, frame by frame
the same numbers as all at once, so memory stays bounded for long files)."""


def _flux(x: np.ndarray, fs: float, frame_s: float, hop_s: float, range_db: float,
          fmin_hz: float, fmax_hz: float):
    nwin = max(16, int(round(frame_s * fs)))
    hop = max(1, int(round(hop_s * fs)))
    nfft = next_pow2(nwin)
    xp = np.concatenate((np.zeros(nwin), x, np.zeros(nwin)))
    frames = np.lib.stride_tricks.sliding_window_view(xp, nwin)[::hop]
    n_frames = frames.shape[0]
    win = np.hanning(nwin)
    freqs = np.fft.rfftfreq(nfft, 1.0 / fs)
    sel = (freqs >= fmin_hz) & (freqs <= fmax_hz)
    scale = 2.0 / (nfft * np.sum(win * win))

    def magnitudes(lo: int, hi: int) -> np.ndarray:
        return np.abs(np.fft.rfft(frames[lo:hi] * win, nfft)[:, sel])

    # pass 1: band energy per frame and the loudest bin of the file
    energy = np.empty(n_frames)
    top_mag = 0.0
    for lo in range(0, n_frames, _FLUX_CHUNK):
        mag = magnitudes(lo, min(n_frames, lo + _FLUX_CHUNK))
        energy[lo:lo + mag.shape[0]] = np.sum(mag * mag, axis=1) * scale
        top_mag = max(top_mag, float(mag.max()))
    top = float(20.0 * np.log10(np.maximum(top_mag, 1e-300)))
    # pass 2: rise of the clipped level spectrum from frame to frame
    flux = np.zeros(n_frames)
    prev = None
    for lo in range(0, n_frames, _FLUX_CHUNK):
        mag = magnitudes(lo, min(n_frames, lo + _FLUX_CHUNK))
        level = np.maximum(20.0 * np.log10(np.maximum(mag, 1e-300)), top - range_db)
        if prev is not None:
            level = np.concatenate((prev, level))
        rise = np.diff(level, axis=0)
        first = lo if prev is not None else 1
        flux[first:first + rise.shape[0]] = np.mean(np.maximum(rise, 0.0), axis=1)
        prev = level[-1:]
    # frame n covers xp[n hop : n hop + nwin] = x[n hop - nwin : n hop]
    starts = np.arange(n_frames) * hop - nwin
    return flux, energy, starts, nwin, hop


def _refine(x: np.ndarray, lo: int, hi: int, fs: float) -> int:
    """First sample in x[lo:hi] above 6 sigma of the noise just before lo."""
    lo = max(0, lo)
    hi = min(x.size, max(hi, lo + 1))
    pre = x[max(0, lo - int(0.02 * fs)) : lo]
    sigma = float(np.median(np.abs(pre)) / 0.6745) if pre.size >= 16 else 0.0
    region = np.abs(x[lo:hi])
    if region.size == 0:
        return lo
    local_peak = float(region.max())
    thr = max(6.0 * sigma, 1e-3 * local_peak)
    above = np.flatnonzero(region > thr)
    return lo + int(above[0]) if above.size else lo + int(np.argmax(region))


def _detect(x, fs, *, frame_s, hop_s, threshold_db, min_rise_db, min_gap_s, range_db,
            fmin_hz, fmax_hz):
    flux, energy, starts, nwin, hop = _flux(x, fs, frame_s, hop_s, range_db, fmin_hz, fmax_hz)
    med_len = max(3, int(round(0.5 / hop_s)) | 1)
    if flux.size >= med_len:
        base = ss.medfilt(flux, med_len)
    else:
        base = np.full_like(flux, np.median(flux))
    dist = max(1, int(round(min_gap_s * fs / hop)))
    lag = int(math.ceil(nwin / hop))
    e_floor = max(float(energy.max()) * 10 ** (-range_db / 10), 1e-300)
    e_db = 10.0 * np.log10(np.maximum(energy, e_floor))
    # Energy rise across one frame length: a strike in noise lifts the band energy
    # even when its few partials barely move the mean flux over all bins.
    e_rise = e_db - np.concatenate((np.full(lag, e_db[0]), e_db[:-lag]))
    by_flux, _ = ss.find_peaks(flux, height=base + threshold_db, distance=dist)
    by_energy, _ = ss.find_peaks(e_rise, height=ENERGY_JUMP_DB, distance=dist)
    # An energy-rise peak sits where the rise is complete; its onset lies up to
    # one frame earlier, where the flux is largest.
    moved = []
    for p in by_energy:
        lo = max(0, p - lag)
        moved.append(lo + int(np.argmax(flux[lo : p + 1])))
    peaks = np.unique(np.concatenate((by_flux, np.array(moved, dtype=int))))
    times: list[float] = []
    strengths: list[float] = []
    levels: list[float] = []
    # Frames reaching into the silence assumed before the file: an onset there is
    # sound at the first sample, kept only when that sound is loud for the file
    # (within LEAD_IN_DB of its loudest frame), not a quiet noise lead-in.
    inside = np.flatnonzero(starts >= 0)
    head_db = _db_power(float(energy[inside[0]])) if inside.size else -math.inf
    loud_db = _db_power(float(energy.max()))
    for p in peaks:
        if starts[p] < 0 and head_db < loud_db - LEAD_IN_DB:
            continue
        before = energy[max(0, p - lag)]
        after = float(energy[p : p + lag + 1].max())
        if _db_power(max(after, e_floor)) - _db_power(max(before, e_floor)) < min_rise_db:
            continue
        lo = int(starts[max(0, p - 1)])
        hi = int(starts[p] + nwin)
        n0 = _refine(x, lo, hi, fs)
        if times and n0 / fs - times[-1] < min_gap_s:
            continue
        times.append(n0 / fs)
        strengths.append(float(flux[p]))
        seg = x[n0 : n0 + max(1, int(0.02 * fs))]
        levels.append(_db_power(float(np.mean(seg * seg))))
    return times, strengths, levels


def _check_params(frame_s, hop_s, min_gap_s):
    if not (frame_s > 0 and hop_s > 0 and hop_s <= frame_s):
        raise ConfigError(f"frame_s = {frame_s!r}, hop_s = {hop_s!r}: need 0 < hop_s <= frame_s")
    if min_gap_s < 0:
        raise ConfigError(f"min_gap_s = {min_gap_s!r}: must be >= 0 s")


def detect_onsets(
    signal,
    sample_rate: float,
    *,
    frame_s: float = 0.02,
    hop_s: float = 0.005,
    threshold_db: float = 3.0,
    min_rise_db: float = 3.0,
    min_gap_s: float = 0.05,
    range_db: float = 80.0,
    fmin_hz: float = 50.0,
    fmax_hz: float | None = None,
) -> Onsets:
    """Find onsets (strikes) by spectral flux, refined to the sample.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Audio; several channels are averaged (see :mod:`synth.analysis.checks`).
    sample_rate : float
        Hz, > 0.
    frame_s : float, default 0.02
        STFT frame length, s (Hann window).
    hop_s : float, default 0.005
        Frame hop, s, ``<= frame_s``.
    threshold_db : float, default 3.0
        How far the flux must rise above its running median (over 0.5 s), dB.
        Stationary noise gives a flux of about 3.2 dB (the mean positive
        difference of two independent Rayleigh levels, 7.9 dB / sqrt(2 pi)),
        with little spread once averaged over hundreds of bins.
    min_rise_db : float, default 3.0
        Required rise in frame energy across the onset, dB.
    min_gap_s : float, default 0.05
        Closest spacing of two onsets, s.
    range_db : float, default 80.0
        Levels more than this below the loudest bin are clipped, so noise in
        quiet passages does not count as flux, dB.
    fmin_hz : float, default 50.0
        Lowest frequency counted (keeps out rumble and handling noise), Hz.
    fmax_hz : float, optional
        Highest frequency counted, Hz; default 0.45 x sample rate.

    Returns
    -------
    Onsets
        Times, flux strengths, levels, warnings.

    Raises
    ------
    AudioError
        Unusable input (see :func:`synth.analysis.checks.prepare`), including
        digital silence.
    """
    _check_params(frame_s, hop_s, min_gap_s)
    prep = prepare(signal, sample_rate, fmin_hz=fmin_hz, fmax_hz=fmax_hz, what="onset detection")
    times, strengths, levels = _detect(
        prep.samples, prep.sample_rate, frame_s=frame_s, hop_s=hop_s, threshold_db=threshold_db,
        min_rise_db=min_rise_db, min_gap_s=min_gap_s, range_db=range_db, fmin_hz=prep.fmin_hz,
        fmax_hz=prep.fmax_hz,
    )
    warnings = list(prep.warnings)
    if not times:
        warnings.append("no onset found: nothing rises above the running level")
    return Onsets(tuple(times), tuple(strengths), tuple(levels), prep.sample_rate,
                  tuple(warnings))


def _steady_decay(x: np.ndarray, n_parts: int = 8, min_drop_db: float = 1.0) -> bool:
    """Tell whether the level falls part by part through the file: a slow decay, not a tone.

    A bar of T60 50 s loses about 5 dB between the start and the last fifth of
    a 5 s file, less than the 6 dB the drop test asks; its level still falls in
    every eighth of the file, which a steady tone or noise does not (their parts
    differ by chance, both up and down).
    """
    parts = np.array_split(x, n_parts)
    db = np.array([_db_power(float(np.mean(p * p))) for p in parts if p.size])
    steps = np.diff(db)
    return bool(db[0] - db[-1] >= min_drop_db and np.all(steps < 0.0))


def strike_in(x: np.ndarray, fs: float, *, attack_margin_s: float = 0.01) -> StrikeOnset:
    """Find the strike in a prepared mono signal (see :func:`find_strike`)."""
    times, _, levels = _detect(
        x, fs, frame_s=0.02, hop_s=0.005, threshold_db=3.0, min_rise_db=3.0, min_gap_s=0.05,
        range_db=80.0, fmin_hz=50.0, fmax_hz=0.45 * fs,
    )
    warnings: list[str] = []
    if not times:
        warnings.append(
            "no strike found (no onset stands out): analysing from the first sample; "
            "if the file holds a strike, trim the lead-in noise or raise the level"
        )
        n0 = 0
        found = False
        next_onset = math.inf
        k = -1
    else:
        k = int(np.argmax(levels))
        found = True
        n0 = int(round(times[k] * fs))
        later = [t for t in times[k + 1 :]]
        next_onset = later[0] if later else math.inf
        if later:
            warnings.append(
                f"another onset at {later[0]:.3f} s after the strike at {times[k]:.3f} s "
                "(a second strike, a bounce or a rattle): decay analysis stops there; "
                "trim the file to one strike"
            )
        earlier = [t for t, lv in zip(times[:k], levels[:k], strict=True)
                   if lv > levels[k] - 20.0]
        if earlier:
            warnings.append(
                f"{len(earlier)} onset(s) before the loudest one at {times[k]:.3f} s: using "
                "the loudest; trim the file to one strike"
            )
    starts_loud = False
    one_ms = max(1, int(round(0.001 * fs)))
    if found and n0 < one_ms:
        # Sound at the first sample: a strike only if the level then falls.
        first = x[: max(1, int(0.05 * fs))]
        last = x[int(0.8 * x.size) :]
        drop = _db_power(float(np.mean(first * first))) - _db_power(float(np.mean(last * last)))
        if drop < 6.0 and not _steady_decay(x):
            found = False
            n0 = 0
            warnings.append(
                f"no strike found: sound is present from the first sample and the level "
                f"falls by only {drop:.1f} dB to the end (steady sound or noise); "
                "analysing from the first sample"
            )
        else:
            head = x[: max(1, one_ms // 2)]
            body = x[one_ms // 2 : 3 * one_ms]
            p_head = float(np.mean(head * head))
            p_body = float(np.mean(body * body)) if body.size else p_head
            if p_body > 0 and p_head >= p_body * 0.1:
                starts_loud = True
                n0 = 0
                warnings.append(
                    "the file starts at full level with no lead-in: the strike is taken at "
                    "t = 0 and there is no attack to skip; if the recording was cut "
                    "mid-ring, amplitudes refer to the cut"
                )
    env = moving_average(x[n0 : n0 + int(0.05 * fs) + one_ms] ** 2, one_ms)
    # The attack is over once the 1 ms envelope first comes within 3 dB of its
    # largest value in the 50 ms after the onset.
    peak_n = n0 + (int(np.argmax(env >= 0.5 * env.max())) if env.size else 0)
    seg = x[n0 : n0 + max(1, int(0.02 * fs))]
    level = _db_power(float(np.mean(seg * seg)))
    peak_s = peak_n / fs
    return StrikeOnset(
        found=found,
        onset_s=n0 / fs,
        peak_s=peak_s,
        attack_end_s=min(peak_s + attack_margin_s, x.size / fs),
        next_onset_s=next_onset,
        level_dbfs=level,
        starts_loud=starts_loud,
        warnings=tuple(warnings),
    )


def find_strike(signal, sample_rate: float, *, attack_margin_s: float = 0.01) -> StrikeOnset:
    """Locate the strike in a recording of one struck bar and the end of its attack.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Audio; several channels are averaged.
    sample_rate : float
        Hz, > 0.
    attack_margin_s : float, default 0.01
        Time added after the envelope peak before the decay counts as free, s.
        Mallet contact lasts 0.3-3 ms (physics note, section 10); the margin also
        lets early reflections from a nearby floor or wall pass.

    Returns
    -------
    StrikeOnset
        The loudest onset (by the level of the 20 ms after it), the end of its
        attack, the next onset after it, and warnings: none found, several
        strikes, a file that starts at full level.

    Raises
    ------
    AudioError
        Unusable input, including digital silence.
    """
    if not attack_margin_s >= 0:
        raise ConfigError(f"attack_margin_s = {attack_margin_s!r}: must be >= 0 s")
    prep = prepare(signal, sample_rate, what="strike detection")
    strike = strike_in(prep.samples, prep.sample_rate, attack_margin_s=attack_margin_s)
    return StrikeOnset(**{**strike.__dict__, "warnings": prep.warnings + strike.warnings})


FADE_DROP_DB: Final[float] = 6.0
"""A recording's end counts as faded (or damped) when its level stays this far below
the straight line of the decay before it, through to the last frame."""

FADE_END_DB: Final[float] = 20.0
"""... and its last frame lies at least this far below that line."""


def find_fade_out(signal, sample_rate: float, start_s: float, *,
                  frame_s: float = 0.01) -> float | None:
    """Where a fade-out (or a hand damping the bar) begins at a recording's end, s.

    A free decay of several partials falls ever more slowly in dB (the fast
    partials go first), so its level stays above the straight line fitted to the
    first 60 % of the decay.  An end whose 10 ms RMS level stays
    :data:`FADE_DROP_DB` below that line through to the last frame, and ends
    :data:`FADE_END_DB` below it, was cut short by a fade or a damper.  A
    symmetric fade is half-way down (-6 dB) at its middle, so the fade is taken to
    start the length of the below-line run again before that run.

    Returns None when the end is a free decay (or noise, which lies above the line).
    """
    x = np.asarray(signal, dtype=float)
    x = x if x.ndim == 1 else x.mean(axis=1)
    frame = max(1, int(round(frame_s * sample_rate)))
    i0 = int(math.ceil(start_s * sample_rate / frame))
    n = x.size // frame
    if n - i0 < 40:  # under 0.4 s of decay: nothing to compare with
        return None
    power = np.mean(x[:n * frame].reshape(n, frame) ** 2, axis=1)
    level = 10 * np.log10(np.maximum(power, 1e-30))
    m = i0 + int(0.6 * (n - i0))
    t = np.arange(n, dtype=float)
    slope, icpt = np.polyfit(t[i0:m], level[i0:m], 1)
    below = level < slope * t + icpt - FADE_DROP_DB
    if not below[-1] or level[-1] > slope * (n - 1) + icpt - FADE_END_DB:
        return None
    k = n - 1
    while k > m and below[k - 1]:
        k -= 1
    start = max(i0, k - (n - k))
    return start * frame / sample_rate
