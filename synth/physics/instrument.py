"""Single-bar files and instrument presets.

A **bar file** describes one bar::

    material = "aluminium-6061-t6"   # preset name, or an inline table
    length_m = 0.320
    width_m = 0.055
    thickness_m = 0.012
    min_thickness_m = 0.002          # optional, default 2 mm
    reference_pitch_hz = 442.0       # optional, for the nearest-note column
    [undercut]                       # optional; see synth.physics.geometry
    x_m = [0.060, 0.100, 0.160, 0.220, 0.260]
    thickness_m = [0.012, 0.0082, 0.0050, 0.0082, 0.012]

An **instrument preset** describes a range of bars::

    name = "..."
    description = "..."
    material = "aluminium-6061-t6"
    reference_pitch_hz = 442.0
    temperature_c = 21.0             # design (shop) temperature
    lowest_note = "F3"
    highest_note = "F6"
    target_ratios = [1.0, 4.0, 10.0794]   # vertical partials 1, 2, 3 over the fundamental

    [blank]                          # blank sizes at the lowest and highest note
    width_m = [0.060, 0.040]
    thickness_m = [0.013, 0.011]
    grading = "geometric"            # how sizes step between: "linear" or "geometric"
    min_thickness_m = 0.0025

    [undercut]                       # the family the tuner solves (see synth.physics.tuning)
    family = "power"                 # "parabolic", "power", "flat" or "free"
    exponent = 4.0                   # power only
    span_fraction = 0.6              # starting arch span / length
    depth_fraction = 0.6             # starting depth / (thickness - min thickness)

    [bars.F3]                        # per-note geometry (written by `barwright tune`)
    length_m = 0.41
    undercut = { family = "power", exponent = 4.0, depth_m = 0.0081, span_m = 0.29 }

The files are read by :mod:`synth.settings.instrument`, which reads every table
(``[tubes]``, ``[motor]``, ``[supports]``, ``[damping]``, ``[sound]``) once at load,
so a bad value is refused before any work starts; this module holds the
dataclasses.  A bar's own ``tube = { length_m = ... }`` sets the cut length of its
tube.  Note keys may use either spelling (``[bars.Bb3]`` is ``[bars."A#3"]``) and
are kept in the sharp spelling.  Every number has its
range in :data:`synth.config.LIMITS`.
"""

from __future__ import annotations

from dataclasses import dataclass, field

from synth.errors import ConfigError
from synth.physics.geometry import (
    DEFAULT_MIN_THICKNESS_M,
    BarGeometry,
    UndercutFamily,
)
from synth.physics.losses import Calibration, Supports
from synth.physics.mallet import SoundSettings
from synth.physics.materials import Material
from synth.physics.motor import MotorSpec
from synth.physics.solid_correction import CorrectionTable
from synth.physics.tube import TubeSettings
from synth.pitch import canonical_note, note_to_hz, note_to_midi

DEFAULT_RATIOS = (1.0, 4.0, 2.0 ** (40.0 / 12.0))
"""Default target ratios of vertical partials 1-3 for metal bars: fundamental, two
octaves, three octaves and a major third (equal tempered, 10.0794): common
practice, no source."""

@dataclass(frozen=True)
class Blank:
    """Graduated blank sizes across the range."""

    width_m: tuple[float, float]
    thickness_m: tuple[float, float]
    grading: str = "geometric"
    min_thickness_m: float = DEFAULT_MIN_THICKNESS_M

    def at(self, fraction: float) -> tuple[float, float]:
        """Width and thickness at ``fraction`` of the range (0 lowest, 1 highest)."""

        def grade(pair):
            lo, hi = pair
            if self.grading == "linear":
                return lo + (hi - lo) * fraction
            return lo * (hi / lo) ** fraction

        return grade(self.width_m), grade(self.thickness_m)

    def to_table(self) -> dict:
        """TOML table of the blank."""
        return {"width_m": list(self.width_m), "thickness_m": list(self.thickness_m),
                "grading": self.grading, "min_thickness_m": self.min_thickness_m}


@dataclass(frozen=True)
class PresetTables:
    """The optional tables of a bar file or preset, read and checked at load.

    ``motor`` is ``(MotorSpec, phase_step_deg)`` as ``[motor]`` gives them;
    ``damping_factors_given`` names the factors the preset's own ``[damping]``
    sets (the rest may come from its calibration file).
    """

    supports: Supports = field(default_factory=Supports)
    damping: Calibration = field(default_factory=Calibration)
    damping_factors_given: frozenset[str] = frozenset()
    tubes: TubeSettings | None = None
    motor: tuple[MotorSpec, float] = field(default_factory=lambda: (MotorSpec(), 0.0))
    sound: SoundSettings = field(default_factory=SoundSettings)
    solid_correction: CorrectionTable | None = None


@dataclass(frozen=True)
class Instrument:
    """A range of bars and how they are to be tuned, mounted and played."""

    source: str
    name: str
    description: str
    material: Material
    material_spec: object
    reference_pitch_hz: float
    temperature_c: float
    notes: tuple[str, ...]
    target_ratios: tuple[float, ...]
    blank: Blank | None
    undercut_family: UndercutFamily | None
    bars: dict[str, BarGeometry]
    tables: PresetTables = field(default_factory=PresetTables, compare=False)
    tube_lengths: dict[str, float] = field(default_factory=dict, compare=False)
    raw: dict = field(default_factory=dict, compare=False, repr=False)
    sha256: str | None = field(default=None, compare=False)
    """SHA-256 of the preset file's bytes as read (None: built from a table, not a file)."""

    def target_hz(self, note: str) -> float:
        """Equal-tempered target of a note at the preset's reference pitch."""
        return note_to_hz(note, self.reference_pitch_hz)

    def note_fraction(self, note: str) -> float:
        """Position of ``note`` in the range, 0 at the lowest, 1 at the highest."""
        lo, hi = note_to_midi(self.notes[0]), note_to_midi(self.notes[-1])
        return 0.0 if hi == lo else (note_to_midi(note) - lo) / (hi - lo)

    def check_note(self, note: str, option: str = "--note") -> str:
        """Return the canonical spelling of a note of this range, or raise."""
        try:
            name = canonical_note(note)
        except ConfigError as exc:
            raise ConfigError(exc.detail, source=option) from None
        if name not in self.notes:
            raise ConfigError(
                f"= {note!r}: not in this instrument's range; allowed: {self.notes[0]} to "
                f"{self.notes[-1]}",
                source=self.source, key=option,
            )
        return name

    def blank_for(self, note: str) -> tuple[float, float]:
        """Graduated blank width and thickness for a note."""
        if self.blank is None:
            raise ConfigError("has no [blank] table to grade bar sizes from",
                              source=self.source, key="blank")
        return self.blank.at(self.note_fraction(note))

    def bar(self, note: str) -> BarGeometry:
        """Return the geometry of a note's bar, as given in ``[bars.<note>]``."""
        name = self.check_note(note)
        if name not in self.bars:
            raise ConfigError(
                f"bars.{name}: no bar geometry for this note; run `barwright tune` on this "
                "preset to solve it, or add a [bars] table",
                source=self.source,
            )
        return self.bars[name]


@dataclass(frozen=True)
class BarFile:
    """A single bar read from a bar file."""

    source: str
    name: str
    geometry: BarGeometry
    material: Material
    reference_pitch_hz: float
    temperature_c: float
    note: str | None
    tables: PresetTables = field(default_factory=PresetTables, compare=False)
    sha256: str | None = field(default=None, compare=False)
    """SHA-256 of the file's bytes as read (None: built from a table, not a file)."""


