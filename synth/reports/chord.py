"""Even decay of chords: whether every note of a chord fades at the same rate.

The chord is rendered (mono) and each note is followed in its own narrow band
around its sounding fundamental (heterodyne envelope,
:func:`synth.analysis.band_envelope`): the level curve over time, its decay rate
in dB/s from a line fit (:func:`synth.analysis.fit_envelope_decay`), the spread
of those rates, and the balance between the notes (each note's level against the
loudest) at fixed times after the strike.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from synth.analysis import band_envelope, fit_envelope_decay
from synth.engine.render import render
from synth.voicing import Voicer

DB_PER_NEPER = 20.0 / math.log(10.0)
BALANCE_TIMES_S = (0.5, 1.0, 2.0, 4.0)


@dataclass(frozen=True)
class ChordNote:
    """One note of the chord."""

    note: str
    frequency_hz: float
    decay_db_per_s: float
    t60_s: float
    times_s: np.ndarray
    level_db: np.ndarray
    balance_db: tuple[float, ...]  # at BALANCE_TIMES_S, re the loudest note then
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class ChordDecay:
    """Per-note decay and balance of a chord."""

    notes: tuple[ChordNote, ...]
    spread_db_per_s: float
    times_s: tuple[float, ...]
    seconds: float


def chord_decay(voicer: Voicer, items: list[tuple[str, float]], *, mallet=None,
                roll_ms: float = 0.0, seconds: float = 6.0) -> ChordDecay:
    """Render the chord and track every note in its own band.

    ``items`` are (note, strength 0..1); the roll spreads strikes from the lowest up.
    """
    fs = voicer.sample_rate
    order = sorted(range(len(items)), key=lambda i: voicer.instrument.note_fraction(items[i][0]))
    step = roll_ms / 1000.0 / max(len(items) - 1, 1) if roll_ms > 0 else 0.0
    starts = {}
    voices = []
    for rank, i in enumerate(order):
        note, vel = items[i]
        starts[note] = rank * step
        voices.append(voicer.strike_voice(note, time_s=rank * step, velocity=vel, mallet=mallet,
                                          mono=True))
    x = render(voices, int(seconds * fs), sample_rate=fs, channels=1)[:, 0]
    peak = float(np.max(np.abs(x))) or 1.0
    partials = {n: [m.frequency_hz for m in voicer.model(n).modes.vertical[:3]] for n, _ in items}
    curves = []
    for note, _ in items:
        f = voicer.fundamental(note)[0]
        bw = 8.0
        warn = []
        for other, fl in partials.items():
            if other != note and any(abs(p - f) < 2 * bw for p in fl):
                warn.append(f"a partial of {other} lies within {2 * bw:g} Hz of {note}: "
                            "their levels mix in this band")
        t, env = band_envelope(x, fs, f, bandwidth_hz=bw, start_s=starts[note] + 0.05)
        fit = fit_envelope_decay(t, env, f, noise_floor=1e-9 * peak)
        level = 20 * np.log10(np.maximum(env, 1e-12 * peak) / peak)
        curves.append((note, f, fit, t, level, tuple(warn) + tuple(fit.warnings)))
    balance: list[list[float]] = []
    for tb in BALANCE_TIMES_S:
        at = [float(np.interp(tb, t, lv, left=np.nan, right=np.nan))
              for _, _, _, t, lv, _ in curves]
        top = np.nanmax(at) if np.any(np.isfinite(at)) else np.nan
        balance.append([a - top for a in at])
    notes = []
    for k, (note, f, fit, t, level, warnings) in enumerate(curves):
        notes.append(ChordNote(note, f, DB_PER_NEPER * fit.decay_per_s, fit.t60_s, t, level,
                               tuple(b[k] for b in balance), warnings))
    rates = [n.decay_db_per_s for n in notes]
    return ChordDecay(tuple(notes), float(max(rates) - min(rates)), BALANCE_TIMES_S, seconds)


def chord_decay_png(result: ChordDecay, title: str) -> bytes:
    """Level of each note over time in its own band."""
    from synth.reports.plots import figure_png, pyplot

    plt = pyplot()
    fig, ax = plt.subplots(figsize=(8, 4.2))
    for n in result.notes:
        ax.plot(n.times_s, n.level_db, lw=1.3,
                label=f"{n.note}: {n.decay_db_per_s:.2f} dB/s (T60 {n.t60_s:.1f} s)")
    for tb in result.times_s:
        ax.axvline(tb, color="0.8", lw=0.8)
    ax.set_xlabel("time after the first strike, s")
    ax.set_ylabel("level in the note's band, dB re peak")
    ax.set_title(f"{title}; spread {result.spread_db_per_s:.2f} dB/s", fontsize=10)
    ax.grid(alpha=0.3)
    ax.legend(fontsize=8)
    lo = min(float(np.min(n.level_db[np.isfinite(n.level_db)])) for n in result.notes)
    ax.set_ylim(max(lo, -100), 3)
    return figure_png(fig)
