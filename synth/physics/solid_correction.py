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

A stiffness calibration from a prototype bar (:mod:`synth.physics.stiffness`, the
``[stiffness]`` table of the calibration file the preset names) multiplies on top;
:func:`composed_factor` is the one place the two meet (:class:`ModelCorrection`,
:func:`model_correction`)::

    f = f_1D x k3D(note, kind, order) x sqrt(s) x c_n

with ``c_n`` for vertical partials 1-3 only; higher vertical partials, lateral and
torsional modes get ``sqrt(s)``: a modulus scale at fixed Poisson ratio scales the
shear modulus ``G = E / (2 (1 + nu))`` by the same ``s``, so the whole stiffness
matrix scales by ``s``, the mass matrix does not, and every elastic mode's
eigenvalue ``omega^2`` scales by ``s`` (Bathe, Finite Element Procedures, 1996,
section 10.2).  Commands announce the calibration on a line of its own and in a
``stiffness_calibration`` field.
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes
from synth.physics.stiffness import StiffnessCalibration
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


def composed_factor(table: CorrectionTable | None, stiffness: StiffnessCalibration | None,
                    note: str, kind: str, order: int) -> float:
    """Return the model's frequency factor of one mode: ``k3D x sqrt(s) x c_n``.

    The one place the 3-D table and a stiffness calibration compose (module
    docstring); either may be None (factor 1 for its part).
    """
    k = 1.0 if table is None else table.factor(note, kind, order)
    if stiffness is None:
        return k
    return k * stiffness.mode_factor(kind, order)


@dataclass(frozen=True)
class ModelCorrection:
    """Everything the model multiplies its 1-D frequencies by.

    Attributes
    ----------
    table : CorrectionTable or None
        The preset's ``[solid_correction]`` table.
    stiffness : StiffnessCalibration or None
        The stiffness calibration of a prototype bar.
    """

    table: CorrectionTable | None = None
    stiffness: StiffnessCalibration | None = None

    def factor(self, note: str, kind: str, order: int) -> float:
        """Return the composed factor of one mode at ``note`` (:func:`composed_factor`)."""
        return composed_factor(self.table, self.stiffness, note, kind, order)

    def vertical(self, note: str, n: int) -> tuple[float, ...]:
        """Return the composed factors of vertical partials 1..n at ``note``."""
        return tuple(self.factor(note, "vertical", k) for k in range(1, n + 1))


_PRESET = object()


def model_correction(instrument, stiffness=_PRESET) -> ModelCorrection | None:
    """Return the composed correction an instrument predicts with (None: neither part).

    ``stiffness``: a :class:`~synth.physics.stiffness.StiffnessCalibration` or None
    to use instead of the one the preset's calibration file holds
    (``instrument.tables.damping.stiffness``, the default).
    """
    table = correction_of(instrument)
    if stiffness is _PRESET:
        tables = getattr(instrument, "tables", None)
        stiffness = getattr(getattr(tables, "damping", None), "stiffness", None)
    if table is None and stiffness is None:
        return None
    return ModelCorrection(table, stiffness)


def correction_record(table: CorrectionTable | ModelCorrection | None) -> dict | None:
    """Return the ``solid_correction`` field of a command's JSON or a WAV sidecar.

    None when the preset has no 3-D table (its frequencies are the 1-D model's, perhaps
    times a stiffness calibration, which has its own field).
    """
    if isinstance(table, ModelCorrection):
        table = table.table
    return None if table is None else table.record()


def corrected_modes(modes: BarModes, table: CorrectionTable | ModelCorrection | None,
                    note: str) -> BarModes:
    """Return ``modes`` with each mode's frequency multiplied by its factor.

    ``table``: a 3-D table alone or the composed :class:`ModelCorrection`.
    """
    if table is None:
        return modes
    out = tuple(replace(m, frequency_hz=m.frequency_hz * table.factor(note, m.kind, m.order))
                for m in modes.modes)
    return replace(modes, modes=out)


def corrected_frequencies(table: CorrectionTable | ModelCorrection | None, note: str,
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
