"""Two designs side by side: the same passage, level-matched, and a blind test.

A client choosing between two options (another alloy, another tube offset,
another mallet) should hear the designs, not a level difference: a fraction of
a dB is heard as "better" or "brighter" rather than louder (physics note,
section 12).  So :func:`compare_designs` renders one passage with both designs
(same strikes, same length, aligned onsets), and levels them in three steps:

1. both renders get one common gain that puts the louder true peak at the
   ceiling (-1 dBTP); at that gain the integrated loudness of each is
   measured ("before matching": their difference is the designs' own loudness
   difference for this passage);
2. B gets the gain that brings it to A's integrated loudness
   (:func:`synth.analysis.match_loudness`, ITU-R BS.1770-4);
3. both are scaled together once more so that the louder true peak of the
   matched pair sits at the ceiling, so nothing clips and the two keep equal
   loudness.

Both renders are faded out alike over their last :data:`FADE_S` seconds so the
cut at the end is not a click.  Integrated loudness of ringing notes depends on
the render length (a full-scale 440 Hz tone with tau = 1 s reads -10.39 /
-11.60 / -11.95 LUFS over 2 / 5 / 10 s, physics note, section 12), so the
report states the length, and both designs always share it.

The report of differences (:class:`Comparison`) gives, per note of the
passage, the sounding fundamental of each design (the bar-like mode of the
bar-tube pair when tubes are fitted) and the difference in cents, partials 2
and 3 in cents, the fundamental's T60 from the loss budget (coupled pair when
tubed), and for the passage the loudness before and after matching, the gain
given to B, the true peaks, and the spectral balance: level in octave bands
in time windows from the start of the render, B minus A, measured on the
matched pair.

Listening files: :func:`alternate` lays out A, gap, B, gap, A, gap, B;
:func:`abx_key` and :func:`abx_trial` build ABX trials (Clark 1982): A, gap,
B, gap, X, where X is A or B at random, and :func:`score_answers` scores a
listener's answers against the key with the exact one-sided binomial test.

.. note:: Hearing safety: every file written here peaks at or below -1 dBTP,
   which is still full loudness. Start playback at a low volume, especially
   on headphones.

References
----------
.. [1] ITU-R BS.1770-4 (10/2015), "Algorithms to measure audio programme
   loudness and true-peak audio level" (Annex 1 loudness, Annex 2 true peak).
.. [2] Clark, D., "High-resolution subjective testing using a double-blind
   comparator", J. Audio Eng. Soc. 30(5), 330-338, 1982 (ABX; title and issue
   number from memory).
.. [3] IEC 61260-1:2014, "Electroacoustics - Octave-band and fractional-
   octave-band filters - Part 1: Specifications" (base-ten octave ratio
   G = 10^(3/10), mid-band frequencies 1000 G^k Hz, band edges at G^(+-1/2)
   of the mid-band frequency).
.. [4] Harris, F. J., "On the use of windows for harmonic analysis with the
   discrete Fourier transform", Proc. IEEE 66(1), 51-83, 1978,
   doi:10.1109/PROC.1978.10837 (Hann window; power normalisation by the sum
   of the squared window; DOI from memory).
"""

from __future__ import annotations

import json
import math
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, replace
from fractions import Fraction
from pathlib import Path
from typing import Any, Final

import numpy as np

from synth import io
from synth.analysis import integrated_loudness, match_loudness, true_peak
from synth.defaults import RENDER_DEFAULTS
from synth.engine.render import render
from synth.engine.score import Score, Strike
from synth.errors import AudioError, ConfigError
from synth.output import fade_seconds
from synth.physics.solid_correction import correction_record
from synth.pitch import canonical_note, midi_to_note, note_to_midi, ratio_to_cents
from synth.settings.comparison import DESIGNS, BlindKey
from synth.voicing import Voicer

CEILING_DBTP: Final[float] = -1.0
"""True-peak ceiling of every file written, dBTP (physics note, section 14:
peak-normalise to at most -1 dBTP)."""

FADE_S: Final[float] = fade_seconds(RENDER_DEFAULTS.end_level_db)
"""Raised-cosine fade-out over the end of both renders, s: the closing fade of
every render (:func:`synth.output.fade_seconds`, 0.50 s), so that the last 10 ms
of each file stay below the end level, -60 dB re its peak, and the cut of a
still-ringing passage is no click; the same fade on both."""

LEAD_IN_S: Final[float] = 0.1
"""Silence before the first strike of a generated passage, s."""

STEP_S: Final[float] = 0.5
"""Time between the single notes of a generated passage, s."""

DEFAULT_TAIL_S: Final[float] = 3.0
"""Ringing time after the last strike of a generated passage, s."""

DEFAULT_VELOCITY: Final[float] = RENDER_DEFAULTS.velocity
"""Strength of generated strikes, 0..1."""

MAX_LENGTH_S: Final[float] = 120.0
"""Longest passage a comparison renders, s (the listening files hold it 3-4 times)."""

WINDOW_EDGES_S: Final[tuple[float, ...]] = (0.0, 0.5, 2.0, 5.0)
"""Edges of the spectral-balance windows, s from the start of the render; a
render longer than the last edge gets one more window to its end."""

MIN_WINDOW_S: Final[float] = 0.1
"""Shortest spectral-balance window kept, s."""

OCTAVE_RATIO: Final[float] = 10.0 ** 0.3
"""Base-ten octave frequency ratio G = 10^(3/10) = 1.99526 (IEC 61260-1:2014)."""

OCTAVE_LABELS: Final[tuple[str, ...]] = ("63", "125", "250", "500", "1k", "2k", "4k", "8k",
                                         "16k")
"""Nominal mid-band frequencies of the octave bands reported (IEC 61260-1:2014)."""

OCTAVE_CENTRES_HZ: Final[tuple[float, ...]] = tuple(1000.0 * OCTAVE_RATIO ** k
                                                    for k in range(-4, 5))
"""Exact mid-band frequencies ``1000 G^k`` Hz, k = -4..4 (IEC 61260-1:2014)."""

BAND_RANGE_DB: Final[float] = 30.0
"""Default: a band more than this far below the loudest band of its window in
both designs gets no difference.  So far down a band adds nothing a listener
weighs against the main band (a difference there is masked by the loud band and
only seen when the sound is played much louder) [common practice, no source];
``compare --band-range`` sets it."""

JND_LEVEL_DB: Final[float] = 1.0
"""Reference step drawn on the balance plot: about the smallest change in level
of a broadband sound a listener notices, dB [common practice, no source; the
figure of about 1 dB from memory]."""

MATCH_MODES: Final[tuple[str, str]] = ("loudness", "gain")
"""How B is levelled: to A's loudness, or one common gain for both (so a louder
design stays louder, e.g. tubes against none)."""

LOUDNESS_TOLERANCE_LU: Final[float] = 0.1
"""Residual loudness difference after matching above which a warning is given,
LU (match to 0.1-0.2 LU before preference tests, physics note, section 12)."""

# --------------------------------------------------------------------------- passages
@dataclass(frozen=True)
class Passage:
    """What both designs play.

    Attributes
    ----------
    score : Score
        The strikes and pedal changes.
    length_s : float
        Render length, s (the same for both designs).
    label : str
        How the passage was chosen, for the report.
    default_pedal : float
        Pedal before the score's first pedal change: 1 = dampers lifted (a
        generated phrase rings), 0 = dampers on (an event file, as
        ``barwright render`` reads it).  A strike without a release of its own
        is free at once, so it rings only while the dampers are lifted.
    """

    score: Score
    length_s: float
    label: str
    default_pedal: float = 1.0

    @property
    def notes(self) -> tuple[str, ...]:
        """The distinct notes of the passage, low to high."""
        return tuple(sorted({s.note for s in self.score.strikes}, key=note_to_midi))


def _shared_notes(notes_a: Sequence[str], notes_b: Sequence[str]) -> list[str]:
    in_b = set(notes_b)
    common = sorted({n for n in notes_a if n in in_b}, key=note_to_midi)
    if not common:
        raise ConfigError(
            f"the two designs share no note (A: {notes_a[0]}..{notes_a[-1]}, B: "
            f"{notes_b[0]}..{notes_b[-1]}); give --notes or --events inside both ranges",
            source="designs")
    return common


def _check_length(length_s: float, where: str) -> float:
    if not (math.isfinite(length_s) and length_s > 0):
        raise ConfigError(f"= {length_s}: render length must be > 0 s", source=where)
    if length_s > MAX_LENGTH_S:
        raise ConfigError(f"= {length_s:.1f} s: a comparison renders at most {MAX_LENGTH_S:g} s; "
                          "shorten the passage", source=where)
    return float(length_s)


def _check_tail(tail_s: float) -> float:
    if not (math.isfinite(tail_s) and 0.0 <= tail_s <= MAX_LENGTH_S):
        raise ConfigError(f"= {tail_s}: must be between 0 and {MAX_LENGTH_S:g} s",
                          source="--tail")
    return float(tail_s)


def default_passage(notes_a: Sequence[str], notes_b: Sequence[str], *,
                    tail_s: float = DEFAULT_TAIL_S,
                    velocity: float = DEFAULT_VELOCITY) -> Passage:
    """Build a short phrase across the range both designs share.

    Four single notes low to high (the notes at 0, 1/3, 2/3 and all of the
    shared range), :data:`STEP_S` apart after a :data:`LEAD_IN_S` lead-in, then
    a major triad on the second of them (root, +4 and +7 semitones, as far as
    the range holds them), then ``tail_s`` of ringing.  For F3-F6: F3 F4 F5 F6,
    then F4 A4 C5, 5.1 s in all.

    Parameters
    ----------
    notes_a, notes_b : sequence of str
        The two designs' ranges.
    tail_s : float
        Ringing after the chord, s.
    velocity : float
        Strength of every strike, 0..1.

    Returns
    -------
    Passage
    """
    tail_s = _check_tail(tail_s)
    common = _shared_notes(notes_a, notes_b)
    picks: list[str] = []
    for frac in (0.0, 1.0 / 3.0, 2.0 / 3.0, 1.0):
        n = common[int(round(frac * (len(common) - 1)))]
        if n not in picks:
            picks.append(n)
    root = picks[1] if len(picks) > 1 else picks[0]
    chord = [midi_to_note(note_to_midi(root) + k) for k in (0, 4, 7)]
    chord = [n for n in chord if n in common]
    strikes = [Strike(time_s=LEAD_IN_S + k * STEP_S, note=n, velocity=velocity)
               for k, n in enumerate(picks)]
    t_chord = LEAD_IN_S + len(picks) * STEP_S
    strikes += [Strike(time_s=t_chord, note=n, velocity=velocity) for n in chord]
    score = Score(tuple(strikes), source="default phrase")
    label = ("phrase " + " ".join(picks) + ", then chord " + " ".join(chord))
    return Passage(score, _check_length(t_chord + tail_s, "passage"), label)


def sequence_passage(items: Sequence[tuple[str, float | None]], *,
                     tail_s: float = DEFAULT_TAIL_S, step_s: float = STEP_S,
                     velocity: float = DEFAULT_VELOCITY) -> Passage:
    """Build a passage of the given notes, one after the other.

    Parameters
    ----------
    items : sequence of (note, strength or None)
        Notes in playing order; a strength of None takes ``velocity``.
    tail_s : float
        Ringing after the last note, s.
    step_s : float
        Time between notes, s.
    velocity : float
        Default strength, 0..1.

    Returns
    -------
    Passage
    """
    tail_s = _check_tail(tail_s)
    if not items:
        raise ConfigError("= '': give at least one note, e.g. \"F3 A4 C5\"", source="--notes")
    strikes = tuple(Strike(time_s=LEAD_IN_S + k * step_s, note=canonical_note(n),
                           velocity=velocity if v is None else v)
                    for k, (n, v) in enumerate(items))
    score = Score(strikes, source="--notes")
    length = strikes[-1].time_s + tail_s
    label = "notes " + " ".join(s.note for s in strikes)
    return Passage(score, _check_length(length, "--notes"), label)


def events_passage(score: Score, *, tail_s: float = DEFAULT_TAIL_S) -> Passage:
    """Build an event file's passage: its own ``length_s``, or the last event plus ``tail_s``.

    The pedal before the file's first pedal change is the render default
    (:data:`synth.defaults.RENDER_DEFAULTS`, dampers lifted), as
    ``barwright render`` plays the file.
    """
    tail_s = _check_tail(tail_s)
    if not score.strikes:
        raise ConfigError("holds no strikes; a comparison needs at least one",
                          source=score.source or "--events")
    length = score.length_s if score.length_s is not None else score.last_event_s + tail_s
    return Passage(score, _check_length(length, score.source or "--events"),
                   f"events {score.source}", default_pedal=RENDER_DEFAULTS.pedal)


# --------------------------------------------------------------------------- per-note figures
@dataclass(frozen=True)
class NoteDifference:
    """One note of the passage in both designs (from the models, not the renders).

    Attributes
    ----------
    note : str
    fundamental_hz : (float, float)
        Sounding fundamental of A and B, Hz: the bar-like mode of the bar-tube
        pair when tubes are fitted, else vertical mode 1.
    fundamental_cents : float
        B relative to A, cents.
    partial_hz : ((float, float), (float, float))
        Vertical partials 2 and 3 of A and B, Hz.
    partial_cents : (float, float)
        Partials 2 and 3, B relative to A, cents.
    t60_s : (float, float)
        T60 of the sounding fundamental of A and B as each is rendered: the
        loss budget, the coupled pair when tubed, and the steady decay under
        the discs when that design's motor runs, s.
    coupled : (bool, bool)
        Whether each fundamental is a bar-tube pair.
    """

    note: str
    fundamental_hz: tuple[float, float]
    fundamental_cents: float
    partial_hz: tuple[tuple[float, float], tuple[float, float]]
    partial_cents: tuple[float, float]
    t60_s: tuple[float, float]
    coupled: tuple[bool, bool]

    @property
    def t60_ratio(self) -> float:
        """T60 of B over T60 of A."""
        return self.t60_s[1] / self.t60_s[0]


def _fundamental(voicer: Voicer, note: str) -> tuple[float, float, bool]:
    # The voice as rendered: with the discs turning, the steady decay under them.
    freq, _, t60 = voicer.fundamental(note)
    return float(freq), float(t60), voicer.model(note).coupling is not None


def _vertical_hz(voicer: Voicer, note: str, order: int) -> float:
    for b in voicer.model(note).budget:
        if b.kind == "vertical" and b.order == order:
            return float(b.frequency_hz)
    return math.nan


def note_difference(voicer_a: Voicer, voicer_b: Voicer, note: str) -> NoteDifference:
    """Fundamental, partials 2-3 and fundamental T60 of one note in both designs."""
    fa, ta, ca = _fundamental(voicer_a, note)
    fb, tb, cb = _fundamental(voicer_b, note)
    p2, p3 = ((_vertical_hz(voicer_a, note, k), _vertical_hz(voicer_b, note, k))
              for k in (2, 3))
    partials = (p2, p3)
    c2, c3 = (float(ratio_to_cents(b / a)) if a > 0 and b > 0 else math.nan
              for a, b in partials)
    cents = (c2, c3)
    return NoteDifference(note, (fa, fb), float(ratio_to_cents(fb / fa)), partials, cents,
                          (ta, tb), (ca, cb))


# --------------------------------------------------------------------------- levels
@dataclass(frozen=True)
class LevelPlan:
    """How the two renders were levelled (see the module docstring).

    Attributes
    ----------
    loudness_before_lufs : (float, float)
        Integrated loudness of A and B at one common gain (the louder true
        peak at the ceiling), LUFS.
    true_peak_before_dbtp : (float, float)
        True peaks at that common gain, dBTP.
    gain_b_db : float
        Gain given to B to match A's loudness, dB.
    output_gain_db : (float, float)
        Total gain from the rendered pressure (Pa at the listening distance)
        to the written samples, dB re 1 / Pa, for A and B.
    loudness_after_lufs : (float, float)
        Integrated loudness of the matched A and B, LUFS (measured again).
    true_peak_after_dbtp : (float, float)
        True peaks of the matched A and B, dBTP.
    ceiling_dbtp : float
        The ceiling, dBTP.
    warnings : tuple of str
    """

    loudness_before_lufs: tuple[float, float]
    true_peak_before_dbtp: tuple[float, float]
    gain_b_db: float
    output_gain_db: tuple[float, float]
    loudness_after_lufs: tuple[float, float]
    true_peak_after_dbtp: tuple[float, float]
    ceiling_dbtp: float
    warnings: tuple[str, ...]

    @property
    def loudness_difference_before_lu(self) -> float:
        """B minus A at the common gain, LU."""
        return self.loudness_before_lufs[1] - self.loudness_before_lufs[0]

    @property
    def loudness_difference_after_lu(self) -> float:
        """B minus A after matching, LU."""
        return self.loudness_after_lufs[1] - self.loudness_after_lufs[0]


def _db(x: float) -> float:
    return 20.0 * math.log10(x) if x > 0 else -math.inf


def match_levels(a: np.ndarray, b: np.ndarray, sample_rate: float, *,
                 ceiling_dbtp: float = CEILING_DBTP,
                 match: str = "loudness") -> tuple[np.ndarray, np.ndarray, LevelPlan]:
    """Level two renders of one passage: equal BS.1770-4 loudness, peaks under the ceiling.

    With ``match="gain"`` step 2 is left out: both keep one common gain, so
    the louder design stays louder by its own loudness difference (a tube
    against none, say).

    Parameters
    ----------
    a, b : ndarray, shape (n,) or (n, channels)
        The renders of designs A and B, any common unit (the engine's output is
        pressure in Pa); same shape.
    sample_rate : float
        Hz.
    ceiling_dbtp : float
        Highest true peak of either output, dBTP (< 0).
    match : {"loudness", "gain"}
        Match B to A's loudness, or give both one gain.

    Returns
    -------
    a_out, b_out : ndarray
        The matched signals, full scale 1.0.
    plan : LevelPlan
        Loudness, gains and true peaks before and after.

    Raises
    ------
    AudioError
        Shapes differ, either render is silent or shorter than one 0.4 s
        loudness block.

    Notes
    -----
    BS.1770-4 loudness scales exactly with gain while no 400 ms block crosses
    the -70 LUFS absolute gate, so the common gains of steps 1 and 3 change
    neither loudness difference.

    References
    ----------
    .. [1] ITU-R BS.1770-4 (10/2015), Annex 1 (gating) and Annex 2 (true peak).
    """
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    if a.shape != b.shape:
        raise AudioError(f"renders of A and B differ in shape ({a.shape} vs {b.shape}); a "
                         "comparison needs equal lengths and channels")
    if match not in MATCH_MODES:
        raise ConfigError(f"= {match!r}: must be one of " + ", ".join(MATCH_MODES),
                          source="--match")
    if not ceiling_dbtp < 0:
        raise ConfigError(f"= {ceiling_dbtp}: the ceiling must be below 0 dBTP",
                          source="ceiling_dbtp")
    peak = max(float(np.max(np.abs(a), initial=0.0)), float(np.max(np.abs(b), initial=0.0)))
    if not (math.isfinite(peak) and peak > 0):
        raise AudioError("renders of A and B are silent or not finite; nothing to compare")
    a0 = a / peak
    b0 = b / peak
    # Step 1: one common gain, louder true peak at the ceiling.
    tp_a0 = true_peak(a0, sample_rate).true_peak_dbtp
    tp_b0 = true_peak(b0, sample_rate).true_peak_dbtp
    common_db = ceiling_dbtp - max(tp_a0, tp_b0)
    k = 10.0 ** (common_db / 20.0)
    a1, b1 = a0 * k, b0 * k
    # Step 2: B to A's loudness.
    m = match_loudness(a1, b1, sample_rate)
    warnings = [w for w in m.warnings if "dBTP" not in w]  # the ceiling is handled in step 3
    gain_b = m.gain_db if match == "loudness" else 0.0
    tp_a1 = tp_a0 + common_db
    tp_b1 = tp_b0 + common_db
    tp_b_matched = m.matched_true_peak_dbtp if match == "loudness" else tp_b1
    # Step 3: both together, louder matched true peak at the ceiling.
    final_db = ceiling_dbtp - max(tp_a1, tp_b_matched)
    g_a = 10.0 ** (final_db / 20.0)
    g_b = 10.0 ** ((final_db + gain_b) / 20.0)
    a_out = a1 * g_a
    b_out = b1 * g_b
    la = integrated_loudness(a_out, sample_rate).integrated_lufs
    lb = integrated_loudness(b_out, sample_rate).integrated_lufs
    tp_a = true_peak(a_out, sample_rate).true_peak_dbtp
    tp_b = true_peak(b_out, sample_rate).true_peak_dbtp
    if match == "loudness" and abs(lb - la) > LOUDNESS_TOLERANCE_LU:
        warnings.append(f"after matching A reads {la:.2f} LUFS and B {lb:.2f} LUFS: more than "
                        f"{LOUDNESS_TOLERANCE_LU} LU apart (gating moved); a preference test "
                        "would hear the level")
    if max(tp_a, tp_b) > ceiling_dbtp + 0.01:
        warnings.append(f"true peak {max(tp_a, tp_b):+.2f} dBTP is above the "
                        f"{ceiling_dbtp:+.1f} dBTP ceiling")
    base_db = -_db(peak) + common_db + final_db
    plan = LevelPlan(
        loudness_before_lufs=(m.reference_lufs, m.other_lufs),
        true_peak_before_dbtp=(tp_a1, tp_b1),
        gain_b_db=gain_b,
        output_gain_db=(base_db, base_db + gain_b),
        loudness_after_lufs=(la, lb),
        true_peak_after_dbtp=(tp_a, tp_b),
        ceiling_dbtp=ceiling_dbtp,
        warnings=tuple(warnings),
    )
    return a_out, b_out, plan


def fade_out(x: np.ndarray, sample_rate: float, fade_s: float = FADE_S) -> np.ndarray:
    """Return ``x`` with a raised-cosine fade over its last ``fade_s`` seconds."""
    y = np.array(x, dtype=np.float64, copy=True)
    n = min(int(round(fade_s * sample_rate)), y.shape[0])
    if n > 0:
        ramp = 0.5 * (1.0 + np.cos(np.pi * (np.arange(1, n + 1) / n)))
        y[-n:] *= ramp.reshape((n,) + (1,) * (y.ndim - 1))
    return y


# --------------------------------------------------------------------------- spectral balance
@dataclass(frozen=True)
class BandBalance:
    """Octave-band levels of both matched renders in one time window.

    Attributes
    ----------
    window_s : (float, float)
        Start and end, s from the start of the render.
    level_a_db, level_b_db : tuple of float
        Mean-square level per band (channels summed), dB re full scale 1.0,
        in the order of :data:`OCTAVE_LABELS` (bands above 0.45 x the sample
        rate are left out).
    difference_db : tuple of float
        B minus A per band, dB; NaN where both designs lie more than
        ``range_db`` below the window's loudest band.
    range_db : float
        The range below the loudest band inside which differences are given.
    """

    window_s: tuple[float, float]
    level_a_db: tuple[float, ...]
    level_b_db: tuple[float, ...]
    difference_db: tuple[float, ...]
    range_db: float = BAND_RANGE_DB


def octave_bands(sample_rate: float) -> tuple[tuple[str, float, float, float], ...]:
    """(label, mid-band Hz, lower edge Hz, upper edge Hz) of the bands reported.

    Base-ten octave bands of IEC 61260-1:2014: edges at ``G^(+-1/2)`` times
    the mid-band frequency, ``G = 10^(3/10)``; bands whose upper edge passes
    0.45 x the sample rate are left out.
    """
    half = math.sqrt(OCTAVE_RATIO)
    return tuple((lab, fm, fm / half, fm * half)
                 for lab, fm in zip(OCTAVE_LABELS, OCTAVE_CENTRES_HZ, strict=True)
                 if fm * half <= 0.45 * sample_rate)


def band_levels(x: np.ndarray, sample_rate: float, start_s: float, end_s: float) -> np.ndarray:
    """Mean-square level of ``x`` in each octave band over one window, dB re full scale.

    Parameters
    ----------
    x : ndarray, shape (n,) or (n, channels)
    sample_rate : float
        Hz.
    start_s, end_s : float
        The window, s from the first sample.

    Returns
    -------
    ndarray, shape (n_bands,)
        ``10 log10`` of the band's mean square, channels summed (a full-scale
        sine inside one band reads -3.01 dB there); ``-inf`` for an empty band.

    Notes
    -----
    Hann-windowed FFT; the one-sided power spectrum ``2 |X_k|^2 / (N sum w^2)``
    summed over the bins inside the band gives the band's mean square
    (Parseval's theorem with the window's power normalisation, Harris 1978).
    """
    x2 = np.asarray(x, dtype=np.float64)
    x2 = x2.reshape(x2.shape[0], -1)
    i0 = max(int(round(start_s * sample_rate)), 0)
    i1 = min(int(round(end_s * sample_rate)), x2.shape[0])
    seg = x2[i0:i1]
    n = seg.shape[0]
    bands = octave_bands(sample_rate)
    if n < 2:
        return np.full(len(bands), -np.inf)
    w = np.hanning(n)
    spec = np.fft.rfft(seg * w[:, None], axis=0)
    power = np.sum(np.abs(spec) ** 2, axis=1) * (2.0 / (n * np.sum(w * w)))
    power[0] *= 0.5
    if n % 2 == 0:
        power[-1] *= 0.5
    freqs = np.fft.rfftfreq(n, 1.0 / sample_rate)
    out = np.empty(len(bands))
    for j, (_, _, lo, hi) in enumerate(bands):
        ms = float(np.sum(power[(freqs >= lo) & (freqs < hi)]))
        out[j] = 10.0 * math.log10(ms) if ms > 0 else -np.inf
    return out


def balance_windows(length_s: float) -> tuple[tuple[float, float], ...]:
    """Return the spectral-balance windows of a ``length_s`` render (:data:`WINDOW_EDGES_S`)."""
    edges = [e for e in WINDOW_EDGES_S if e < length_s] + [length_s]
    wins: list[tuple[float, float]] = []
    for t0, t1 in zip(edges[:-1], edges[1:], strict=True):
        if t1 - t0 >= MIN_WINDOW_S or not wins:
            wins.append((t0, t1))
        else:  # too short a remainder: join it to the window before
            wins[-1] = (wins[-1][0], t1)
    return tuple(wins)


def spectral_balance(a: np.ndarray, b: np.ndarray, sample_rate: float,
                     windows: Sequence[tuple[float, float]], *,
                     range_db: float = BAND_RANGE_DB) -> tuple[BandBalance, ...]:
    """Octave-band levels of A and B and their difference in each window.

    A band gets a difference only where A or B lies within ``range_db`` of the
    window's loudest band (of either design).
    """
    range_db = check_band_range(range_db)
    out = []
    for t0, t1 in windows:
        la = band_levels(a, sample_rate, t0, t1)
        lb = band_levels(b, sample_rate, t0, t1)
        top = max(float(np.max(la)), float(np.max(lb)))
        diff = []
        for x, y in zip(la, lb, strict=True):
            if max(x, y) < top - range_db or not (math.isfinite(x) and math.isfinite(y)):
                diff.append(math.nan)
            else:
                diff.append(float(y - x))
        out.append(BandBalance((float(t0), float(t1)), tuple(map(float, la)),
                               tuple(map(float, lb)), tuple(diff), range_db))
    return tuple(out)


def check_band_range(range_db: float) -> float:
    """Return ``range_db`` if it is a usable band range (3-120 dB), else ConfigError."""
    if not (isinstance(range_db, int | float) and math.isfinite(range_db)
            and 3.0 <= range_db <= 120.0):
        raise ConfigError(f"= {range_db}: must be between 3 and 120 dB", source="--band-range")
    return float(range_db)


# --------------------------------------------------------------------------- the comparison
@dataclass(frozen=True)
class Comparison:
    """Two designs playing one passage, level-matched, with their differences.

    Attributes
    ----------
    a, b : ndarray, shape (n_samples, channels)
        The matched renders, full scale 1.0 (what A.wav and B.wav hold).
    sample_rate : int
        Hz.
    passage : Passage
    levels : LevelPlan
    notes : tuple of NoteDifference
        One per distinct note of the passage, low to high.
    balance : tuple of BandBalance
        One per time window.
    bands : tuple of (label, mid Hz, lower Hz, upper Hz)
        The octave bands of ``balance``.
    render_wall_s : float
        Wall time of planning, rendering and measuring, s.
    warnings : tuple of str
    designs : (dict, dict)
        What each design was rendered with (:func:`design_settings`), plus the
        gain its render got (dB re 1 / Pa).
    match : str
        "loudness" (B matched to A) or "gain" (one gain for both).
    """

    a: np.ndarray
    b: np.ndarray
    sample_rate: int
    passage: Passage
    levels: LevelPlan
    notes: tuple[NoteDifference, ...]
    balance: tuple[BandBalance, ...]
    bands: tuple[tuple[str, float, float, float], ...]
    render_wall_s: float
    warnings: tuple[str, ...]
    designs: tuple[dict[str, Any], dict[str, Any]] = ({}, {})
    match: str = "loudness"

    @property
    def length_s(self) -> float:
        """Render length of each design, s."""
        return self.a.shape[0] / self.sample_rate

    @property
    def channels(self) -> int:
        """Channels of each render."""
        return int(self.a.shape[1])


def _check_notes(voicer: Voicer, score: Score, design: str) -> None:
    inst = voicer.instrument
    for k, st in enumerate(score.strikes):
        try:
            inst.check_note(st.note, option="note")
        except ConfigError:
            raise ConfigError(f"strike {k + 1} ({st.note} at {st.time_s:.3f} s) is outside "
                              f"design {design}'s range {inst.notes[0]}..{inst.notes[-1]} "
                              f"({inst.source})", source=score.source or "passage") from None


def design_settings(voicer: Voicer, mallet: str | None = None) -> dict[str, Any]:
    """Return what one design renders with: its own tubes, motor, mallet and calibration.

    Parameters
    ----------
    voicer : Voicer
        The design as it is heard (tube and motor overrides applied).
    mallet : str, optional
        The mallet given for strikes that name none (default: the preset's).

    Returns
    -------
    dict
        ``name``, ``tubes`` (fitted and on), ``motor_rate_rev_per_s`` (0 =
        stopped), ``motor_resting``, ``mallet``, ``calibration`` (factor per
        loss mechanism), ``solid_correction`` (the preset's 3-D correction table
        applied to the partials, None without one), ``stiffness_calibration``
        (None: uncalibrated).
    """
    cal = voicer.loss_calibration
    factors = getattr(cal, "factors", None)
    stiffness = voicer.stiffness
    return {"name": voicer.instrument.name, "tubes": voicer.tubes_active,
            "motor_rate_rev_per_s": float(voicer.motor.rate_rev_per_s),
            "motor_resting": voicer.motor.resting, "mallet": mallet or voicer.sound.mallet,
            "calibration": dict(factors) if factors else {},
            "solid_correction": correction_record(voicer.correction),
            "stiffness_calibration": None if stiffness is None else stiffness.to_dict()}


def compare_designs(voicer_a: Voicer, voicer_b: Voicer, passage: Passage, *,
                    mallet: str | None = None,
                    ceiling_dbtp: float = CEILING_DBTP,
                    match: str = "loudness", band_range_db: float = BAND_RANGE_DB,
                    progress: Callable[[int, int], None] | None = None) -> Comparison:
    """Render ``passage`` with both designs, level-match them and list the differences.

    Parameters
    ----------
    voicer_a, voicer_b : Voicer
        The two designs, with the same sample rate and channels (tube and
        motor settings as they are to be heard).
    passage : Passage
        What both play (:func:`default_passage`, :func:`sequence_passage`,
        :func:`events_passage`).
    mallet : str, optional
        Mallet preset for strikes that name none (default: each preset's own
        ``[sound]`` mallet).
    ceiling_dbtp : float
        True-peak ceiling of the matched pair, dBTP.
    match : {"loudness", "gain"}
        Level B to A's loudness, or give both one gain (:func:`match_levels`).
    band_range_db : float
        Spectral differences only within this many dB of the loudest band.
    progress : callable, optional
        ``progress(done, total)`` over the five stages.

    Returns
    -------
    Comparison

    Raises
    ------
    ConfigError
        A note outside either range or without a solved bar; the designs use
        different sample rates or channel counts.
    AudioError
        A silent render.
    """
    t0 = time.perf_counter()
    check_band_range(band_range_db)
    fs = voicer_a.sample_rate
    if voicer_b.sample_rate != fs or voicer_b.channels != voicer_a.channels:
        raise ConfigError("designs A and B must render at one sample rate and channel count",
                          source="designs")
    score = passage.score
    if mallet is not None:
        score = replace(score, strikes=tuple(replace(s, mallet=s.mallet or mallet)
                                             for s in score.strikes))
    n = int(round(passage.length_s * fs))

    def step(k):
        if progress is not None:
            progress(k, 5)

    renders: list[np.ndarray] = []
    for design, voicer in zip(DESIGNS, (voicer_a, voicer_b), strict=True):
        _check_notes(voicer, score, design)
        voices = voicer.score_voices(score, default_pedal=passage.default_pedal)
        step(len(renders) * 2 + 1)
        x = render(voices, n, sample_rate=fs, channels=voicer.channels)
        renders.append(fade_out(x, fs))
        step(len(renders) * 2)
    a, b, plan = match_levels(renders[0], renders[1], fs, ceiling_dbtp=ceiling_dbtp,
                              match=match)
    notes = tuple(note_difference(voicer_a, voicer_b, nt) for nt in passage.notes)
    windows = balance_windows(passage.length_s)
    balance = spectral_balance(a, b, fs, windows, range_db=band_range_db)
    step(5)
    design_a, design_b = ({**design_settings(v, mallet), "output_gain_db_re_1_per_pa": g}
                          for v, g in zip((voicer_a, voicer_b), plan.output_gain_db,
                                          strict=True))
    return Comparison(a=a, b=b, sample_rate=int(fs), passage=passage, levels=plan, notes=notes,
                      balance=balance, bands=octave_bands(fs),
                      render_wall_s=time.perf_counter() - t0, warnings=plan.warnings,
                      designs=(design_a, design_b), match=match)


def comparison_record(comp: Comparison, *, names: tuple[str, str],
                      files: tuple[str, str]) -> dict[str, Any]:
    """Return the report as plain data (for JSON): passage, levels, notes, balance."""
    lv = comp.levels
    return {
        "designs": {d: {**settings, "name": nm, "file": f}
                    for d, nm, f, settings in zip(DESIGNS, names, files, comp.designs,
                                                  strict=True)},
        "levelling": comp.match,
        "passage": comp.passage.label,
        "render_length_s": comp.length_s,
        "render_length_note": ("integrated loudness of ringing notes depends on the render "
                               "length; both designs share this length and their onsets"),
        "sample_rate_hz": comp.sample_rate,
        "channels": comp.channels,
        "fade_out_s": FADE_S,
        "end_level_db": RENDER_DEFAULTS.end_level_db,
        "loudness": {
            "before_matching_lufs": {"A": lv.loudness_before_lufs[0],
                                     "B": lv.loudness_before_lufs[1]},
            "before_matching_note": "both at one common gain (louder true peak at the ceiling)",
            "difference_before_lu": lv.loudness_difference_before_lu,
            "gain_b_db": lv.gain_b_db,
            "after_matching_lufs": {"A": lv.loudness_after_lufs[0],
                                    "B": lv.loudness_after_lufs[1]},
            "difference_after_lu": lv.loudness_difference_after_lu,
            "true_peak_before_dbtp": {"A": lv.true_peak_before_dbtp[0],
                                      "B": lv.true_peak_before_dbtp[1]},
            "true_peak_after_dbtp": {"A": lv.true_peak_after_dbtp[0],
                                     "B": lv.true_peak_after_dbtp[1]},
            "ceiling_dbtp": lv.ceiling_dbtp,
            "output_gain_db_re_1_per_pa": {"A": lv.output_gain_db[0], "B": lv.output_gain_db[1]},
            "standard": "ITU-R BS.1770-4 (pyloudnorm)",
        },
        "notes": [{
            "note": d.note,
            "fundamental_hz": {"A": d.fundamental_hz[0], "B": d.fundamental_hz[1]},
            "fundamental_cents_b_minus_a": d.fundamental_cents,
            "fundamental_with_tube": {"A": d.coupled[0], "B": d.coupled[1]},
            "partial_2_hz": {"A": d.partial_hz[0][0], "B": d.partial_hz[0][1]},
            "partial_2_cents_b_minus_a": d.partial_cents[0],
            "partial_3_hz": {"A": d.partial_hz[1][0], "B": d.partial_hz[1][1]},
            "partial_3_cents_b_minus_a": d.partial_cents[1],
            "fundamental_t60_s": {"A": d.t60_s[0], "B": d.t60_s[1]},
            "fundamental_t60_ratio_b_over_a": d.t60_ratio,
        } for d in comp.notes],
        "spectral_balance": {
            "bands_hz": [{"label": lab, "mid_hz": fm, "lower_hz": lo, "upper_hz": hi}
                         for lab, fm, lo, hi in comp.bands],
            "note": ("octave-band mean-square level of the written renders, channels summed, "
                     "dB re full scale; windows in s from the start of the render; difference "
                     f"left out where both lie more than {_band_range(comp):g} dB below the "
                     "window's loudest band"),
            "range_db": _band_range(comp),
            "windows": [{"start_s": w.window_s[0], "end_s": w.window_s[1],
                         "level_a_db": list(w.level_a_db), "level_b_db": list(w.level_b_db),
                         "difference_db": list(w.difference_db)} for w in comp.balance],
        },
        "warnings": list(comp.warnings),
        "render_wall_s": comp.render_wall_s,
    }


def _band_range(comp: Comparison) -> float:
    return comp.balance[0].range_db if comp.balance else BAND_RANGE_DB


def _plain(obj: Any) -> Any:
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, list | tuple):
        return [_plain(v) for v in obj]
    if isinstance(obj, np.generic):
        return _plain(obj.item())
    return obj


def record_json(record: Mapping[str, Any]) -> str:
    """JSON text of a record (NaN and infinities become null, as JSON has none)."""
    return json.dumps(_plain(dict(record)), indent=2) + "\n"


# --------------------------------------------------------------------------- listening files
def _gap(x: np.ndarray, gap_samples: int) -> np.ndarray:
    return np.zeros((int(gap_samples),) + x.shape[1:], dtype=x.dtype)


def alternate(a: np.ndarray, b: np.ndarray, gap_samples: int) -> np.ndarray:
    """Lay out A, gap, B, gap, A, gap, B: the two designs twice over, with silent gaps."""
    if a.shape != b.shape:
        raise AudioError(f"A and B differ in shape ({a.shape} vs {b.shape})")
    z = _gap(a, gap_samples)
    return np.concatenate([a, z, b, z, a, z, b], axis=0)


def abx_trial(a: np.ndarray, b: np.ndarray, x: str, gap_samples: int) -> np.ndarray:
    """One ABX trial: A, gap, B, gap, X, where ``x`` ("A" or "B") says which X is."""
    if x not in DESIGNS:
        raise ConfigError(f"= {x!r}: X must be 'A' or 'B'", source="trial")
    if a.shape != b.shape:
        raise AudioError(f"A and B differ in shape ({a.shape} vs {b.shape})")
    z = _gap(a, gap_samples)
    return np.concatenate([a, z, b, z, a if x == "A" else b], axis=0)


def abx_key(n_trials: int, seed: int) -> tuple[str, ...]:
    """Which design is X in each of ``n_trials`` trials: independent fair draws, seeded.

    Each X is A or B with probability 1/2 independently (Clark 1982), from
    ``numpy.random.default_rng(seed)``; the same seed gives the same key.
    """
    if isinstance(n_trials, bool) or not isinstance(n_trials, int) or n_trials < 1:
        raise ConfigError(f"= {n_trials!r}: the number of trials must be a whole number >= 1",
                          source="--blind")
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError(f"= {seed!r}: the seed must be a whole number >= 0", source="--seed")
    rng = np.random.default_rng(seed)
    return tuple(DESIGNS[int(i)] for i in rng.integers(0, 2, size=n_trials))


def trial_name(k: int, n_trials: int) -> str:
    """File name of blind trial ``k`` (1-based): ``blind-01.wav`` (three digits from 100)."""
    width = max(2, len(str(n_trials)))
    return f"blind-{k:0{width}d}.wav"


LISTENING_FILES: Final[tuple[str, ...]] = ("A.wav", "B.wav", "AB.wav")
"""Files every comparison writes (each with a JSON sidecar)."""

REPORT_FILES: Final[tuple[str, ...]] = ("differences.json", "differences.png")
"""The report of differences, written beside the listening files."""

KEY_FILE: Final[str] = "blind-key.toml"
"""Answer key of the blind trials."""

PAGE_FILE: Final[str] = "listen.html"
"""The listening page (``compare --page``), beside the files it plays."""


def planned_files(directory: str | Path, n_trials: int | None, *,
                  page: bool = False) -> list[Path]:
    """Every file a comparison with ``n_trials`` blind trials writes into ``directory``."""
    d = Path(directory)
    names = list(LISTENING_FILES)
    if n_trials:
        names += [trial_name(k, n_trials) for k in range(1, n_trials + 1)]
    paths = [d / nm for nm in names]
    paths += [io.sidecar_path(p) for p in paths]
    paths += [d / nm for nm in REPORT_FILES]
    if n_trials:
        paths.append(d / KEY_FILE)
    if page:
        paths.append(d / PAGE_FILE)
    return paths


def write_listening_files(comp: Comparison, directory: str | Path, *, gap_s: float,
                          sample_format: str = io.DEFAULT_SAMPLE_FORMAT, force: bool = False,
                          settings: Mapping[str, Any] | None = None) -> list[Path]:
    """Write A.wav, B.wav and AB.wav (A, gap, B, gap, A, gap, B), each with a sidecar.

    Returns
    -------
    list of Path
        The WAV files written.
    """
    d = Path(directory)
    gap = gap_samples(gap_s, comp.sample_rate)
    base = dict(settings or {})
    lv = comp.levels
    common = {"passage": comp.passage.label, "render_length_s": comp.length_s,
              "ceiling_dbtp": lv.ceiling_dbtp, "gain_b_db": lv.gain_b_db,
              "levelling": comp.match, "loudness_standard": "ITU-R BS.1770-4",
              "ending": "faded", "fade_s": FADE_S,
              "end_level_db": RENDER_DEFAULTS.end_level_db}
    out = []
    for i, (name, x) in enumerate((("A.wav", comp.a), ("B.wav", comp.b))):
        path = io.write_wav(d / name, x, sample_rate=comp.sample_rate,
                            sample_format=sample_format, force=force)
        io.write_sidecar(path, {**base, **common, **comp.designs[i], "file": name,
                                "design": DESIGNS[i],
                                "loudness_lufs": lv.loudness_after_lufs[i],
                                "true_peak_dbtp": lv.true_peak_after_dbtp[i],
                                "output_gain_db_re_1_per_pa": lv.output_gain_db[i],
                                "sample_format": sample_format, "samples": int(x.shape[0])},
                         force=force)
        out.append(path)
    ab = alternate(comp.a, comp.b, gap)
    path = io.write_wav(d / "AB.wav", ab, sample_rate=comp.sample_rate,
                        sample_format=sample_format, force=force)
    io.write_sidecar(path, {**base, **common, "designs": design_table(comp), "file": "AB.wav",
                            "layout": "A, gap, B, gap, A, gap, B", "gap_s": gap / comp.sample_rate,
                            "part_samples": int(comp.a.shape[0]), "gap_samples": gap,
                            "sample_format": sample_format, "samples": int(ab.shape[0])},
                     force=force)
    out.append(path)
    return out


def design_table(comp: Comparison) -> dict[str, dict[str, Any]]:
    """Each design's render settings by its letter (for the shared files' sidecars)."""
    return dict(zip(DESIGNS, comp.designs, strict=True))


def gap_samples(gap_s: float, sample_rate: float) -> int:
    """Return the samples of a ``gap_s`` silence (0.05-10 s, else ConfigError naming --gap)."""
    if not (math.isfinite(gap_s) and 0.05 <= gap_s <= 10.0):
        raise ConfigError(f"= {gap_s}: the gap must be between 0.05 and 10 s", source="--gap")
    return int(round(gap_s * sample_rate))


def key_toml(key: BlindKey) -> str:
    """Return the key as TOML text, with a header that says how to use it."""
    def s(v: str) -> str:
        return json.dumps(v)  # a JSON string is a valid TOML basic string

    lines = [
        "# Answer key of the blind trials written by `barwright compare --blind`.",
        "# Keep this file from the listener until every answer is in.",
        "# Each trial file plays A, a pause, B, a pause, then the unknown X;",
        "# x below says which design the unknown is in each trial.",
        f"# Score: barwright compare --score {KEY_FILE} --answers \"A,B,...\"",
        "#    or: barwright compare --score KEY --answers-file FILE (saved by the page)",
        "# The number of trials was fixed before listening; score every one of them.",
        f"run = {s(key.run)}",
        f"design_a = {s(key.design_a)}",
        f"design_b = {s(key.design_b)}",
        f"trials = {key.trials}",
        f"seed = {key.seed}",
        f"gap_s = {key.gap_s!r}",
        "files = [" + ", ".join(s(f) for f in key.files) + "]",
        "x = [" + ", ".join(s(v) for v in key.x) + "]",
    ]
    return "\n".join(lines) + "\n"


def write_blind_trials(comp: Comparison, directory: str | Path, n_trials: int, *, seed: int,
                       gap_s: float, designs: tuple[str, str], run: str = "",
                       sample_format: str = io.DEFAULT_SAMPLE_FORMAT, force: bool = False,
                       settings: Mapping[str, Any] | None = None) -> tuple[list[Path], Path]:
    """Write ``n_trials`` ABX trials and their key.

    Each trial file holds A, gap, B, gap, X; its sidecar records the layout
    but neither X nor the seed.  The key (:data:`KEY_FILE`) says which design
    X is in each trial.

    Returns
    -------
    trials : list of Path
    key : Path
    """
    d = Path(directory)
    gap = gap_samples(gap_s, comp.sample_rate)
    x = abx_key(n_trials, seed)
    base = {k: v for k, v in dict(settings or {}).items() if k not in ("seed", "blind")}
    paths = []
    for k, xk in enumerate(x, start=1):
        name = trial_name(k, n_trials)
        sig = abx_trial(comp.a, comp.b, xk, gap)
        path = io.write_wav(d / name, sig, sample_rate=comp.sample_rate,
                            sample_format=sample_format, force=force)
        io.write_sidecar(path, {**base, "designs": design_table(comp), "file": name,
                                "trial": k, "trials": n_trials, "run": run,
                                "layout": "A, gap, B, gap, X (X is A or B; see the key)",
                                "gap_s": gap / comp.sample_rate,
                                "part_samples": int(comp.a.shape[0]),
                                "sample_format": sample_format, "samples": int(sig.shape[0])},
                         force=force)
        paths.append(path)
    key = BlindKey(x=x, seed=int(seed), design_a=designs[0], design_b=designs[1],
                   files=tuple(p.name for p in paths), gap_s=gap / comp.sample_rate, run=run)
    key_path = io.write_bytes(d / KEY_FILE, key_toml(key).encode("utf-8"), force=force)
    return paths, key_path


# --------------------------------------------------------------------------- scoring
def binomial_p_value(correct: int, trials: int) -> float:
    """One-sided p-value of ``correct`` or more right out of ``trials`` by guessing.

    ``p = sum_{k >= correct} C(trials, k) / 2^trials``, summed exactly in
    integers (the probability of doing at least this well with a fair coin).

    Examples (physics note, section 12): 12/16 gives 0.03841, 9/10 gives 0.01074.
    """
    if not (isinstance(trials, int) and trials >= 1 and isinstance(correct, int)
            and 0 <= correct <= trials):
        raise ConfigError(f"= {correct}/{trials}: need 0 <= correct <= trials, trials >= 1",
                          source="answers")
    tail = sum(math.comb(trials, k) for k in range(correct, trials + 1))
    return float(Fraction(tail, 2 ** trials))


@dataclass(frozen=True)
class BlindScore:
    """A listener's answers against the key.

    Attributes
    ----------
    trials, correct : int
    p_value : float
        One-sided exact binomial p of ``correct`` or more by guessing (p = 1/2
        per trial).
    answers, key : tuple of str
    right : tuple of bool
        Per trial.
    """

    trials: int
    correct: int
    p_value: float
    answers: tuple[str, ...]
    key: tuple[str, ...]
    right: tuple[bool, ...]


def parse_answers(text: str) -> tuple[str, ...]:
    """``"A,B,B"``, ``"A B B"`` or ``"ABB"`` -> ("A", "B", "B"); anything else raises."""
    items = [t for t in text.replace(",", " ").replace(";", " ").split() if t]
    if len(items) == 1 and len(items[0]) > 1:
        items = list(items[0])
    out = tuple(t.strip().upper() for t in items)
    if not out:
        raise ConfigError("= '': give one A or B per trial, e.g. \"A,B,B,A\"", source="--answers")
    for k, t in enumerate(out, start=1):
        if t not in DESIGNS:
            raise ConfigError(f"answer {k} = {t!r}: each answer must be A or B",
                              source="--answers")
    return out


def score_answers(key: Sequence[str], answers: Sequence[str]) -> BlindScore:
    """Count the right answers and the one-sided binomial p against guessing.

    Raises
    ------
    ConfigError
        The number of answers differs from the number of trials.

    References
    ----------
    .. [1] Clark 1982 (ABX: forced choice, X at random each trial).
    """
    key = tuple(key)
    answers = tuple(answers)
    if len(answers) != len(key):
        raise ConfigError(f"= {len(answers)} answers: the key holds {len(key)} trials; give "
                          "one A or B per trial, in trial order", source="--answers")
    right = tuple(a == k for a, k in zip(answers, key, strict=True))
    correct = sum(right)
    return BlindScore(len(key), correct, binomial_p_value(correct, len(key)), answers, key,
                      right)


# --------------------------------------------------------------------------- figure
def comparison_png(comp: Comparison, *, names: tuple[str, str]) -> bytes:
    """Band levels (left), balance B - A with a 1 dB reference (middle), T60 per note (right).

    The difference axis spans at least +-3 dB whatever the data, so a fraction
    of a dB never fills the plot; the shaded band is +-:data:`JND_LEVEL_DB`.
    """
    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    fig, (axl, ax0, ax1) = plt.subplots(1, 3, figsize=(14, 4.6))
    centres = [fm for _, fm, _, _ in comp.bands]
    labels = [lab for lab, _, _, _ in comp.bands]
    colours = plt.rcParams["axes.prop_cycle"].by_key()["color"]
    for k, w in enumerate(comp.balance):
        c = colours[k % len(colours)]
        span = f"{w.window_s[0]:g}-{w.window_s[1]:g} s"
        axl.semilogx(centres, w.level_a_db, marker="o", lw=1.2, color=c, label=f"A {span}")
        axl.semilogx(centres, w.level_b_db, marker="s", lw=1.0, ls="--", color=c,
                     label=f"B {span}")
    axl.set_ylabel("octave-band level, dB re full scale")
    axl.set_title("band levels as written (both designs)", fontsize=9, loc="left")
    range_db = _band_range(comp)
    diffs = [abs(v) for w in comp.balance for v in w.difference_db if math.isfinite(v)]
    lim = max(3.0, (max(diffs) if diffs else 0.0) + 0.5)
    ax0.axhspan(-JND_LEVEL_DB, JND_LEVEL_DB, color="0.88",
                label=f"+-{JND_LEVEL_DB:g} dB: about the smallest change heard")
    for k, w in enumerate(comp.balance):
        ax0.semilogx(centres, w.difference_db, marker="o", lw=1.3,
                     color=colours[k % len(colours)],
                     label=f"{w.window_s[0]:g}-{w.window_s[1]:g} s")
    ax0.axhline(0.0, color="0.5", lw=0.8)
    ax0.set_ylim(-lim, lim)
    ax0.set_ylabel("level B - A, dB")
    ax0.set_title(f"B - A, bands within {range_db:g} dB of the loudest (above zero: B "
                  "stronger)", fontsize=9, loc="left")
    for ax in (axl, ax0):
        ax.set_xticks(centres)
        ax.set_xticklabels(labels, fontsize=8)
        ax.minorticks_off()
        ax.set_xlabel("octave band, mid-band frequency in Hz")
        ax.grid(alpha=0.3)
    axl.legend(fontsize=7, ncol=2)
    ax0.legend(fontsize=7, title="window from start", title_fontsize=7)
    xs = np.arange(len(comp.notes))
    ax1.semilogy(xs - 0.08, [d.t60_s[0] for d in comp.notes], "o", label=f"A: {names[0]}")
    ax1.semilogy(xs + 0.08, [d.t60_s[1] for d in comp.notes], "s", label=f"B: {names[1]}")
    ax1.set_xticks(xs)
    ax1.set_xticklabels([d.note for d in comp.notes], fontsize=8)
    ax1.set_xlabel("note")
    ax1.set_ylabel("T60 of the fundamental, s (model; log scale)")
    ax1.set_title("sustain per note, each with its own tubes and motor", fontsize=9, loc="left")
    from matplotlib.ticker import FormatStrFormatter

    ax1.yaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax1.yaxis.set_minor_formatter(FormatStrFormatter("%g"))
    ax1.tick_params(axis="y", which="minor", labelsize=7)
    ax1.grid(alpha=0.3, which="both")
    ax1.legend(fontsize=8)
    lv = comp.levels
    how = (f"B levelled by {lv.gain_b_db:+.2f} dB to A's loudness" if comp.match == "loudness"
           else "one gain on both (loudness difference kept)")
    fig.suptitle(f"A vs B, {comp.passage.label}; {comp.length_s:.2f} s each; B "
                 f"{lv.loudness_difference_before_lu:+.2f} LU before levelling; {how}",
                 fontsize=9)
    fig.tight_layout()
    return figure_png(fig)


# --- the compare command's work: option checks, voicers, passage, files ---

MAX_TRIALS: Final = 200
"""Most blind trials one run writes."""


def check_score_options(score: Path | None, answers: str | None, answers_file: Path | None,
                        design_a: Path | None, design_b: Path | None) -> Path:
    """Refuse a scoring run that lacks its key or answers, or also names designs; its key."""
    if answers is not None and answers_file is not None:
        raise ConfigError("give --answers or --answers-file, not both",
                          source="--answers-file")
    if score is None or (answers is None and answers_file is None):
        raise ConfigError("scoring needs --score KEY and --answers \"A,B,...\" (or "
                          "--answers-file FILE)", source="--score" if score is None else
                          "--answers")
    if design_a is not None or design_b is not None:
        raise ConfigError("--score takes no design presets; give only --score KEY "
                          "--answers \"...\"", source="--score")
    return score


def check_compare_options(design_a: Path | None, design_b: Path | None, notes: str | None,
                          events: Path | None, blind: int | None, seed: int | None) -> list[str]:
    """Refuse a comparison without two designs or with clashing options; return warnings."""
    if design_a is None or design_b is None:
        raise ConfigError("give two design presets, A and B (or --score KEY --answers "
                          "\"...\" to score a blind test)", source="compare")
    if notes is not None and events is not None:
        raise ConfigError("give --notes or --events, not both", source="--events")
    if blind is not None and not 1 <= blind <= MAX_TRIALS:
        raise ConfigError(f"= {blind}: give between 1 and {MAX_TRIALS} trials (16 or more "
                          "for a useful test)", source="--blind")
    if seed is not None and seed < 0:
        raise ConfigError(f"= {seed}: the seed must be >= 0", source="--seed")
    if seed is not None and blind is None:
        return ["--seed has no effect without --blind"]
    return []


def check_match(match: str) -> None:
    """Refuse an unknown match mode."""
    if match not in MATCH_MODES:
        raise ConfigError(f"= {match!r}: must be one of " + ", ".join(MATCH_MODES),
                          source="--match")


def design_voicer(preset: Path, *, sample_rate: int, no_tubes: bool,
                  motor_rate: float | None) -> Voicer:
    """Plan the stereo voices of one design at a checked sample rate."""
    from synth.settings.instrument import load_instrument

    io.check_sample_rate(sample_rate)
    inst = load_instrument(preset)
    return Voicer(inst, sample_rate=float(sample_rate), tubes=not no_tubes,
                  motor_rate_rev_per_s=motor_rate, channels=2)


def design_voicers(design_a: Path, design_b: Path, *, sample_rate: int, no_tubes: bool,
                   bare_b: bool, motor_rate: float | None) -> tuple[Voicer, Voicer, bool]:
    """Voice plans of A and B (one plan when they are the same file) and whether they are."""
    same = design_a.resolve() == design_b.resolve() and not bare_b
    va = design_voicer(design_a, sample_rate=sample_rate, no_tubes=no_tubes,
                       motor_rate=motor_rate)
    vb = va if same else design_voicer(design_b, sample_rate=sample_rate,
                                       no_tubes=no_tubes or bare_b, motor_rate=motor_rate)
    return va, vb, same


def choose_passage(events: Path | None, sequence: Sequence[tuple[str, float | None]] | None,
                   va: Voicer, vb: Voicer, *, tail_s: float) -> Passage:
    """Choose the passage to play: an event file, the given notes, or the default phrase."""
    if events is not None:
        from synth.settings.score import read_events

        return events_passage(read_events(events), tail_s=tail_s)
    if sequence is not None:  # --notes
        return sequence_passage(sequence, tail_s=tail_s)
    return default_passage(va.instrument.notes, vb.instrument.notes, tail_s=tail_s)


@dataclass(frozen=True)
class ComparisonFiles:
    """What one comparison run wrote, and its record."""

    record: dict[str, Any]
    written: list[Path]
    png: Path
    report: Path
    trials: list[Path]
    key_path: Path | None
    page_path: Path | None


def write_comparison(comp: Comparison, directory: Path, *, names: tuple[str, str],
                     files: tuple[str, str], settings: dict[str, Any], blind: int | None,
                     seed: int | None, gap: float, gap_s: float, fmt: str, force: bool,
                     page: bool) -> ComparisonFiles:
    """Write the listening files, the plot, the report, blind trials and the page."""
    import secrets

    written = write_listening_files(comp, directory, gap_s=gap, sample_format=fmt,
                                    force=force, settings=settings)
    record = comparison_record(comp, names=names, files=files)
    png_bytes = comparison_png(comp, names=names)
    png = io.write_bytes(directory / "differences.png", png_bytes, force=force)
    report = io.write_bytes(directory / "differences.json",
                            record_json(record).encode("utf-8"), force=force)
    trials: list[Path] = []
    key_path: Path | None = None
    page_path: Path | None = None
    run_id = secrets.token_hex(6)  # names this run's answers; says nothing about the key
    if blind is not None:
        seed_used = seed if seed is not None else secrets.randbelow(2**31)
        trials, key_path = write_blind_trials(comp, directory, blind, seed=seed_used,
                                              gap_s=gap, designs=files, run=run_id,
                                              sample_format=fmt, force=force,
                                              settings=settings)
    if page:
        from synth.reports.page import listening_page

        text = listening_page(comp, names=names, png=png_bytes,
                              trials=[p.name for p in trials], run=run_id,
                              gap_s=gap_s)
        page_path = io.write_bytes(directory / PAGE_FILE, text.encode("utf-8"),
                                   force=force)
    return ComparisonFiles(record, list(written), png, report, trials, key_path, page_path)
