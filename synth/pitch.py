"""Notes, frequencies and cents in twelve-tone equal temperament.

Scientific pitch notation counts octaves from C, so C4 is middle C and A4 is the
reference pitch (440 Hz by ISO 16:1975; bar makers often tune to 442 Hz).  Notes
are written as a letter A-G, an optional accidental (``#``, ``b``, ``♯``, ``♭``)
and an octave number 0-9: ``A4``, ``F#5``, ``Bb3``.  Only notes from C0 to C9
(MIDI 12-120) are accepted: a keyboard's compass and then some.  Every spelling
of a note means the same note: ``Bb3`` and ``A#3`` are one key, written ``A#3``
by :func:`canonical_note`.

References
----------
ISO 16:1975, Acoustics -- Standard tuning frequency (standard musical pitch).
"""

from __future__ import annotations

import math
import re
from typing import Final

import numpy as np

from synth.errors import ConfigError

DEFAULT_REFERENCE_HZ: Final[float] = 440.0
"""A4 in Hz by ISO 16:1975."""

CENTS_PER_OCTAVE: Final[float] = 1200.0

_LETTERS: Final[dict[str, int]] = {"C": 0, "D": 2, "E": 4, "F": 5, "G": 7, "A": 9, "B": 11}
_ACCIDENTALS: Final[dict[str, int]] = {"": 0, "#": 1, "♯": 1, "b": -1, "♭": -1}
_SHARP_NAMES: Final[tuple[str, ...]] = (
    "C", "C#", "D", "D#", "E", "F", "F#", "G", "G#", "A", "A#", "B",
)
_NOTE_RE = re.compile(r"^\s*([A-Ga-g])(#|b|♯|♭)?([0-9])\s*$")

LOWEST_MIDI: Final[int] = 12
"""C0, the lowest note a file may name."""
HIGHEST_MIDI: Final[int] = 120
"""C9, the highest note a file may name."""


def note_to_midi(name: str) -> int:
    """Return the MIDI note number of a note name (C4 = 60, A4 = 69).

    Raises
    ------
    ConfigError
        If ``name`` is not a note in scientific pitch notation from C0 to C9.
    """
    m = _NOTE_RE.match(name) if isinstance(name, str) and len(name) <= 12 else None
    if not m:
        shown = repr(name if not isinstance(name, str) or len(name) <= 12 else name[:12] + "...")
        raise ConfigError(
            f"unknown note {shown}: write a letter A-G, optional # or b, and an octave "
            "0-9, e.g. A4, F#5, Bb3"
        )
    letter, acc, octave = m.group(1).upper(), m.group(2) or "", int(m.group(3))
    number = 12 * (octave + 1) + _LETTERS[letter] + _ACCIDENTALS[acc]
    if not LOWEST_MIDI <= number <= HIGHEST_MIDI:
        raise ConfigError(f"note {name.strip()!r} is off the keyboard; allowed: C0 to C9")
    return number


def midi_to_note(number: int) -> str:
    """Return the sharp spelling of a MIDI note number (69 -> ``"A4"``)."""
    number = int(number)
    return f"{_SHARP_NAMES[number % 12]}{number // 12 - 1}"


def midi_to_hz(number: float, reference_hz: float = DEFAULT_REFERENCE_HZ) -> float:
    """Return the equal-tempered frequency of a (possibly fractional) MIDI number."""
    return float(reference_hz * 2.0 ** ((number - 69.0) / 12.0))


def note_to_hz(name: str, reference_hz: float = DEFAULT_REFERENCE_HZ) -> float:
    """Return the equal-tempered frequency of a note name in Hz."""
    return midi_to_hz(note_to_midi(name), reference_hz)


def hz_to_midi(frequency_hz, reference_hz: float = DEFAULT_REFERENCE_HZ):
    """Return the fractional MIDI number of a frequency."""
    return 69.0 + 12.0 * np.log2(np.asarray(frequency_hz, dtype=float) / reference_hz)


def cents(frequency_hz, reference_hz):
    """Return the interval from ``reference_hz`` up to ``frequency_hz`` in cents."""
    return CENTS_PER_OCTAVE * np.log2(
        np.asarray(frequency_hz, dtype=float) / np.asarray(reference_hz, dtype=float)
    )


def ratio_to_cents(ratio):
    """Return the size of a frequency ratio in cents."""
    return CENTS_PER_OCTAVE * np.log2(np.asarray(ratio, dtype=float))


def cents_to_ratio(c):
    """Return the frequency ratio of an interval given in cents."""
    return 2.0 ** (np.asarray(c, dtype=float) / CENTS_PER_OCTAVE)


def nearest_note(frequency_hz: float,
                 reference_hz: float = DEFAULT_REFERENCE_HZ) -> tuple[str, float]:
    """Return the nearest equal-tempered note and the offset from it in cents.

    Returns
    -------
    name : str
        Sharp spelling, e.g. ``"F#5"``.
    offset_cents : float
        Positive when ``frequency_hz`` is sharp of the note, in (-50, 50].
    """
    if not (frequency_hz > 0 and math.isfinite(frequency_hz)):
        raise ValueError(f"frequency must be positive and finite, got {frequency_hz}")
    m = float(hz_to_midi(frequency_hz, reference_hz))
    n = int(round(m))
    return midi_to_note(n), float(cents(frequency_hz, midi_to_hz(n, reference_hz)))


def note_range(lowest: str, highest: str) -> list[str]:
    """Return every chromatic note from ``lowest`` to ``highest`` inclusive."""
    lo, hi = note_to_midi(lowest), note_to_midi(highest)
    if hi < lo:
        raise ConfigError(f"range {lowest}..{highest} runs downward; give the lowest note first")
    return [midi_to_note(n) for n in range(lo, hi + 1)]


def canonical_note(name: str) -> str:
    """Return the sharp spelling of a note name (``"Bb3"`` -> ``"A#3"``)."""
    return midi_to_note(note_to_midi(name))
