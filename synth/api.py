"""The Python API: solve, plan, render and analyse without the command line.

Every function here takes settings read by the one reader
(:func:`synth.settings.instrument.load_design`, :func:`synth.settings.score.read_events`)
or plain arrays, and returns arrays or frozen dataclasses; nothing prints or
writes a file.  The names are re-exported by :mod:`synth` (lazily: ``import
synth`` loads neither numba nor scipy until a function needs them).

Example
-------
>>> import synth
>>> demo = synth.load_instrument("presets/instruments/lantern-street-bars.toml")
>>> plan = synth.Voicer(demo, channels=1)
>>> x = synth.render_strike(plan, "A4", seconds=1.0)       # (48000, 1) pascals
>>> synth.find_partials(x[:, 0], plan.sample_rate).partials[0].frequency_hz
"""

from __future__ import annotations

import math

import numpy as np

from synth.defaults import RENDER_DEFAULTS
from synth.engine.score import Score
from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes, solve_bar
from synth.physics.instrument import BarFile, Instrument
from synth.voicing import Voicer

MAX_RING_S = 30.0
"""Longest ring-out after the last event when a score gives no length, s."""


def _plan(plan: Voicer | Instrument) -> Voicer:
    if isinstance(plan, Voicer):
        return plan
    if isinstance(plan, Instrument):
        return Voicer(plan)
    raise ConfigError(f"= {type(plan).__name__}: give a Voicer or an Instrument "
                      "(synth.load_instrument)", source="plan")


def _samples(seconds: float, sample_rate: float, what: str) -> int:
    if not (isinstance(seconds, (int, float)) and math.isfinite(seconds) and seconds > 0):
        raise ConfigError(f"= {seconds!r}: must be a finite number of seconds > 0",
                          source=what)
    return max(1, int(round(seconds * sample_rate)))


def solve_partials(design: Instrument | BarFile, note: str | None = None, *,
                   n_vertical: int = 5, n_lateral: int = 2,
                   n_torsional: int = 2) -> BarModes:
    """Solve the partials of one bar: of a bar file, or of one note of a preset.

    Parameters
    ----------
    design : Instrument or BarFile
        As read by :func:`synth.load_design` or :func:`synth.load_instrument`.
    note : str, optional
        The preset's note, e.g. ``"A4"`` (required for an instrument, refused for
        a bar file).
    n_vertical, n_lateral, n_torsional : int
        How many modes of each family, 0-20.

    Returns
    -------
    BarModes
        Modes with frequency (Hz), shape, nodes (m) and modal mass (kg), the
        material taken at the design's temperature.
    """
    if isinstance(design, Instrument):
        if note is None:
            raise ConfigError(f"is an instrument preset: name the bar with note= (range "
                              f"{design.notes[0]}..{design.notes[-1]})", source=design.source)
        geometry = design.bar(design.check_note(note, option="note"))
    elif isinstance(design, BarFile):
        if note is not None:
            raise ConfigError("is a single-bar file; note= applies to instrument presets only",
                              source=design.source, key="note")
        geometry = design.geometry
    else:
        raise ConfigError(f"= {type(design).__name__}: give an Instrument or a BarFile "
                          "(synth.load_design)", source="design")
    for name, n in (("n_vertical", n_vertical), ("n_lateral", n_lateral),
                    ("n_torsional", n_torsional)):
        if not (isinstance(n, int) and 0 <= n <= 20):
            raise ConfigError(f"= {n!r}: must be a whole number from 0 to 20", source=name)
    material = design.material.at_temperature(design.temperature_c)
    return solve_bar(geometry, material, n_vertical=n_vertical, n_lateral=n_lateral,
                     n_torsional=n_torsional)


def render_strike(plan: Voicer | Instrument, note: str, *, seconds: float = 3.0,
                  velocity: float | None = None, speed_m_s: float | None = None,
                  mallet: str | None = None, position: float | None = None,
                  across: float | None = None) -> np.ndarray:
    """Render one struck note into an array.

    Parameters
    ----------
    plan : Voicer or Instrument
        The voice plan (sample rate, channels, tubes, motor, mallet); an
        Instrument is planned with the defaults of :class:`synth.Voicer`.
    note : str
        Note of the preset, e.g. ``"A4"``.
    seconds : float
        Length of the result, s (> 0).
    velocity : float, optional
        Strength 0-1, mapped to a mallet speed by the preset's ``[sound]`` table.
    speed_m_s : float, optional
        Mallet speed at impact, m/s (instead of ``velocity``; default 1 m/s).
    mallet : str, optional
        Mallet preset name (default: the plan's).
    position : float, optional
        Strike point, 0-1 of the bar's length (default: the preset's).
    across : float, optional
        Off the centreline, -0.5-0.5 of the width.

    Returns
    -------
    samples : ndarray, shape (n_samples, channels)
        Sound pressure at the listening distance, Pa (float64, not normalised).
    """
    from synth.engine.render import render

    plan = _plan(plan)
    n = _samples(seconds, plan.sample_rate, "seconds")
    voice = plan.strike_voice(note, velocity=velocity, speed_m_s=speed_m_s, mallet=mallet,
                              position=position, across=across)
    return render([voice], n, sample_rate=plan.sample_rate, channels=plan.channels)


def score_length_s(plan: Voicer, score: Score, voices) -> float:
    """Return how long a score's render should be, s.

    The score's own length when it gives one, else until the slowest voice has
    fallen 60 dB, at most :data:`MAX_RING_S` after the last event.
    """
    from synth.engine.render import ring_out_sample

    if score.length_s is not None:
        return score.length_s
    if not voices:
        raise ConfigError("has no strikes to render", source=score.source or "score")
    ring = ring_out_sample(voices, sample_rate=plan.sample_rate, level_db=-60.0)
    ring_s = math.inf if ring is None else ring / plan.sample_rate
    return min(ring_s, score.last_event_s + MAX_RING_S)


def render_score(plan: Voicer | Instrument, score: Score, *, seconds: float | None = None,
                 default_pedal: float = RENDER_DEFAULTS.pedal) -> np.ndarray:
    """Render a score (strikes and pedal changes) into an array.

    Parameters
    ----------
    plan : Voicer or Instrument
        The voice plan (see :func:`render_strike`).
    score : Score
        As read by :func:`synth.read_events` (TOML event list or MIDI).
    seconds : float, optional
        Length, s; default the score's own length, else until every note has
        fallen 60 dB (at most 30 s after the last event).
    default_pedal : float
        Pedal before the score's first pedal event, 0-1 (1: dampers lifted; default
        :data:`synth.defaults.RENDER_DEFAULTS`, as ``barwright render``).

    Returns
    -------
    samples : ndarray, shape (n_samples, channels)
        Sound pressure at the listening distance, Pa (float64, not normalised).
    """
    from synth.engine.render import render

    plan = _plan(plan)
    if not (isinstance(default_pedal, (int, float)) and 0.0 <= default_pedal <= 1.0):
        raise ConfigError(f"= {default_pedal!r}: must be between 0 and 1",
                          source="default_pedal")
    voices = plan.score_voices(score, default_pedal=default_pedal)
    length = score_length_s(plan, score, voices) if seconds is None else seconds
    n = _samples(length, plan.sample_rate, "seconds")
    return render(voices, n, sample_rate=plan.sample_rate, channels=plan.channels)
