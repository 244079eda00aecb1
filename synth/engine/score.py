"""Note events in seconds: :class:`Score` of :class:`Strike` and :class:`PedalChange`.

Strikes (note name, velocity, mallet, strike position, release) and pedal changes,
all timed in seconds.  The voice plan turns a score into engine voices; the engine
itself never sees notes.  Times become samples through
:func:`synth.engine.voice.seconds_to_sample`, the single conversion, so every event
lands on the same sample whoever converts it.  Files (our TOML event list, standard
MIDI files) are read by :mod:`synth.settings.score`, which documents both formats.
"""

from __future__ import annotations

from dataclasses import dataclass, field


@dataclass(frozen=True)
class Strike:
    """One note struck.

    Attributes
    ----------
    time_s : float
        When the mallet meets the bar, s from the start of the score.
    note : str
        Note name, sharp spelling (``"A#3"``).
    velocity : float or None
        Strength 0..1 (``None`` when ``mallet_speed_m_s`` is given).
    mallet_speed_m_s : float or None
        Speed of the mallet head at impact, m/s (``None`` when ``velocity`` is given).
    mallet : str or None
        Mallet preset name, or ``None`` for the renderer's default.
    position : float or None
        Strike point along the bar, 0..1 of its length; ``None``: default.
    across : float or None
        Strike point off the centreline, -0.5..0.5 of the width; ``None``: default.
    release_s : float or None
        When the note's own damping starts (key up, MIDI note-off), s; ``None``:
        the note has no release of its own (it rings until pedal or the end).
    key : str or None
        Where the strike was given (``"strike[3]"``), for messages; not compared.
    """

    time_s: float
    note: str
    velocity: float | None = None
    mallet_speed_m_s: float | None = None
    mallet: str | None = None
    position: float | None = None
    across: float | None = None
    release_s: float | None = None
    key: str | None = field(default=None, compare=False)


@dataclass(frozen=True)
class PedalChange:
    """The damper pedal moves.

    Attributes
    ----------
    time_s : float
        When, s from the start of the score.
    value : float
        0 = dampers on the bars, 1 = fully lifted; in between, half-pedal.
    """

    time_s: float
    value: float


@dataclass(frozen=True)
class Score:
    """Note events of a passage, sorted by time.

    Attributes
    ----------
    strikes : tuple of Strike
        Sorted by ``time_s`` (ties keep file order).
    pedal : tuple of PedalChange
        Sorted by ``time_s``.
    length_s : float or None
        Render length asked for by the file, s (``None``: the renderer decides).
    source : str
        The file read.
    """

    strikes: tuple[Strike, ...]
    pedal: tuple[PedalChange, ...] = ()
    length_s: float | None = None
    source: str = ""

    @property
    def last_event_s(self) -> float:
        """Time of the last strike, release or pedal change, s (0 for an empty score)."""
        times = [s.time_s for s in self.strikes]
        times += [s.release_s for s in self.strikes if s.release_s is not None]
        times += [p.time_s for p in self.pedal]
        return max(times, default=0.0)
