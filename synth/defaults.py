"""The render defaults every sound command shares, defined once.

``strike``, ``chord``, ``render`` and ``compare`` (and the Python API) take
their strike strength, pedal and end level from :data:`RENDER_DEFAULTS`; the
command line shows them in ``--help`` and the README lists them.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class RenderDefaults:
    """The defaults of every render.

    Attributes
    ----------
    velocity : float
        Strength of a strike that names neither strength nor mallet speed, 0..1,
        mapped to a mallet speed by the preset's ``[sound]`` table.
    pedal : float
        Damper pedal before any pedal change: 1 = dampers lifted (notes ring),
        0 = dampers on the bars.
    end_level_db : float
        Level re the file's peak that its last 10 ms stay below, dB: a render
        without a set length rings out to it, one with a set length is faded
        to it.
    longest_s : float
        Longest ring-out after the last strike, s; a render that has not rung
        out by then is faded there and says so.
    """

    velocity: float = 0.6
    pedal: float = 1.0
    end_level_db: float = -60.0
    longest_s: float = 600.0


RENDER_DEFAULTS = RenderDefaults()
"""The one set of render defaults."""
