"""Measure a struck bar from a recording, and fit a preset's loss model to it.

Command
-------
``barwright measure RECORDING [--note N] [--preset PRESET] [--reference-hz F]
[--max-partials K] [--channel C] [--json]``

Reads a recording of one struck bar (WAV, FLAC, AIFF, ... anything libsndfile
reads; several channels are averaged, with a warning, unless ``--channel``
picks one) and lists its partials
(:func:`synth.analysis.find_partials`): frequency, the nearest equal-tempered
note and the cents off it, Q, T60 and the level at the strike (dB re full
scale).  With ``--note`` the partial nearest the note (within 100 cents) is
taken as the fundamental, and each partial also gets its ratio to that
fundamental and its interval above the named note in cents (``cents_from_note``:
2400 is two octaves, 3996 the ratio 10.08).  ``--reference-hz`` is A4 (default:
the ``reference_pitch_hz`` of ``--preset`` or ``--calibrate``, else 440 Hz, ISO
16; the header names the source).  A partial that is not beating and decays
slowly is measured by complex demodulation (:func:`demodulated_decay`), which
works when the file holds only a few dB of its decay and gives Q's standard
error (``q_rel_se``).  A tremolo (:func:`find_tremolo`: the motor's discs
pulsing the tube mouths) stops the measurement with its rate and depth: the
modulated decay would give false partials and Qs.
``--json`` prints ``{"partials": [{"frequency_hz", "q", "t60_s", "level_db",
"note", "cents", "ratio", "cents_from_note", ...}], "warnings": [...]}``.

Everything that makes a number doubtful is printed as a warning line on stderr
(and listed under ``warnings`` in JSON): clipping in the attack, several
channels, a low level, a second strike, split (beating) partials, decays taken
from the subspace estimate, a named note with no partial near it (wrong note,
or the file's sample rate is wrong).  Input that cannot give a meaningful
number stops with one line on stderr and exit code 2: a missing or unreadable
file, silence, no strike (steady sound or noise), no partial above the noise,
clipping that reaches past the attack into the decay being fitted, channels
that cancel in their mean (more than 20 dB below the channels: pick one with
``--channel``), a named note above what the sample rate carries (0.45 x rate).

A folder
--------
``barwright measure FOLDER [--preset PRESET] [--plot PNG]`` measures every
recording in the folder, the note of each from its file name
(:func:`note_from_name`), and gives one table and one plot across the range
(:func:`measure_folder`, :func:`range_png`).

Tubes
-----
``barwright tubecal`` (:func:`calibrate_tube`) fits a note's tube terms: the
tube's pitch with its bar in place gives ``gap_calibration``, the bar's T60
without and with the tube gives ``coupling_calibration``; its file holds a
``[tubes]`` table that a calibration file may carry.

Calibration
-----------
``barwright measure RECORDING --calibrate PRESET --note N --out FILE [--force]
[--terms internal,cords,radiation] [--tolerance 0.03] [--no-tubes]``

The measured partials are matched to the preset model's modes of note N
(vertical bending 1-3 and torsional 1; each to the measured partial nearest in
frequency within ``--tolerance``, 3 % by default).  Each mode's loss is the sum
of the budget's terms (:mod:`synth.physics.losses`),

    1/Q_i = sum_t c_t eta_it,

linear in the calibration factors ``c_t``.  The factors of the fitted terms
(default internal, cords and radiation, plus tube when the preset has tubes and
``--no-tubes`` is not given: then the measured Q of vertical mode 1 is the Q of
the coupled bar-like pole, and ``eta_tube`` is the extra loss the tube gives
it) are solved by non-negative least squares on relative errors (Lawson &
Hanson), rows ``eta_it / y_i`` and right-hand side ``1 - sum_held c_t eta_it /
y_i`` with ``y_i = 1/Q_measured``; the other terms (thermoelastic and air) keep
the preset's factors (1 unless set).  A term is *not identifiable* when a 1 %
error in every measured Q could move its factor by more than 10 % (standard
error of the least-squares estimate, ``sqrt(diag((A^T A)^-1))``), or when the
fit drives it to zero; it is then held at the preset's factor, and a warning
says so.  The tube's share depends weakly on the bar's own loss (the added
damping is a Lorentzian in the detuning, physics.md section 8), so its column is
re-evaluated at the fitted bar loss until the factors settle.  If no factor is
identifiable, or a mode still misses its measured Q by more than 5 % after the
fit, the file gets per-mode Q overrides for that note instead (for vertical
mode 1 under a tube: the bare-bar Q that makes the coupled pole match).

The command prints, per matched mode, the measured Q, the model's Q before and
after and their errors in percent, then the factors, and writes the file
atomically (:func:`synth.io.write_bytes`); an existing file is kept unless
``--force``.  Record with the motor stopped: the fit assumes open tube mouths.

Calibration file
----------------
A TOML file with a header comment (what was measured, from which recording,
when, the before/after table) and one ``[damping]`` table::

    [damping.factors]
    internal = 1.6
    thermoelastic = 1.0
    radiation = 1.3
    cords = 0.7
    air = 1.0
    tube = 1.0

    [[damping.override]]      # only when a mode needed one
    note = "A4"
    kind = "vertical"         # vertical, lateral or torsional
    order = 2
    q = 5210.0

Each factor scales its loss term for every bar of the preset; an override sets
one mode's Q outright (``note = "*"`` for every note).

Stiffness
---------
When vertical 1-3 are all matched the same run fits the effective Young's
modulus and the per-partial factors left after it (:mod:`synth.physics.stiffness`)
against the voice plan's bare-bar frequencies (1-D times the preset's 3-D
table where it has one; under a tube the measured vertical 1 is taken back to
the bare bar by the model's pull), and writes them to a ``[stiffness]`` table
of the same file.  They multiply on top of the 3-D table:
``f = f_1D(E) k3D sqrt(E_eff / E) c_n``.  ``barwright tune`` re-tunes the range
with them.

One file for the shop
---------------------
A calibration file holds ``[damping]`` and ``[stiffness]`` (this command) and
``[tubes]`` (``barwright tubecal --out``).  Each command writes its own tables
into an existing file and keeps the others with their comment lines
(:func:`calibration_target`); a table the file already holds is replaced only
with ``--force``, and a file that is not a calibration file is refused.  A preset uses the file
through ``calibration_file`` in its own ``[damping]`` table, a path relative to
the preset; anything the preset's ``[damping]`` sets itself wins over the file::

    [damping]
    calibration_file = "lantern-street-bars-calibration.toml"

.. note:: ``factors.tube`` is applied by the loss budget (``barwright partials``
   shows it); the voice plan that renders strikes takes the tube's effect from
   the coupled bar-tube pair, so for renders the command also prints the
   ``[tubes] coupling_calibration`` that gives the same coupled Q.

References
----------
.. [1] Lawson, C. L. and Hanson, R. J., Solving Least Squares Problems,
   Prentice-Hall, 1974, ISBN 0-13-822585-0, chapter 23 (non-negative least
   squares; the algorithm of scipy.optimize.nnls).
.. [2] Q = pi f tau and T60 = tau ln 1000 for an amplitude ``exp(-t/tau)``
   (physics.md section 6).
.. [3] ISO 16:1975, Acoustics -- Standard tuning frequency (A4 = 440 Hz).
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any, cast

import numpy as np

from synth.analysis import find_partials, find_strike
from synth.analysis.checks import CLIP_LEVEL, CLIP_MIN_RUN
from synth.analysis.onset import find_fade_out
from synth.constants import LN_1000
from synth.errors import AudioError, ConfigError, ModelError
from synth.physics.instrument import Instrument
from synth.physics.losses import TERMS, Calibration
from synth.physics.stiffness import StiffnessFit, fit_stiffness
from synth.pitch import DEFAULT_REFERENCE_HZ, cents, nearest_note, note_to_hz
from synth.settings.damping import CalibrationTarget

MATCH_TOLERANCE = 0.03
"""Largest relative frequency difference between a model mode and the measured
partial matched to it (3 %: well above the model's tuning error of a few cents,
well below the spacing of bending and torsional modes) [common practice, no
source]."""

FUNDAMENTAL_WINDOW_CENTS = 100.0
"""A partial within this many cents of the named note is taken as its
fundamental (a bar more than a semitone off is not that note)."""

SENSITIVITY_LIMIT = 10.0
"""A factor is identifiable when a 1 % error in every measured Q moves it by at
most this many percent (standard error of the least-squares estimate)."""

RESIDUAL_LIMIT = 0.05
"""A mode whose fitted Q still misses the measured Q by more than this fraction
gets a per-mode override."""

DEFAULT_FIT_TERMS = ("internal", "cords", "radiation")
"""Terms fitted by default (``tube`` is added when the preset's tubes are on)."""

CALIBRATED_MODES = (("vertical", 1), ("vertical", 2), ("vertical", 3), ("torsional", 1))
"""Modes matched against the recording: bending 1-3 and torsion 1."""

CANCEL_DB = 20.0
"""The mean of several channels counts as cancelled when it lies this far below the
channels' power: the partials left in it are mostly noise [common practice, no
source]."""

SILENT_FACTOR = 1e-6
"""A fitted factor below this counts as driven to zero by the fit."""

WINDOW_S = 60.0
"""Longest stretch of a recording that is read and analysed, s.  A struck bar's
decay reaches the noise of a recording well within it (a fundamental of T60
30 s falls 120 dB in 60 s); a longer file is measured on the stretch around its
strike, so memory stays bounded whatever the file's length."""

LEAD_S = 5.0
"""In a longer file, seconds kept before the strike (the noise floor before it)."""

STRIKE_WITHIN_DB = 20.0
"""In a longer file, the strike is the first 10 ms frame whose peak comes within
this many dB of the file's loudest frame."""

_SCAN_HOPS = 2048


# --------------------------------------------------------------------------------------
# Measuring
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MeasuredPartial:
    """One partial of a recording.

    Attributes
    ----------
    frequency_hz : float
        Hz.
    q : float
        ``pi f tau``; ``inf`` when no decay was measurable.
    t60_s : float
        ``tau ln 1000``, s.
    decay_per_s : float
        ``1/tau``, 1/s.
    q_rel_se : float
        Standard error of Q relative to Q (equal to that of the decay rate),
        from the demodulated fit's residuals; NaN for the other methods.
    level_db : float
        Amplitude at the strike onset, dB re full scale.
    note : str
        Nearest equal-tempered note at the reference pitch.
    cents : float
        Offset from that note, cents (positive: sharp).
    ratio : float or None
        Frequency over the fundamental's (with a named note whose fundamental
        was found).
    cents_from_note : float or None
        Interval above the named note, cents.
    snr_db : float
        Band signal-to-noise ratio at the start of the analysis, dB.
    decay_method : str
        ``"demodulated"`` (:func:`demodulated_decay`, for a partial not
        beating that decays slowly, :data:`DEMOD_SETTLE_DB`, or whose envelope
        fit was unusable, when fitted within :data:`DEMOD_MAX_SE`), else
        ``"envelope"`` or ``"subspace"`` (see :class:`synth.analysis.Partial`).
    beating : bool
        The partial beats against a neighbour or is one of a split pair.
    """

    frequency_hz: float
    q: float
    t60_s: float
    decay_per_s: float
    q_rel_se: float
    level_db: float
    note: str
    cents: float
    ratio: float | None
    cents_from_note: float | None
    snr_db: float
    decay_method: str
    beating: bool

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return dict(self.__dict__)


@dataclass(frozen=True)
class Measurement:
    """The partials of one recorded strike.

    Attributes
    ----------
    recording : str
        File name (or a label for an array).
    sample_rate_hz : float
    n_channels : int
        Channels in the file.
    channel : int or None
        The channel analysed (None: the mean of all).
    duration_s : float
    onset_s : float
        Strike onset, s from the start of the file.
    band_hz : tuple of float
        Band searched, Hz.
    reference_hz : float
        A4 used for note names, Hz.
    note : str or None
        The named note.
    note_hz : float or None
        Its equal-tempered frequency, Hz.
    fundamental_hz : float or None
        The measured partial taken as the note's fundamental, Hz.
    partials : tuple of MeasuredPartial
        Sorted by frequency.
    warnings : tuple of str
        Everything that makes a number doubtful.
    """

    recording: str
    sample_rate_hz: float
    n_channels: int
    channel: int | None
    duration_s: float
    onset_s: float
    band_hz: tuple[float, float]
    reference_hz: float
    note: str | None
    note_hz: float | None
    fundamental_hz: float | None
    partials: tuple[MeasuredPartial, ...]
    warnings: tuple[str, ...]

    def to_dict(self) -> dict:
        """Plain values for JSON (partials as a list of records)."""
        return {
            "recording": self.recording,
            "sample_rate_hz": self.sample_rate_hz,
            "channels": self.n_channels,
            "channel": self.channel,
            "duration_s": self.duration_s,
            "onset_s": self.onset_s,
            "band_hz": list(self.band_hz),
            "reference_pitch_hz": self.reference_hz,
            "note": self.note,
            "note_hz": self.note_hz,
            "fundamental_hz": self.fundamental_hz,
            "partials": [p.to_dict() for p in self.partials],
            "warnings": list(self.warnings),
        }


def _clipped_after(x: np.ndarray, start: int) -> tuple[int, int]:
    """Clipped samples (runs of CLIP_MIN_RUN at full scale) from ``start`` on; first index."""
    x2 = x.reshape(x.shape[0], -1)[start:]
    total, first = 0, -1
    for c in range(x2.shape[1]):
        col = x2[:, c]
        for mask in (col >= CLIP_LEVEL, col <= -CLIP_LEVEL):
            if not mask.any():
                continue
            padded = np.concatenate(([False], mask, [False]))
            edges = np.flatnonzero(np.diff(padded.astype(np.int8)))
            lo, hi = edges[0::2], edges[1::2]
            long = (hi - lo) >= CLIP_MIN_RUN
            if long.any():
                total += int(np.sum((hi - lo)[long]))
                f = int(lo[long][0])
                first = f if first < 0 else min(first, f)
    return total, (start + first if first >= 0 else -1)


def measure_signal(signal, sample_rate: float, *, recording: str = "signal",
                   note: str | None = None, reference_hz: float = DEFAULT_REFERENCE_HZ,
                   max_partials: int = 12, channel: int | None = None) -> Measurement:
    """Measure the partials of one strike held in an array.

    Parameters
    ----------
    signal : array_like, shape (n_samples,) or (n_samples, n_channels)
        Samples, full scale 1.0; channels are averaged (with a warning).
    sample_rate : float
        Hz.
    recording : str
        Name used in messages.
    note : str, optional
        The note the bar is meant to be (scientific pitch notation).
    reference_hz : float
        A4, Hz.
    max_partials : int
        Keep at most this many partials, the strongest.
    channel : int, optional
        Analyse this channel alone (1 = the first); default: the mean of all.

    Returns
    -------
    Measurement

    Raises
    ------
    AudioError
        Unusable input: silence, no strike, no partials, clipping past the
        attack, channels that cancel in their mean, a named note above what the
        sample rate carries, and whatever :func:`synth.analysis.find_partials`
        refuses.
    ConfigError
        A bad note name or parameter.
    """
    note_hz = None
    if note is not None:
        note_hz = note_to_hz(note, reference_hz)
    fs = float(sample_rate)
    x = np.asarray(signal, dtype=float)
    n_ch = 1 if x.ndim == 1 else x.shape[1]
    if channel is not None:
        if not 1 <= channel <= n_ch:
            raise ConfigError(f"= {channel}: {recording} has {n_ch} channel(s); give 1.."
                              f"{n_ch}", source="--channel")
        signal = x if x.ndim == 1 else x[:, channel - 1]
    elif n_ch > 1:
        p_mix = float(np.mean(x.mean(axis=1) ** 2))
        p_ch = float(np.mean(x * x))
        if p_ch > 0 and p_mix < p_ch * 10 ** (-CANCEL_DB / 10):
            raise AudioError(
                f"{recording}: the mean of its {n_ch} channels lies "
                f"{10 * math.log10(max(p_mix, 1e-300) / p_ch):.0f} dB below the channels "
                "(opposite polarity or spaced microphones cancelling), so its partials would "
                "be noise; analyse one channel (--channel 1)")
    mono = np.asarray(signal, dtype=float)
    mono = mono if mono.ndim == 1 else mono.mean(axis=1)
    tremolo = find_tremolo(mono, fs)
    if tremolo is not None:
        raise AudioError(
            f"{recording}: tremolo found at {tremolo.rate_hz:.2f} Hz, depth "
            f"{100 * tremolo.depth:.0f} % (discs turning at {tremolo.motor_rev_per_s:.2f} rev/s, "
            "the mouths pulse twice per turn): the motor modulates the decay, so partials "
            "and Q would be false; stop the motor and record again")
    try:
        strike = find_strike(signal, fs)
        if note_hz is not None and note_hz >= 0.45 * fs:
            raise AudioError(
                f"{note} ({note_hz:.1f} Hz) lies above what a sample rate of {fs:g} Hz "
                f"carries ({0.45 * fs:g} Hz); record at >= {note_hz / 0.45 * 10:.0f} Hz to "
                "reach its partials")
        if not strike.found:
            raise AudioError(
                "no strike found (steady sound, noise, or a strike lost in noise): measure "
                "needs one strike with its decay; trim the lead-in or record closer")
        fade_s = find_fade_out(mono, fs, strike.attack_end_s)
        if fade_s is not None:  # the decay analysed ends where the fade begins
            cut = int(round(fade_s * fs))
            signal, mono = np.asarray(signal)[:cut], mono[:cut]
        res = find_partials(signal, fs, max_partials=max_partials)
    except AudioError as exc:
        raise AudioError(f"{recording}: {exc}") from None
    n_clip, first = _clipped_after(np.asarray(signal, dtype=float),
                                   int(round(res.analysis_start_s * fs)))
    if n_clip:
        raise AudioError(
            f"{recording}: clipped after the attack ({n_clip} samples at full scale from "
            f"{first / fs:.3f} s, inside the decay analysed from {res.analysis_start_s:.3f} "
            "s): levels and Q would be wrong; record again with less gain")
    if not res.partials:
        why = "; ".join(w for w in res.warnings if w.startswith("no partials")) or \
            "no partial stands above the noise"
        raise AudioError(f"{recording}: {why}")
    warnings = list(res.warnings)
    if fade_s is not None:
        warnings.append(f"the recording fades out (or is damped) from {fade_s:.2f} s: "
                        "analysed up to there")
    if fs < 44100:
        warnings.append(f"sample rate {fs:g} Hz: partials above {0.45 * fs:g} Hz are not "
                        "analysed (upper bar partials reach 10 times the fundamental and more); "
                        "record at 44.1 kHz or more")
    fundamental = None
    if note_hz is not None:
        off = [(abs(float(cents(p.frequency_hz, note_hz))), p) for p in res.partials]
        best = min(off, key=lambda t: t[0])
        if best[0] <= FUNDAMENTAL_WINDOW_CENTS:
            fundamental = best[1].frequency_hz
        else:
            warnings.append(
                f"no partial within {FUNDAMENTAL_WINDOW_CENTS:.0f} cents of {note} "
                f"({note_hz:.2f} Hz; nearest {best[1].frequency_hz:.2f} Hz, "
                f"{float(cents(best[1].frequency_hz, note_hz)):+.0f} cents): ratios are not "
                "given; check the note, the reference pitch and the file's sample rate")
    partials = []
    freqs = [p.frequency_hz for p in res.partials]
    for p in res.partials:
        f, decay, q, t60, how, q_se = (p.frequency_hz, p.decay_per_s, p.q, p.t60_s,
                                       p.decay_method, math.nan)
        slow = None
        if not p.beating and math.isfinite(res.analysis_end_s):
            gap = min([abs(g - f) for g in freqs if g != f] or [math.inf])
            band = min(DEMOD_HALF_BAND_HZ, gap / 4)
            slow = demodulated_decay(mono, fs, f, res.analysis_start_s, res.analysis_end_s,
                                     half_band_hz=band)
            # slow enough that the filter's settling (3/band s, dropped) costs
            # little of the decay: else the envelope fit covers more of it
            if slow is not None and slow.decay_per_s * 3.0 / band * 20 / math.log(10) > \
                    DEMOD_SETTLE_DB and p.decay_method == "envelope":
                slow = None
        if slow is not None and slow.decay_per_s > 0 and \
                slow.decay_se_per_s < DEMOD_MAX_SE * slow.decay_per_s:
            f, decay, how = slow.frequency_hz, slow.decay_per_s, "demodulated"
            q, t60 = math.pi * f / decay, LN_1000 / decay
            q_se = slow.decay_se_per_s / decay
        name, off_cents = nearest_note(f, reference_hz)
        partials.append(MeasuredPartial(
            frequency_hz=f, q=q, t60_s=t60, decay_per_s=decay, q_rel_se=q_se,
            level_db=p.level_db, note=name, cents=off_cents,
            ratio=f / fundamental if fundamental else None,
            cents_from_note=float(cents(f, note_hz)) if note_hz else None,
            snr_db=p.snr_db, decay_method=how, beating=p.beating))
    if fundamental is not None:  # refer ratios to the refined frequency
        f0 = fundamental
        f1 = min(partials, key=lambda q: abs(q.frequency_hz - f0)).frequency_hz
        partials = [replace(q, ratio=q.frequency_hz / f1) for q in partials]
        fundamental = f1
    return Measurement(
        recording=recording, sample_rate_hz=fs, n_channels=n_ch, channel=channel,
        duration_s=x.shape[0] / fs,
        onset_s=res.onset_s, band_hz=(res.fmin_hz, res.fmax_hz), reference_hz=reference_hz,
        note=note, note_hz=note_hz, fundamental_hz=fundamental, partials=tuple(partials),
        warnings=tuple(warnings))


def measure_file(path, **kwargs) -> Measurement:
    """Read a recording (:func:`synth.io.read_audio`) and measure it (:func:`measure_signal`).

    A file up to :data:`WINDOW_S` long is read whole.  From a longer one only
    the :data:`WINDOW_S` seconds from :data:`LEAD_S` before its strike are read
    (the strike is located in a scan that holds one block at a time), so the
    memory needed does not grow with the file; the measurement is then that of
    this stretch, with times referred to the file's start and a warning naming
    the stretch.
    """
    from synth.io import audio_info, read_audio

    frames, rate, _ = audio_info(path)
    window = int(round(WINDOW_S * rate))
    if frames <= window:
        samples, rate = read_audio(path)
        if samples.shape[1] == 1:
            samples = samples[:, 0]
        return measure_signal(samples, rate, recording=str(path), **kwargs)
    start = _window_start(path, frames, rate, window)
    samples, rate = read_audio(path, start=start, stop=start + window)
    if samples.shape[1] == 1:
        samples = samples[:, 0]
    m = measure_signal(samples, rate, recording=str(path), **kwargs)
    note = (f"long recording ({frames / rate:.1f} s): measured on the {WINDOW_S:g} s from "
            f"{start / rate:.2f} s, around the strike")
    return replace(m, duration_s=frames / rate, onset_s=m.onset_s + start / rate,
                   warnings=(*m.warnings, note))


def _window_start(path, frames: int, rate: int, window: int) -> int:
    """First frame of the analysed stretch of a long file: LEAD_S before its strike."""
    from synth.io import read_audio

    hop = max(1, rate // 100)
    step = hop * _SCAN_HOPS  # blocks of whole frames
    peaks = []
    for first in range(0, frames, step):
        block, _ = read_audio(path, start=first, stop=min(frames, first + step))
        a = np.max(np.abs(block), axis=1)
        n = -(-a.size // hop) * hop
        a = np.concatenate([a, np.zeros(n - a.size)])
        peaks.append(a.reshape(-1, hop).max(axis=1))
    env = np.concatenate(peaks)
    loud = float(env.max())
    strike = int(np.flatnonzero(env >= loud * 10 ** (-STRIKE_WITHIN_DB / 20))[0]) * hop
    return int(min(max(0, strike - int(round(LEAD_S * rate))), frames - window))


# --------------------------------------------------------------------------------------
# Slow decays and tremolo
# --------------------------------------------------------------------------------------

DEMOD_HALF_BAND_HZ = 4.0
"""Half-width of the low-pass after complex demodulation, Hz: far wider than a
bar partial's own bandwidth (f/Q, hundredths of a hertz) and than the error of
the subspace frequency it starts from, far narrower than the spacing of bar
partials, so each block average holds one partial and little noise."""

DEMOD_SETTLE_DB = 6.0
"""A partial that falls less than this within the demodulation filter's
settling time is measured by :func:`demodulated_decay` (which also gives Q's
standard error); a faster one keeps the envelope fit, which then spans a wide
range of its decay."""

DEMOD_MAX_SE = 0.1
"""The demodulated fit is used only when the standard error of its decay rate
is below this fraction of the rate."""

TREMOLO_MIN_DEPTH = 0.1
"""Amplitude-modulation depth ``(A_max - A_min)/(A_max + A_min)`` from which a
periodic envelope counts as tremolo (10 %: discs in the tube mouths give tens of
per cent, physics.md section 9; the demo's renders without the motor show at
most 1 % in the tremolo band, a weak partial beating a few per cent)."""

TREMOLO_BAND_HZ = (0.5, 15.0)
"""Envelope-spectrum band searched for tremolo, Hz (modulation ~1-12 Hz,
physics.md section 9, with margin; faster envelope ripple is beating between
partials, not the discs)."""


TREMOLO_RANGE_DB = 40.0
"""Envelope range searched for tremolo, dB below the loudest frame."""


@dataclass(frozen=True)
class SlowDecay:
    """Frequency and decay of one partial by complex demodulation.

    Attributes
    ----------
    frequency_hz, frequency_se_hz : float
        Frequency and its standard error, Hz.
    decay_per_s, decay_se_per_s : float
        Amplitude decay rate ``1/tau`` and its standard error, 1/s.
    span_s : float
        Stretch fitted, s.
    range_db : float
        Level fallen over the stretch, dB.
    """

    frequency_hz: float
    frequency_se_hz: float
    decay_per_s: float
    decay_se_per_s: float
    span_s: float
    range_db: float


def demodulated_decay(x: np.ndarray, fs: float, f0_hz: float, start_s: float, end_s: float,
                      *, half_band_hz: float = DEMOD_HALF_BAND_HZ,
                      min_snr_db: float = 10.0) -> SlowDecay | None:
    """Fit one partial's frequency and decay by complex demodulation.

    The signal is shifted down by ``f0_hz`` (``x exp(-2 pi i f0 t)``), low-passed
    (4th-order Butterworth, zero phase, cut-off ``half_band_hz``) and sampled
    once per ``1/(2 half_band_hz)``, so successive samples carry nearly
    independent noise.  Its log magnitude is a line of slope ``-1/tau`` and its
    unwrapped phase a line of slope ``2 pi (f - f0)``; both lines are fitted by
    least squares weighted by the squared magnitude (the variance of ``ln|z|``
    and of the phase is ``sigma^2/(2|z|^2)`` for white noise), over the stretch
    where the magnitude stands ``min_snr_db`` above the noise.  Standard errors
    come from the fit's residuals.  This measures a decay that falls only a few
    dB within the file, where an envelope fit over a decibel range cannot.

    Parameters
    ----------
    x : ndarray
        Mono samples.
    fs : float
        Sample rate, Hz.
    f0_hz : float
        Starting frequency (within ``half_band_hz / 2`` of the partial), Hz.
    start_s, end_s : float
        Stretch to use, s from the first sample.
    half_band_hz : float
        Low-pass cut-off, Hz.
    min_snr_db : float
        Keep samples whose magnitude is this far above the noise magnitude.

    Returns
    -------
    SlowDecay or None
        None when fewer than 8 samples stand above the noise.

    References
    ----------
    .. [1] Bingham, C., Godfrey, M. D. and Tukey, J. W., "Modern techniques of
       power spectrum estimation", IEEE Trans. Audio Electroacoust. 15(2),
       56-66, 1967 (complex demodulation; from memory).
    """
    import scipy.signal as ss

    n0, n1 = int(round(start_s * fs)), int(round(end_s * fs))
    seg = np.asarray(x[n0:n1], dtype=float)
    if seg.size < fs / half_band_hz * 6:
        return None
    t = np.arange(seg.size) / fs
    z = seg * np.exp(-2j * np.pi * f0_hz * t)
    sos = ss.butter(4, half_band_hz, fs=fs, output="sos")
    z = ss.sosfiltfilt(sos, z.real) + 1j * ss.sosfiltfilt(sos, z.imag)
    step = max(1, int(fs / (2.0 * half_band_hz)))
    # filter transients: the stretch starts at full level (a step into the
    # filter), so more is dropped at the start than at the end
    idx = np.arange(int(3.0 * fs / half_band_hz), seg.size - int(1.5 * fs / half_band_hz), step)
    if idx.size < 8:
        return None
    zs = z[idx]
    ts = t[idx]
    mag = np.abs(zs)
    # noise magnitude of the band, from the residual about a first line fit
    phase = np.unwrap(np.angle(zs))
    keep = mag > 0
    for _ in range(2):
        w = mag[keep] ** 2
        a_ln = np.polyfit(ts[keep], np.log(mag[keep]), 1, w=np.sqrt(w))
        model = np.exp(np.polyval(a_ln, ts))
        a_ph = np.polyfit(ts[keep], phase[keep], 1, w=np.sqrt(w))
        resid = zs - model * np.exp(1j * np.polyval(a_ph, ts))
        # successive samples carry independent noise; a slow misfit (beating)
        # cancels in their difference, whose squared magnitude is exponential
        # with mean 4 sigma^2 (median 4 sigma^2 ln 2, robust to a stray sample)
        sigma = float(np.sqrt(np.median(np.abs(np.diff(resid[keep])) ** 2)
                              / (4.0 * math.log(2.0))))
        keep = mag > sigma * 10 ** (min_snr_db / 20.0)
        if keep.sum() < 8:
            return None
    tk, mk, w = ts[keep], mag[keep], mag[keep] ** 2
    # weighted least squares: var(ln|z|) = var(phase) = sigma^2 / (2 |z|^2)
    W = w / w.sum()
    tbar = float(np.sum(W * tk))
    sxx = float(np.sum(w * (tk - tbar) ** 2))
    r_ln = np.log(mk) - np.polyval(a_ln, tk)
    r_ph = phase[keep] - np.polyval(a_ph, tk)
    dof = max(1, tk.size - 2)
    s2_ln = float(np.sum(w * r_ln**2)) / dof
    s2_ph = float(np.sum(w * r_ph**2)) / dof
    decay = -float(a_ln[0])
    return SlowDecay(
        frequency_hz=float(f0_hz + a_ph[0] / (2 * np.pi)),
        frequency_se_hz=float(math.sqrt(s2_ph / sxx) / (2 * np.pi)),
        decay_per_s=decay, decay_se_per_s=float(math.sqrt(s2_ln / sxx)),
        span_s=float(tk[-1] - tk[0]), range_db=float(decay * (tk[-1] - tk[0]) * 20 / math.log(10)))


@dataclass(frozen=True)
class Tremolo:
    """A periodic amplitude modulation of the strike (a motor running).

    Attributes
    ----------
    rate_hz : float
        Modulation rate (envelope-spectrum peak), Hz.
    depth : float
        ``(A_max - A_min)/(A_max + A_min)`` of the modulation, 0..1.
    """

    rate_hz: float
    depth: float

    @property
    def motor_rev_per_s(self) -> float:
        """Disc rate that gives this modulation: ``f_mod = 2 f_rot`` (physics.md section 9)."""
        return self.rate_hz / 2.0


def find_tremolo(x: np.ndarray, fs: float, *, min_depth: float = TREMOLO_MIN_DEPTH
                 ) -> Tremolo | None:
    """Look for tremolo in a strike: the peak of the envelope's spectrum.

    The envelope is the rms of 5 ms frames from the loudest frame on, up to
    the last frame within :data:`TREMOLO_RANGE_DB` of the loudest.  Its log is
    detrended by a quadratic (the decay, possibly bent by beating), and the
    remainder's spectrum (Hann window, zero-padded) is searched in
    :data:`TREMOLO_BAND_HZ`.  For ``A (1 + m cos(2 pi f t))`` the log envelope
    swings by ``m`` nepers to first order, so the spectral peak's amplitude
    gives the depth; the depth is then taken exactly from the swing of the log
    envelope averaged over the modulation's phase (``(e^d - 1)/(e^d + 1)`` for
    a peak-to-trough swing of ``d`` nepers).  Needs three periods.

    Returns
    -------
    Tremolo or None
        None when no modulation of at least ``min_depth`` is present.

    References
    ----------
    .. [1] physics.md section 9: depth ``(A_max - A_min)/(A_max + A_min)`` on the
       envelope, rate at the envelope-spectrum peak, ``f_mod = 2 f_rot``.
    """
    hop = max(1, int(round(0.005 * fs)))
    n = x.size // hop
    if n < 40:
        return None
    env = np.sqrt(np.mean(x[: n * hop].reshape(n, hop) ** 2, axis=1)) + 1e-300
    k0 = int(np.argmax(env)) + 4  # past the attack
    # the decay's first 40 dB: well above the noise of any usable recording, so the
    # floor's flat tail cannot bend the detrended envelope into a slow "cycle"
    above = np.flatnonzero(env[k0:] > env.max() * 10 ** (-TREMOLO_RANGE_DB / 20))
    k1 = k0 + int(above[-1]) + 1 if above.size else k0
    e = np.log(env[k0:k1])
    t = np.arange(e.size) * hop / fs
    lo, hi = TREMOLO_BAND_HZ
    if t.size < 8 or t[-1] < 3.0 / hi:
        return None
    r = e - np.polyval(np.polyfit(t, e, 2), t)
    n_fft = 1 << int(math.ceil(math.log2(max(8 * r.size, 4096))))
    win = np.hanning(r.size)
    spec = np.abs(np.fft.rfft(r * win, n_fft)) * 2 / win.sum()
    freqs = np.fft.rfftfreq(n_fft, hop / fs)
    band = (freqs >= max(lo, 3.0 / t[-1])) & (freqs <= hi)
    if not band.any():
        return None
    i = int(np.flatnonzero(band)[np.argmax(spec[band])])
    rate = float(freqs[i])
    if 0 < i < spec.size - 1:  # parabolic interpolation of the peak
        a, b, c = spec[i - 1], spec[i], spec[i + 1]
        den = a - 2 * b + c
        if den < 0:
            rate += float(0.5 * (a - c) / den) * float(freqs[1])
    # depth from the phase-averaged cycle of the log envelope
    phase = (t * rate) % 1.0
    bins = np.minimum((phase * 16).astype(int), 15)
    cycle = np.array([r[bins == b].mean() for b in range(16) if np.any(bins == b)])
    d = float(cycle.max() - cycle.min())
    depth = (math.exp(d) - 1.0) / (math.exp(d) + 1.0)
    if depth < min_depth or spec[i] < 0.5 * min_depth:
        return None
    return Tremolo(rate_hz=rate, depth=depth)


# --------------------------------------------------------------------------------------
# Calibrating
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ModeFit:
    """One model mode matched to a measured partial.

    Attributes
    ----------
    kind, order : str, int
        The mode.
    model_hz, measured_hz : float
        Frequencies, Hz (model: the coupled pole for vertical 1 under a tube).
    offset_cents : float
        Measured above model, cents.
    measured_q, q_before, q_after : float
        Measured Q and the model's Q before and after the calibration.
    eta : dict of str to float
        Uncalibrated loss factor of each term at the fitted state (``tube``: the
        tube's extra loss on the coupled pole).
    override_q : float or None
        The override written for this mode, if any (the bare-bar Q for
        vertical 1 under a tube).
    beating : bool
        The measured partial beats (its Q is less certain).
    """

    kind: str
    order: int
    model_hz: float
    measured_hz: float
    offset_cents: float
    measured_q: float
    q_before: float
    q_after: float
    eta: dict
    override_q: float | None
    beating: bool

    @property
    def label(self) -> str:
        """``vertical 2``."""
        return f"{self.kind} {self.order}"

    @property
    def error_before(self) -> float:
        """Model Q before over measured Q, minus 1."""
        return self.q_before / self.measured_q - 1.0

    @property
    def error_after(self) -> float:
        """Model Q after over measured Q, minus 1."""
        return self.q_after / self.measured_q - 1.0

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return {"kind": self.kind, "order": self.order, "model_hz": self.model_hz,
                "measured_hz": self.measured_hz, "offset_cents": self.offset_cents,
                "measured_q": self.measured_q, "q_before": self.q_before,
                "q_after": self.q_after, "error_before_percent": 100 * self.error_before,
                "error_after_percent": 100 * self.error_after, "loss_factors": dict(self.eta),
                "override_q": self.override_q, "beating": self.beating}


@dataclass(frozen=True)
class CalibrationFit:
    """Calibration factors (and overrides) fitted to one recorded note.

    Attributes
    ----------
    note : str
    preset : str
    recording : str
    measured_at : str
        UTC time of the fit, ISO 8601.
    recording_sha256 : str
        First 16 hex digits of the recording's SHA-256 ("" for arrays).
    tubes : bool
        The model had its tube (vertical 1 measured as the coupled pole).
    fitted_terms : tuple of str
        Terms whose factors were fitted.
    held_terms : tuple of str
        Terms asked for but not identifiable, held at the preset's factors.
    factors : dict of str to float
        Every term's factor as the file holds it.
    overrides : dict
        ``(note, kind, order) -> Q`` written to the file.
    modes : tuple of ModeFit
    unmatched : tuple of str
        Model modes with no measured partial, and why.
    sensitivity : dict of str to float
        Percent change of each fitted factor per 1 % error in every measured Q.
    condition_number : float
        Of the fitted columns, each scaled to unit length (1 is ideal).
    fallback : bool
        No factor was identifiable: overrides only.
    coupling_calibration : float or None
        ``[tubes] coupling_calibration`` that makes renders give the fitted
        coupled Q of vertical 1 (when the tube factor was fitted).
    warnings : tuple of str
    stiffness : StiffnessFit or None
        Effective modulus and per-partial factors (None when vertical 1-3 were
        not all matched).
    youngs_modulus_pa : float
        The preset material's E at its reference temperature, Pa (``E_eff`` is
        this times the fitted scale).
    """

    note: str
    preset: str
    recording: str
    measured_at: str
    recording_sha256: str
    tubes: bool
    fitted_terms: tuple[str, ...]
    held_terms: tuple[str, ...]
    factors: dict
    overrides: dict
    modes: tuple[ModeFit, ...]
    unmatched: tuple[str, ...]
    sensitivity: dict
    condition_number: float
    fallback: bool
    coupling_calibration: float | None
    warnings: tuple[str, ...]
    stiffness: StiffnessFit | None = None
    youngs_modulus_pa: float = math.nan

    def calibration(self) -> Calibration:
        """Return the file's content as a :class:`~synth.physics.losses.Calibration`."""
        return Calibration(dict(self.factors), dict(self.overrides), self.recording)

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return {
            "note": self.note, "preset": self.preset, "recording": self.recording,
            "recording_sha256": self.recording_sha256, "measured_at": self.measured_at,
            "tubes": self.tubes, "fitted_terms": list(self.fitted_terms),
            "held_terms": list(self.held_terms), "factors": dict(self.factors),
            "overrides": [{"note": n, "kind": k, "order": o, "q": q}
                          for (n, k, o), q in self.overrides.items()],
            "modes": [m.to_dict() for m in self.modes], "unmatched": list(self.unmatched),
            "sensitivity_percent_per_percent": dict(self.sensitivity),
            "condition_number": self.condition_number, "fallback": self.fallback,
            "coupling_calibration": self.coupling_calibration,
            "stiffness": None if self.stiffness is None else {
                **self.stiffness.to_dict(),
                "youngs_modulus_pa": self.youngs_modulus_pa * self.stiffness.youngs_scale},
            "warnings": list(self.warnings),
        }

    def tables(self) -> dict:
        """Return the tables this fit writes into a calibration file: damping, stiffness."""
        out = {"damping": self.calibration().to_table()}
        if self.stiffness is not None:
            out["stiffness"] = self.stiffness.to_table(
                youngs_modulus_pa=self.youngs_modulus_pa, note=self.note,
                recording=Path(self.recording).name)
        return out

    def header(self) -> list[str]:
        """Return the calibration file's header comment lines."""
        modes = ", ".join(m.label for m in self.modes)
        lines = [
            "# barwright calibration file, written by `barwright measure --calibrate`.",
            f"# Measured: {self.note} ({modes}) in {self.recording}"
            + (f" (sha256 {self.recording_sha256}...)" if self.recording_sha256 else ""),
            f"# Fitted {self.measured_at} against {self.preset}, tube "
            + ("on (vertical 1 measured as the coupled pole)" if self.tubes else "off"),
            "# Fitted terms: " + (", ".join(self.fitted_terms) or "none (Q overrides only)")
            + "; the other factors are the preset's.",
            "#",
            "# mode          model Hz  measured Hz  measured Q  Q before  Q after  "
            "error before  error after",
        ]
        for m in self.modes:
            lines.append(
                f"# {m.label:<12} {m.model_hz:9.2f}  {m.measured_hz:11.2f}  "
                f"{m.measured_q:10.0f}  {m.q_before:8.0f}  {m.q_after:7.0f}  "
                f"{100 * m.error_before:+11.1f}%  {100 * m.error_after:+10.1f}%")
        for u in self.unmatched:
            lines.append(f"# not matched: {u}")
        st = self.stiffness
        if st is not None:
            lines += [
                "#",
                "# [stiffness]: E_eff = E x youngs_modulus_scale fitted to vertical 1-3 (least "
                "squares in log-frequency);",
                "# factors = what is left per partial after E (geometric mean 1). They multiply "
                "the model's",
                "# frequencies on top of the preset's 3-D correction table: f = f_1D(E) x "
                "k3D x sqrt(scale) x factor.",
                f"# E x {st.youngs_scale:.5f} (+-{100 * st.scale_uncertainty:.3f} % from the "
                f"frequency resolution); residual rms {st.rms_residual_cents:.2f} cents",
            ]
        lines += [
            "#",
            "# Use it from a preset's [damping] table: calibration_file = \"<this file, "
            "relative to the preset>\";",
            "# factors or overrides the preset sets itself win over this file.",
        ]
        return lines

    def to_toml(self) -> str:
        """Return the calibration file: header comment, ``[damping]`` and ``[stiffness]``."""
        return calibration_text(self.header(), self.tables())


def _coupled_eta(pair, bar_eta: float, radiation_eta: float) -> float:
    """1/Q of the bar-like coupled pole when the bare bar has loss factor ``bar_eta``."""
    f = pair.bar_frequency_hz
    g = math.pi * f * bar_eta
    p = replace(pair, bar_decay_per_s=g,
                bar_radiation_decay_per_s=min(math.pi * f * radiation_eta, g))
    return 1.0 / p.modes().q[0]


def _bare_eta_for(pair, target_eta: float, tube_factor: float, radiation_share: float):
    """Bare-bar loss factor whose budget-style coupled loss equals ``target_eta``.

    Budget-style: ``eta + tube_factor (eta_coupled(eta) - eta)``.  None when the
    tube alone already loses more.
    """
    from scipy.optimize import brentq

    def h(e):
        return e + tube_factor * (_coupled_eta(pair, e, radiation_share * e) - e) - target_eta

    lo, hi = 1e-12, target_eta
    if h(lo) > 0 or h(hi) < 0:
        return None
    return brentq(h, lo, hi, xtol=1e-15, rtol=1e-12)


def _sig6(value: float) -> float:
    """Round to 6 significant digits (what the file holds and the check uses)."""
    return float(f"{float(value):.6g}")


def _explicit_factors(instrument: Instrument) -> set[str]:
    return set(instrument.tables.damping_factors_given)


def _match(measurement: Measurement, model_modes, tolerance: float, warnings: list[str]):
    """Pair model modes with measured partials: nearest first, each partial once."""
    unmatched: list[str] = []
    usable = []
    for i, (kind, order, f) in enumerate(model_modes):
        clash = [(k2, o2) for j, (k2, o2, f2) in enumerate(model_modes)
                 if j != i and abs(f2 / f - 1.0) <= tolerance]
        if clash:
            k2, o2 = clash[0]
            unmatched.append(f"{kind} {order} at {f:.1f} Hz: the model puts {k2} {o2} within "
                             f"{100 * tolerance:g} % of it, so the match would be ambiguous")
            continue
        usable.append((kind, order, f))
    pairs = []
    for kind, order, f in usable:
        for p in measurement.partials:
            d = abs(p.frequency_hz / f - 1.0)
            if d <= tolerance:
                pairs.append((d, (kind, order), p))
    pairs.sort(key=lambda t: t[0])
    taken_modes, taken_partials, out = set(), set(), {}
    for _, key, p in pairs:
        if key in taken_modes or id(p) in taken_partials:
            continue
        taken_modes.add(key)
        taken_partials.add(id(p))
        out[key] = p
    top = measurement.band_hz[1]
    for kind, order, f in usable:
        if (kind, order) in out:
            continue
        if f > top:
            why = (f"above the band this recording carries ({top:g} Hz at "
                   f"{measurement.sample_rate_hz:g} Hz)")
        else:
            why = (f"no measured partial within {100 * tolerance:g} %"
                   + (" (a strike on the centreline leaves torsion silent)"
                      if kind == "torsional" else
                      " (a strike at one of its nodes leaves it silent)"))
        unmatched.append(f"{kind} {order} at {f:.1f} Hz: {why}")
    for key, p in list(out.items()):
        if not (math.isfinite(p.q) and p.q > 0):
            warnings.append(f"{key[0]} {key[1]}: the partial at {p.frequency_hz:.2f} Hz shows "
                            "no measurable decay; left out of the fit")
            unmatched.append(f"{key[0]} {key[1]} at {p.frequency_hz:.1f} Hz: no measurable decay")
            del out[key]
        elif p.beating:
            warnings.append(f"{key[0]} {key[1]}: the partial at {p.frequency_hz:.2f} Hz beats "
                            "against a neighbour, so its Q is less certain")
    return out, unmatched


def _sensitivity(A: np.ndarray, factors: np.ndarray) -> np.ndarray | None:
    """Percent change of each factor per 1 % error in every Q (None if singular)."""
    if A.shape[0] < A.shape[1]:
        return None
    ata = A.T @ A
    if np.linalg.cond(ata) > 1e14:
        return None
    cov = np.linalg.inv(ata)
    return np.sqrt(np.maximum(np.diag(cov), 0.0)) / np.maximum(factors, 1e-300)


def calibrate(measurement: Measurement, instrument: Instrument, note: str, *,
              terms: tuple[str, ...] | None = None, tubes: bool = True,
              tolerance: float = MATCH_TOLERANCE, residual_limit: float = RESIDUAL_LIMIT,
              sensitivity_limit: float = SENSITIVITY_LIMIT) -> CalibrationFit:
    """Fit a preset's loss factors to one measured note.

    Parameters
    ----------
    measurement : Measurement
        The recording's partials (:func:`measure_file`).
    instrument : Instrument
        The preset (its bars solved).
    note : str
        The note that was recorded.
    terms : tuple of str, optional
        Terms to fit (default internal, cords, radiation, plus tube when the
        preset's tubes are on).
    tubes : bool
        The recording was made with the bar over its tube (False: bar alone).
    tolerance : float
        Largest relative frequency difference for a match (0 < tolerance < 0.2).
    residual_limit : float
        A mode still missing its measured Q by more than this fraction after the
        fit gets an override.
    sensitivity_limit : float
        Largest percent change of a factor per 1 % Q error for it to count as
        identifiable.

    Returns
    -------
    CalibrationFit

    Raises
    ------
    ConfigError
        A bad note, term or tolerance.
    AudioError
        No model mode matches a measured partial (wrong note, or the file's
        sample rate is wrong).
    """
    from synth.voicing import Voicer

    if not 0.0 < tolerance < 0.2:
        raise ConfigError(f"= {tolerance!r}: must be between 0 and 0.2 (a fraction)",
                          source="--tolerance")
    note = instrument.check_note(note)
    warnings: list[str] = []

    def voicer(cal):
        return Voicer(instrument, tubes=tubes, channels=1, calibration=cal,
                      motor_rate_rev_per_s=0.0)

    raw = voicer(Calibration()).model(note)
    coupled = raw.coupling is not None
    as_preset = voicer(None)
    preset_cal = as_preset.loss_calibration
    preset_rate = parse_motor_rate(instrument)
    if preset_rate > 0:
        warnings.append(f"the preset's motor runs at {preset_rate:g} rev/s: the fit assumes a "
                        "recording with the motor stopped and the tube mouths open")
    if terms is None:
        terms = DEFAULT_FIT_TERMS + (("tube",) if coupled else ())
    terms = tuple(dict.fromkeys(terms))
    for t in terms:
        if t not in TERMS:
            raise ConfigError(f"= {t!r}: unknown loss term; terms are " + ", ".join(TERMS),
                              source="--terms")
    if "tube" in terms and not coupled:
        raise ConfigError("= 'tube': this model has no tube ("
                          + ("--no-tubes given" if not tubes else "the preset has no [tubes]")
                          + "); leave tube out", source="--terms")
    if not terms:
        raise ConfigError("= '': name at least one term to fit", source="--terms")

    before = as_preset.model(note)
    budget_raw = {(b.kind, b.order): b for b in raw.budget}
    pair = raw.coupling.pair if coupled else None

    def model_freq(model, key):
        if key == ("vertical", 1) and model.coupling is not None:
            return model.coupling.pair.modes().frequency_hz[0]
        return budget_raw[key].frequency_hz

    def budget_q(model, cal, key):
        """Model Q as the loss budget gives it (tube term scaled by its factor)."""
        b = {(m.kind, m.order): m for m in model.budget}[key]
        eta = b.eta
        if key == ("vertical", 1) and model.coupling is not None:
            eta += cal.factor("tube") * model.tube_loss_factor()
        return 1.0 / eta

    model_modes = [(k, o, model_freq(raw, (k, o))) for k, o in CALIBRATED_MODES
                   if (k, o) in budget_raw]
    matched, unmatched = _match(measurement, model_modes, tolerance, warnings)
    if not matched:
        raise AudioError(
            f"{measurement.recording}: no measured partial lies within {100 * tolerance:g} % "
            f"of the model's modes of {note} ("
            + ", ".join(f"{k} {o} {f:.1f} Hz" for k, o, f in model_modes)
            + "): wrong note or preset, or the file's sample rate is wrong")
    keys = [k for k in CALIBRATED_MODES if k in matched]
    y = np.array([1.0 / matched[k].q for k in keys])

    explicit = _explicit_factors(instrument)
    for t in terms:
        if t in explicit:
            warnings.append(f"the preset's [damping] sets factors.{t} itself; it wins over a "
                            "calibration file, so remove it there to use the fitted value")
    for k in keys:
        if preset_cal.override(note, *k) is not None:
            warnings.append(f"the preset overrides the Q of {note} {k[0]} {k[1]}; the override "
                            "wins over the fitted factors for that mode")

    base = {t: preset_cal.factor(t) for t in TERMS}

    def eta_rows(bar_factors: dict) -> list[dict]:
        """Uncalibrated term values per matched mode (tube column at the given bar state)."""
        rows = []
        for k in keys:
            e = {t: v for t, v in budget_raw[k].terms.items() if t != "tube"}
            e["tube"] = 0.0
            if k == ("vertical", 1) and coupled:
                bar = sum(bar_factors[t] * e[t] for t in TERMS if t != "tube")
                rad = min(bar_factors["radiation"] * e["radiation"], bar)
                e["tube"] = _coupled_eta(pair, bar, rad) - bar
            rows.append(e)
        return rows

    state = dict(base)
    fit_terms = list(terms)
    held: list[str] = []
    sens_out: dict[str, float] = {}
    cond = math.nan
    notes: list[str] = []
    for _ in range(8):  # the tube column depends on the fitted bar loss
        notes = []
        fit_terms, held, sens_out, cond, solved = _solve(eta_rows(state), y, list(terms), base,
                                                         sensitivity_limit, notes)
        new_state = {**base, **solved}
        change = max(abs(new_state[t] - state[t]) / max(state[t], 1e-12) for t in TERMS)
        state = new_state
        if change < 1e-10:
            break
    warnings.extend(notes)
    fallback = not fit_terms
    rows = eta_rows(state)

    file_factors = {t: _sig6(state[t]) for t in TERMS}
    loaded = Calibration({**file_factors, **{t: base[t] for t in explicit if t in base}},
                         dict(preset_cal.overrides))
    predicted = {k: 1.0 / sum(loaded.factor(t) * rows[i][t] for t in TERMS)
                 for i, k in enumerate(keys)}
    overrides: dict[tuple[str, str, int], float] = {}
    for i, k in enumerate(keys):
        q_meas = matched[k].q
        miss = predicted[k] / q_meas - 1.0
        if not fallback and abs(miss) <= residual_limit:
            continue
        if not fallback:
            warnings.append(f"{k[0]} {k[1]}: the fitted factors give Q {predicted[k]:.0f} "
                            f"against {q_meas:.0f} measured ({100 * miss:+.1f} %); a Q override "
                            f"for {note} is written")
        if k == ("vertical", 1) and coupled:
            bar_rows = rows[i]
            bar = sum(loaded.factor(t) * bar_rows[t] for t in TERMS if t != "tube")
            share = loaded.factor("radiation") * bar_rows["radiation"] / bar if bar > 0 else 0.0
            e = _bare_eta_for(pair, 1.0 / q_meas, loaded.factor("tube"), min(share, 1.0))
            if e is None:
                warnings.append(f"vertical 1: the tube alone loses more than the measured Q "
                                f"{q_meas:.0f} allows; no override possible (check the tube "
                                "and its tuning, or measure without it and use --no-tubes)")
                continue
            overrides[(note, k[0], k[1])] = _sig6(1.0 / e)
        else:
            overrides[(note, k[0], k[1])] = _sig6(q_meas)
    if fallback:
        warnings.append("no loss factor is identifiable from the matched modes ("
                        + ", ".join(f"{k[0]} {k[1]}" for k in keys)
                        + f"); wrote per-mode Q overrides for {note} instead")

    # The model after: the file as a preset would load it (preset entries win), with
    # the stiffness the file records (every command predicts with it).
    stiffness = _stiffness_fit(measurement, matched, raw, budget_raw, warnings)
    after_cal = Calibration({**file_factors, **{t: base[t] for t in explicit}},
                            {**overrides, **preset_cal.overrides},
                            stiffness=None if stiffness is None else stiffness.as_written())
    after = voicer(after_cal).model(note)
    fits = []
    for i, k in enumerate(keys):
        p = matched[k]
        fits.append(ModeFit(
            kind=k[0], order=k[1], model_hz=model_freq(raw, k), measured_hz=p.frequency_hz,
            offset_cents=float(cents(p.frequency_hz, model_freq(raw, k))),
            measured_q=p.q, q_before=budget_q(before, preset_cal, k),
            q_after=budget_q(after, after_cal, k), eta=dict(rows[i]),
            override_q=overrides.get((note, k[0], k[1])), beating=p.beating))

    hint = None
    if "tube" in fit_terms and abs(state["tube"] - 1.0) > 1e-3 and ("vertical", 1) in keys:
        hint = _coupling_hint(after, after_cal, warnings)
    from synth.io import file_sha256_16

    return CalibrationFit(
        note=note, preset=instrument.source, recording=measurement.recording,
        measured_at=_dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        recording_sha256=file_sha256_16(measurement.recording), tubes=coupled,
        fitted_terms=tuple(fit_terms), held_terms=tuple(held), factors=file_factors,
        overrides=overrides, modes=tuple(fits), unmatched=tuple(unmatched),
        sensitivity=sens_out, condition_number=cond, fallback=fallback,
        coupling_calibration=hint, warnings=tuple(warnings), stiffness=stiffness,
        youngs_modulus_pa=instrument.material.youngs_modulus_pa)


def _stiffness_fit(measurement: Measurement, matched: dict, raw, budget_raw: dict,
                   warnings: list[str]) -> StiffnessFit | None:
    """Fit E_eff and the factors of vertical 1-3 (:mod:`synth.physics.stiffness`).

    The model frequencies are the voice plan's bare-bar partials, 3-D corrected when
    the preset has a table.  Under a tube the measured vertical 1 is the coupled
    pole: it is taken back to the bare bar by the model's pull (coupled over bare),
    held fixed.  Each measured frequency is known to the record's resolution 1/T.
    """
    wanted = [("vertical", n) for n in (1, 2, 3)]
    missing = [f"{k} {o}" for k, o in wanted if (k, o) not in matched]
    if missing:
        warnings.append("stiffness not fitted: it needs vertical 1-3 and "
                        + ", ".join(missing) + " did not match a measured partial")
        return None
    model = [budget_raw[k].frequency_hz for k in wanted]
    measured = [matched[k].frequency_hz for k in wanted]
    if raw.coupling is not None:
        pull = raw.coupling.pair.modes().frequency_hz[0] / model[0]
        measured[0] /= pull
        warnings.append(f"vertical 1 was measured under its tube: the stiffness fit takes "
                        f"the model's tube pull ({float(cents(pull, 1.0)):+.1f} cents) as "
                        "fixed; record the bar alone (--no-tubes) for the modulus")
    span = min(max(measurement.duration_s - measurement.onset_s, 1e-3), WINDOW_S)
    return fit_stiffness(model, measured, [1.0 / span] * 3)


def parse_motor_rate(instrument: Instrument) -> float:
    """Return the preset's motor rate in rev/s (0 without a [motor] table)."""
    return instrument.tables.motor[0].rate_rev_per_s


def _solve(rows, y, terms, base, sensitivity_limit, warnings):
    """NNLS on relative errors, dropping terms that are not identifiable.

    Returns (fitted terms, held terms, sensitivity %/%, condition number, factors).
    """
    from scipy.optimize import nnls

    active = list(terms)
    held: list[str] = []
    for t in list(active):
        share = max(r[t] / yi for r, yi in zip(rows, y, strict=True))
        if share < 1e-3:
            active.remove(t)
            held.append(t)
            warnings.append(f"{t}: no matched mode depends on it (at most {100 * share:.2g} % "
                            f"of any matched mode's loss); kept at {base[t]:g}")
    while active:
        A = np.array([[r[t] / yi for t in active] for r, yi in zip(rows, y, strict=True)])
        fixed = np.array([sum(base[t] * r[t] for t in r if t not in active)
                          for r in rows])
        b = 1.0 - fixed / y
        start = np.array([base[t] for t in active])
        sens = _sensitivity(A, start)
        if sens is None or np.max(sens) > sensitivity_limit:
            if sens is None:
                share = A.max(axis=0)
                worst = int(np.argmin(share))
                why = (f"the {len(rows)} matched mode(s) cannot separate "
                       f"{len(active)} terms")
            else:
                worst = int(np.argmax(sens))
                why = (f"a 1 % error in each measured Q would move its factor by "
                       f"{sens[worst]:.0f} %")
            t = active.pop(worst)
            held.append(t)
            warnings.append(f"{t} is not identifiable from these modes ({why}; the fit is "
                            f"ill-conditioned for it); kept at {base[t]:g}, so the other "
                            "factors absorb any error in it: fit it from another note or a "
                            "recording without the tube")
            continue
        x, _ = nnls(A, b)
        zero = [i for i, v in enumerate(x) if v < SILENT_FACTOR]
        if zero:
            t = active.pop(zero[0])
            held.append(t)
            warnings.append(f"{t}: the fit drives its factor to 0 (the other terms already "
                            f"explain the measured loss); not identifiable, kept at {base[t]:g}")
            continue
        sens = _sensitivity(A, x)
        if sens is None:  # not reached: it depends on A only, which passed above
            raise ModelError("the loss fit's sensitivity matrix became singular")
        if np.max(sens) > sensitivity_limit:
            worst = int(np.argmax(sens))
            t = active.pop(worst)
            held.append(t)
            warnings.append(f"{t} is not identifiable from these modes (fitted {x[worst]:.3g}; "
                            f"a 1 % error in each measured Q would move it by "
                            f"{sens[worst]:.0f} %); kept at {base[t]:g}")
            continue
        An = A / np.linalg.norm(A, axis=0)
        cond = float(np.linalg.cond(An))
        return (active, held, {t: float(s) for t, s in zip(active, sens, strict=True)}, cond,
                {t: float(v) for t, v in zip(active, x, strict=True)})
    return [], held, {}, math.nan, {}


def _coupling_hint(after, after_cal: Calibration, warnings: list[str]) -> float | None:
    """``[tubes] coupling_calibration`` giving the fitted coupled Q of vertical 1 in renders."""
    from synth.physics.coupling import calibrate_coupling

    b = after.fundamental
    target_eta = b.eta + after_cal.factor("tube") * after.tube_loss_factor()
    f = after.coupling.pair.bar_frequency_hz
    t60 = LN_1000 / (math.pi * f * target_eta)
    try:
        c = calibrate_coupling(after.coupling.bar, after.tube, bar_t60_with_tube_s=t60,
                               temperature_c=after.coupling.temperature_c)
    except ModelError as exc:
        warnings.append(f"no [tubes] coupling_calibration reproduces the fitted tube factor in "
                        f"renders ({exc})")
        return None
    return float(c)  # absolute: calibrate_coupling starts from an uncalibrated coupling


def calibration_text(header: list[str], tables: dict, kept: dict | None = None,
                     kept_header: list[str] | None = None) -> str:
    """Return a calibration file: header comments, then ``tables`` and the ``kept`` ones."""
    import tomli_w

    from synth.settings.damping import check_calibration_text

    lines = list(header)
    if kept:
        lines += ["#", "# Kept from the file as it was: [" + "], [".join(kept) + "]"]
        lines += kept_header or []
    body = tomli_w.dumps({**{k: v for k, v in kept.items() if k not in tables},
                          **tables} if kept else tables)
    text = "\n".join(lines) + "\n\n" + body
    check_calibration_text(text, "calibration file")  # the file must read back
    return text


def write_calibration(path, fit: CalibrationFit, *, target: CalibrationTarget | None = None,
                      force: bool = False) -> Path:
    """Write the calibration file atomically, into ``target``'s other tables when given.

    Without ``target`` an existing file is refused unless ``force``.
    """
    from synth.io import write_bytes

    if target is None:
        text = fit.to_toml()
    else:
        text = calibration_text(fit.header(), fit.tables(), target.kept, target.header)
    return write_bytes(path, text.encode("utf-8"), force=force or target is not None)


# --------------------------------------------------------------------------------------
# Tube calibration
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class TubeCalibration:
    """Gap correction and coupling strength of one note's tube, from measurements.

    Attributes
    ----------
    note : str
    tube_length_m : float
        The tube as cut (from the preset).
    tube_model_hz : float
        The uncalibrated model's tube pitch with the bar in place, Hz.
    tube_measured_hz : float
        Measured, Hz.
    gap_calibration : float
        ``[tubes] gap_calibration`` reproducing the measured tube pitch.
    tube_q : float
        The tube's Q in the calibrated model (wall and radiation losses).
    bar_hz : float
        Bar fundamental measured without the tube, Hz.
    bar_t60_bare_s, bar_t60_with_tube_s : float
        Measured T60 of the fundamental without and with the tube, s.
    coupling_calibration : float
        ``[tubes] coupling_calibration`` reproducing the T60 with tube.
    model_t60_with_tube_s : float
        The uncalibrated model's T60 with tube (for the measured bare T60), s.
    tube_measured_q : float or None
        The tube's Q measured from its own recording (None when its pitch was
        typed in); compare with ``tube_q``, the model's wall and radiation Q.
    warnings : tuple of str
    """

    note: str
    tube_length_m: float
    tube_model_hz: float
    tube_measured_hz: float
    gap_calibration: float
    tube_q: float
    bar_hz: float
    bar_t60_bare_s: float
    bar_t60_with_tube_s: float
    coupling_calibration: float
    model_t60_with_tube_s: float
    tube_measured_q: float | None = None
    warnings: tuple[str, ...] = ()

    def to_dict(self) -> dict:
        """Plain values for JSON."""
        return {**self.__dict__, "warnings": list(self.warnings)}

    def to_toml(self, preset: str, sources: tuple[str, ...],
                target: CalibrationTarget | None = None) -> str:
        """Return the ``[tubes]`` values to copy into the preset, with a header saying how.

        With ``target`` (an existing calibration file, :func:`calibration_target`) its
        other tables are kept.
        """
        tubes = {"gap_calibration": _sig6(self.gap_calibration),
                 "coupling_calibration": _sig6(self.coupling_calibration)}
        return calibration_text(self.header(preset, sources), {"tubes": tubes},
                                None if target is None else target.kept,
                                None if target is None else target.header)

    def header(self, preset: str, sources: tuple[str, ...]) -> list[str]:
        """Return the header comment lines of the tube calibration."""
        when = _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds")
        return [
            f"# Tube calibration of {preset}, note {self.note}, {when}",
            "# from " + ", ".join(sources),
            f"# tube with bar in place: measured {self.tube_measured_hz:.3f} Hz, uncalibrated "
            f"model {self.tube_model_hz:.3f} Hz "
            f"({float(cents(self.tube_measured_hz, self.tube_model_hz)):+.1f} cents)",
            f"# bar fundamental {self.bar_hz:.3f} Hz: T60 {self.bar_t60_bare_s:.2f} s bare, "
            f"{self.bar_t60_with_tube_s:.2f} s with its tube (uncalibrated model "
            f"{self.model_t60_with_tube_s:.2f} s)",
            "# name this file in the preset's [damping] table (calibration_file = ...), or",
            "# copy these keys into the preset's [tubes] table (the preset's own keys win)",
        ]


def _fundamental(m: Measurement, near_hz: float, what: str):
    """Return the measured partial within 6 % of ``near_hz`` with a finite T60."""
    cands = [p for p in m.partials if abs(p.frequency_hz / near_hz - 1) <= 0.06
             and math.isfinite(p.t60_s)]
    if not cands:
        raise AudioError(f"{m.recording}: no partial with a measurable decay within 6 % of "
                         f"the {what} ({near_hz:.1f} Hz): wrong note or file")
    return min(cands, key=lambda p: abs(p.frequency_hz / near_hz - 1))


def tube_model_hz(instrument: Instrument, note: str) -> float:
    """Return the uncalibrated model's pitch of a note's tube with its bar in place, Hz."""
    from synth.physics.tube import tube_mode
    from synth.voicing import Voicer

    v = Voicer(instrument, tubes=True, channels=1, calibration=None, motor_rate_rev_per_s=0.0)
    spec, ts = v.tube_spec(instrument.check_note(note)), v.tube_settings
    if spec is None or ts is None:
        raise ConfigError("has no [tubes] table: nothing to calibrate", source=instrument.source)
    return tube_mode(replace(spec, gap_calibration=1.0), temperature_c=v.temperature_c,
                     ka_correction=ts.ka_correction).frequency_hz


def tube_resonance(m: Measurement, model_hz: float) -> tuple[float, float]:
    """Return the frequency (Hz) and Q of the tube in a recording of it, bar in place.

    The partial nearest the model's pitch within 10 % (the bar-over-mouth
    correction is worth tens of cents, the model's tube pitch a few per cent at
    worst).
    """
    near = [p for p in m.partials if abs(p.frequency_hz / model_hz - 1) <= 0.10]
    if not near:
        raise AudioError(f"{m.recording}: no partial within 10 % of the tube's model pitch "
                         f"{model_hz:.1f} Hz (found "
                         + ", ".join(f"{p.frequency_hz:.1f}" for p in m.partials)
                         + " Hz): damp the bar and excite the tube (tap its side, clap over "
                         "it), or give --tube-hz")
    p = min(near, key=lambda p: abs(p.frequency_hz / model_hz - 1))
    return p.frequency_hz, p.q


def calibrate_tube(instrument: Instrument, note: str, *, tube_hz: float, bare: Measurement,
                   with_tube: Measurement, tube_q: float | None = None) -> TubeCalibration:
    """Fit a note's tube gap correction and coupling strength to measurements.

    ``tube_hz`` is the tube's first resonance measured with its bar in place
    (bar damped, tube excited: a tap on the tube or a sweep, see
    :func:`tube_resonance`; ``tube_q`` its measured Q, reported beside the
    model's); it fixes ``gap_calibration`` (:func:`synth.physics.tube.calibrate_gap`).  With that
    tube, the coupling rate that shortens the bar's measured bare T60 to the
    measured T60 with tube (exact eigenvalues of the coupled pair,
    :func:`synth.physics.coupling.coupling_rate_from_t60`, physics.md section 8)
    over the model's uncalibrated rate is ``coupling_calibration``.  Record with
    the motor stopped.
    """
    from synth.physics.coupling import couple, coupling_rate_from_t60
    from synth.physics.tube import calibrate_gap, tube_mode
    from synth.voicing import Voicer

    note = instrument.check_note(note)
    v = Voicer(instrument, tubes=True, channels=1, calibration=None, motor_rate_rev_per_s=0.0)
    model, ts = v.model(note), v.tube_settings
    if model.coupling is None or model.tube is None or ts is None:
        raise ConfigError("has no [tubes] table (or tubes are off): nothing to calibrate",
                          source=instrument.source)
    temp = model.coupling.temperature_c
    ka = ts.ka_correction
    spec = replace(model.tube, gap_calibration=1.0)
    f_model = tube_mode(spec, temperature_c=temp, ka_correction=ka).frequency_hz
    gap = calibrate_gap(spec, tube_hz, temperature_c=temp, ka_correction=ka)
    fitted = replace(spec, gap_calibration=gap)
    tm = tube_mode(fitted, temperature_c=temp, ka_correction=ka)
    bar_model = model.coupling.bar
    p_bare = _fundamental(bare, bar_model.frequency_hz, f"{note} fundamental (bare bar)")
    p_tube = _fundamental(with_tube, bar_model.frequency_hz, f"{note} fundamental (with tube)")
    warnings = []
    for p, m in ((p_bare, bare), (p_tube, with_tube)):
        if p.beating:
            warnings.append(f"{m.recording}: the fundamental beats; its T60 is an average")
    mu = coupling_rate_from_t60(bar_frequency_hz=p_bare.frequency_hz,
                                bar_t60_bare_s=p_bare.t60_s,
                                bar_t60_with_tube_s=p_tube.t60_s,
                                tube_frequency_hz=tm.frequency_hz, tube_q=tm.q)
    bar = replace(bar_model, frequency_hz=p_bare.frequency_hz,
                  q=math.pi * p_bare.frequency_hz * p_bare.t60_s / LN_1000)
    unc = couple(bar, spec, temperature_c=temp, ka_correction=ka)
    cal = couple(bar, fitted, temperature_c=temp, ka_correction=ka)
    return TubeCalibration(
        note=note, tube_length_m=spec.length_m, tube_model_hz=f_model, tube_measured_hz=tube_hz,
        gap_calibration=gap, tube_q=tm.q, bar_hz=p_bare.frequency_hz,
        bar_t60_bare_s=p_bare.t60_s, bar_t60_with_tube_s=p_tube.t60_s,
        coupling_calibration=mu / cal.coupling_rate_rad_s,
        model_t60_with_tube_s=unc.pair.modes().t60_s[0], tube_measured_q=tube_q,
        warnings=tuple(warnings))


# --------------------------------------------------------------------------------------
# A folder of recordings across the range
# --------------------------------------------------------------------------------------

AUDIO_SUFFIXES = (".wav", ".flac", ".aif", ".aiff", ".ogg")
"""File name endings read as recordings in a folder (case-insensitive)."""

_NOTE_IN_NAME = None


def note_from_name(name: str) -> str | None:
    """Return the note named in a file name (``A4``, ``F#3``, ``Bb5``, ``c#6``), or None.

    The last note-like token wins (``bar-07-A4.wav`` is A4); a token must not sit
    inside a longer word of letters (``take4`` names no note).
    """
    import re

    global _NOTE_IN_NAME
    if _NOTE_IN_NAME is None:
        _NOTE_IN_NAME = re.compile(
            r"(?<![A-Za-z])([A-Ga-g])(sharp|flat|#|b|s)?(-?[0-9])(?![0-9])")
    found = _NOTE_IN_NAME.findall(Path(name).stem)
    if not found:
        return None
    letter, accidental, octave = found[-1]
    acc = {"#": "#", "s": "#", "sharp": "#", "b": "b", "flat": "b"}.get(accidental, "")
    return f"{letter.upper()}{acc}{octave}"


@dataclass(frozen=True)
class RangeRow:
    """One recording of a folder: its note and the measurement (or why it failed)."""

    path: str
    note: str
    measurement: Measurement | None
    error: str | None

    def partial(self, ratio: float):
        """Return the partial nearest ``ratio`` times the fundamental (within 3 %), or None."""
        m = self.measurement
        if m is None or m.fundamental_hz is None:
            return None
        want = ratio * m.fundamental_hz
        near = [p for p in m.partials if abs(p.frequency_hz / want - 1) <= 0.03]
        return min(near, key=lambda p: abs(p.frequency_hz / want - 1)) if near else None

    def to_dict(self, ratios) -> dict:
        """Plain values for JSON: note, file, fundamental and the partials near the ratios."""
        out: dict[str, Any] = {"note": self.note, "file": self.path, "error": self.error}
        if self.measurement is not None:
            m = self.measurement
            out["fundamental_hz"] = m.fundamental_hz
            out["cents"] = (float(cents(m.fundamental_hz, m.note_hz)) if m.fundamental_hz
                            else None)
            out["partials"] = [None if (p := self.partial(r)) is None else p.to_dict()
                               for r in ratios]
            out["warnings"] = list(m.warnings)
        return out


def _measure_job(path: str, note: str, reference_hz: float, max_partials: int,
                 channel: int | None) -> Measurement:
    """:func:`measure_file` as a picklable job for :func:`synth.executor.run_jobs`."""
    return measure_file(path, note=note, reference_hz=reference_hz,
                        max_partials=max_partials, channel=channel)


def measure_folder(folder, *, reference_hz: float, ratios=(1.0, 4.0, 10.08),
                   max_partials: int = 12, channel: int | None = None,
                   workers: int | None = 1) -> tuple[list[RangeRow], list[str]]:
    """Measure every recording in a folder, the note of each taken from its file name.

    Returns the rows sorted by pitch and a list of files skipped (no note in the
    name).  A file that cannot be measured gets a row with its error; the others
    go on.  ``workers`` local processes measure the files (None: every core; 1:
    here, one after the other), or the Dask cluster that ``BARWRIGHT_SCHEDULER``
    names, whose workers must see the folder (:func:`synth.executor.run_jobs`).
    """
    from synth.executor import Job, run_jobs
    from synth.pitch import note_to_midi

    folder = Path(folder)
    files = sorted(p for p in folder.iterdir()
                   if p.is_file() and p.suffix.lower() in AUDIO_SUFFIXES)
    jobs, skipped = [], []
    for f in files:
        note = note_from_name(f.name)
        if note is None:
            skipped.append(f"{f.name}: no note in the file name (name it e.g. A4.wav)")
            continue
        try:
            note_to_midi(note)
        except ConfigError:
            skipped.append(f"{f.name}: {note} is not a note")
            continue
        jobs.append(Job((str(f), note), _measure_job,
                        (str(f), note, reference_hz, max_partials, channel)))
    rows = [RangeRow(*cast(tuple[str, str], r.key), r.value, r.error)
            for r in run_jobs(jobs, workers=workers)]
    rows.sort(key=lambda r: (note_to_midi(r.note), r.path))
    return rows, skipped


def range_png(rows: list[RangeRow], ratios, *, title: str = "") -> bytes:
    """Two panels across the range: cents of each partial off its target, and T60."""
    from synth.pitch import note_to_midi
    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    fig, (ax0, ax1) = plt.subplots(2, 1, figsize=(9, 6), sharex=True)
    for k, r in enumerate(ratios):
        xs, cs, ts = [], [], []
        for row in rows:
            p, m = row.partial(r), row.measurement
            if p is None or m is None:  # a partial comes with its measurement
                continue
            xs.append(note_to_midi(row.note))
            cs.append(float(cents(p.frequency_hz, r * m.note_hz)))
            ts.append(p.t60_s if math.isfinite(p.t60_s) else np.nan)
        ax0.plot(xs, cs, "o-", label=f"partial {k + 1} (x{r:g})")
        ax1.semilogy(xs, ts, "o-", label=f"partial {k + 1}")
    ax0.axhline(0.0, color="0.5", lw=0.8)
    ax0.set_ylabel("cents off target")
    ax1.set_ylabel("T60 s")
    ax1.set_xlabel("note")
    notes = [(note_to_midi(r.note), r.note) for r in rows]
    ax1.set_xticks([n for n, _ in notes], [s for _, s in notes], rotation=90, fontsize=7)
    ax0.legend(fontsize=8)
    ax0.set_title(title)
    return figure_png(fig)


# --- the measure command's choices: option checks, the instrument, the reference pitch ---

def check_keyboard_note(note: str) -> None:
    """Refuse a --note that is not on a keyboard (C0 to C9, see synth.pitch)."""
    from synth.pitch import note_to_midi

    try:
        note_to_midi(note)
    except ConfigError as exc:
        raise ConfigError(f"= {note!r}: {exc.detail}", source="--note") from None


def check_measure_options(*, plot: Path | None, note: str | None, calibrate: Path | None,
                          out: Path | None, terms: str | None, no_tubes: bool,
                          keep_overrides: bool, force: bool) -> CalibrationTarget | None:
    """Refuse options that do not go together for one recording; the file to calibrate."""
    if plot is not None:
        raise ConfigError("is only used when RECORDING is a folder", source="--plot")
    if note is not None:
        check_keyboard_note(note)
    if calibrate is not None:
        if note is None or out is None:
            raise ConfigError("needs --note (the note recorded) and --out (the calibration "
                              "file to write)", source="--calibrate")
        from synth.settings.damping import calibration_target

        return calibration_target(out, ("damping", "stiffness"), force=force)
    if out is not None:
        raise ConfigError("is only used with --calibrate PRESET", source="--out")
    if terms is not None or no_tubes or keep_overrides:
        raise ConfigError("is only used with --calibrate PRESET",
                          source="--terms" if terms is not None else
                          "--no-tubes" if no_tubes else "--keep-overrides")
    return None


def measure_instrument(calibrate: Path | None, preset: Path | None,
                       note: str | None) -> tuple[Instrument | None, str | None]:
    """Load the instrument named by --calibrate or --preset; the note in its spelling."""
    from synth.settings.instrument import load_instrument

    instrument = None
    if calibrate is not None:
        instrument = load_instrument(calibrate)
        note = instrument.check_note(cast(str, note))
    if preset is not None:
        if calibrate is not None:
            raise ConfigError("names the preset already given by --calibrate; give one of "
                              "them", source="--preset")
        instrument = load_instrument(preset)
        if note is not None:
            note = instrument.check_note(note)
    return instrument, note


def reference_pitch(reference_hz: float | None, instrument: Instrument | None,
                    preset_path: Path | None) -> tuple[float, str]:
    """Give A4 and where it came from: the option, the preset, or ISO 16's default."""
    ref = reference_hz or (instrument.reference_pitch_hz if instrument else
                           DEFAULT_REFERENCE_HZ)
    ref_from = ("--reference-hz" if reference_hz else
                f"{preset_path.name}" if preset_path is not None else
                "default, ISO 16; --preset or --reference-hz to change")
    return ref, ref_from


def calibration_terms(terms: str | None) -> tuple[str, ...] | None:
    """Split --terms into the loss terms to fit (None: the default set)."""
    if terms is None:
        return None
    return tuple(t.strip() for t in terms.split(",") if t.strip())


# --- the tubecal command's work: the tube's source, the measurements, the file ---

def check_tube_source(tube_hz: float | None, tube_recording: Path | None) -> None:
    """Refuse unless exactly one of --tube-hz and --tube-recording is given."""
    if (tube_hz is None) == (tube_recording is None):
        raise ConfigError("give either --tube-hz or --tube-recording (one of them)",
                          source="--tube-hz")


def tube_calibration(preset: Path, note: str, *, bare: Path, with_tube: Path,
                     tube_hz: float | None, tube_recording: Path | None, out: Path | None,
                     target: CalibrationTarget | None,
                     force: bool) -> tuple[TubeCalibration, str, list[str]]:
    """Measure the recordings, fit the tube and write --out; (fit, note, warnings)."""
    from synth.settings.instrument import load_instrument

    instrument = load_instrument(preset)
    note = instrument.check_note(note)
    ref = instrument.reference_pitch_hz
    tube_q = None
    extra = []
    if tube_recording is not None:
        m_t = measure_file(tube_recording, reference_hz=ref)
        extra = list(m_t.warnings)
        tube_hz, tube_q = tube_resonance(m_t, tube_model_hz(instrument, note))
    if tube_hz is None:  # not reached: the check above asks for one of the two
        raise ConfigError("give either --tube-hz or --tube-recording", source="--tube-hz")
    m_bare = measure_file(bare, note=note, reference_hz=ref)
    m_tube = measure_file(with_tube, note=note, reference_hz=ref)
    cal = calibrate_tube(instrument, note, tube_hz=tube_hz, bare=m_bare, with_tube=m_tube,
                         tube_q=tube_q)
    if out is not None:
        from synth.io import write_bytes

        text = cal.to_toml(preset.name, (str(tube_recording) if tube_recording else
                                         f"tube {tube_hz:g} Hz", str(bare), str(with_tube)),
                           target)
        write_bytes(out, text.encode("utf-8"), force=force or target is not None)
    return cal, note, [*extra, *m_bare.warnings, *m_tube.warnings, *cal.warnings]
