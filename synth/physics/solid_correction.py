"""An instrument's 3-D correction table: factors f_3D / f_1D at anchor notes, interpolated.

Solving every bar of a range in 3-D takes minutes; the correction factors
``c = f_3D / f_1D`` of the 1-D model change slowly and smoothly along a graded range, so
a few anchor notes (both ends and every 5-7 semitones) carry them. The table holds one
factor per anchor for vertical partials 1-3, lateral 1 and torsional 1-2, and is
interpolated linearly in semitones between anchors (constant beyond the end anchors).

A tuned preset stores it as::

    [solid_correction]
    anchors = ["F3", "B3", ...]
    mesh_level = 4
    estimated_error = 0.0004        # largest 3-D error estimate at the anchors (relative)
    [solid_correction.factors]
    vertical_1 = [1.0070, ...]      # one per anchor
    ...

and every command that predicts frequencies from the preset (partials, tune, grind,
cutlist, strike, chord, render, sustain, compare: the voice plan) multiplies the 1-D
frequencies by the interpolated factors and says so: a line of human output
(:meth:`CorrectionTable.describe`) and a ``solid_correction`` field in JSON output and
WAV sidecars (:func:`correction_record`; null without a table).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes
from synth.pitch import note_to_midi

CORRECTED: tuple[tuple[str, int], ...] = (
    ("vertical", 1), ("vertical", 2), ("vertical", 3),
    ("lateral", 1), ("torsional", 1), ("torsional", 2))
"""The modes a table corrects."""

SECTION = "solid_correction"


def mode_key(kind: str, order: int) -> str:
    """Return the table key of a mode: ``vertical_1``."""
    return f"{kind}_{order}"


@dataclass(frozen=True)
class CorrectionTable:
    """Correction factors at anchor notes.

    Attributes
    ----------
    anchors : tuple of str
        Anchor notes, increasing in pitch (at least two).
    mesh_level : int
        Finest 3-D mesh level of the anchor solves.
    estimated_error : float
        Largest 3-D error estimate of the corrected modes at the anchors (relative).
    factors : dict
        ``mode_key -> tuple`` of one factor ``f_3D / f_1D`` per anchor; a mode may be
        absent (it is then not corrected).
    """

    anchors: tuple[str, ...]
    mesh_level: int
    estimated_error: float
    factors: dict[str, tuple[float, ...]]

    def factor(self, note: str, kind: str, order: int) -> float:
        """Return the interpolated factor of one mode at ``note`` (1 when not tabled)."""
        values = self.factors.get(mode_key(kind, order))
        if values is None:
            return 1.0
        x = [note_to_midi(a) for a in self.anchors]
        return float(np.interp(note_to_midi(note), x, values))

    def vertical(self, note: str, n: int) -> tuple[float, ...]:
        """Return the factors of vertical partials 1..n at ``note``."""
        return tuple(self.factor(note, "vertical", k) for k in range(1, n + 1))

    def describe(self) -> str:
        """Say in a line what the table is (the announcement every command prints)."""
        return (f"partials corrected by the preset's 3-D [{SECTION}] table: anchors "
                f"{self.anchors[0]}..{self.anchors[-1]} ({', '.join(self.anchors)}), mesh "
                f"level {self.mesh_level}, est. error {self.estimated_error * 100:.3f} %")

    def record(self) -> dict:
        """Return the table with its announcement: the field of JSON output and sidecars."""
        return {**self.to_table(), "description": self.describe()}

    def to_table(self) -> dict:
        """Return the TOML table."""
        return {"anchors": list(self.anchors), "mesh_level": int(self.mesh_level),
                "estimated_error": float(self.estimated_error),
                "factors": {k: [round(float(v), 9) for v in vals]
                            for k, vals in self.factors.items()}}


def correction_of(instrument) -> CorrectionTable | None:
    """Return the correction table of an instrument preset (None without one)."""
    tables = getattr(instrument, "tables", None)
    return None if tables is None else tables.solid_correction


def correction_record(table: CorrectionTable | None) -> dict | None:
    """Return the ``solid_correction`` field of a command's JSON or a WAV sidecar.

    None when the preset has no table (its frequencies are the 1-D model's).
    """
    return None if table is None else table.record()


def corrected_modes(modes: BarModes, table: CorrectionTable | None, note: str) -> BarModes:
    """Return ``modes`` with each tabled mode's frequency multiplied by its factor."""
    if table is None:
        return modes
    out = tuple(replace(m, frequency_hz=m.frequency_hz * table.factor(note, m.kind, m.order))
                for m in modes.modes)
    return replace(modes, modes=out)


def corrected_frequencies(table: CorrectionTable | None, note: str,
                          modes: tuple[tuple[str, int], ...] | list[tuple[str, int]],
                          frequencies_hz) -> np.ndarray:
    """Return ``frequencies_hz`` of ``modes`` (kind, order) at ``note`` times their factors."""
    f = np.asarray(frequencies_hz, dtype=float)
    if table is None:
        return f
    return f * np.array([table.factor(note, kind, order) for kind, order in modes])


def anchor_notes(notes: tuple[str, ...] | list[str], step: int = 6) -> list[str]:
    """Pick anchors: the first note, every ``step`` semitones, and the last note."""
    if step < 1:
        raise ConfigError(f"= {step}: must be 1 or more semitones", source="--anchor-step")
    notes = list(notes)
    picked = notes[::step]
    if picked[-1] != notes[-1]:
        if note_to_midi(notes[-1]) - note_to_midi(picked[-1]) < step / 2 and len(picked) > 1:
            picked[-1] = notes[-1]  # a short last interval: move the last anchor to the end
        else:
            picked.append(notes[-1])
    return picked
