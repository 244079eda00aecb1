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

Tables ``[tubes]``, ``[motor]``, ``[supports]``, ``[damping]`` and ``[sound]`` are
read by the modules that use them; this module reads each once at load (so a bad
value is refused before any work starts) and keeps them as
:class:`~synth.config.Section` objects.  A bar's own ``tube = { length_m = ... }``
sets the cut length of its tube.  Note keys may use either spelling (``[bars.Bb3]``
is ``[bars."A#3"]``) and are kept in the sharp spelling.  Every number has its
range in :data:`synth.config.LIMITS`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from synth.config import Section, key_text, load_toml
from synth.errors import ConfigError
from synth.physics.geometry import (
    DEFAULT_MIN_THICKNESS_M,
    BarGeometry,
    UndercutFamily,
    parse_family,
    parse_geometry,
)
from synth.physics.losses import parse_calibration, parse_supports
from synth.physics.mallet import parse_sound
from synth.physics.materials import Material, load_material
from synth.physics.motor import parse_motor
from synth.physics.solid_correction import parse_correction
from synth.physics.tube import parse_tube_override, parse_tubes
from synth.pitch import DEFAULT_REFERENCE_HZ, canonical_note, note_range, note_to_hz, note_to_midi

DEFAULT_RATIOS = (1.0, 4.0, 2.0 ** (40.0 / 12.0))
"""Default target ratios of vertical partials 1-3 for metal bars: fundamental, two
octaves, three octaves and a major third (equal tempered, 10.0794): common
practice, no source."""

EXTRA_SECTIONS = ("tubes", "motor", "supports", "damping", "sound")
BAR_FILE_KEYS = ("material", "length_m", "width_m", "thickness_m", "min_thickness_m",
                 "undercut", "reference_pitch_hz", "temperature_c", "name", "note",
                 "description", *EXTRA_SECTIONS)
INSTRUMENT_KEYS = ("name", "description", "material", "reference_pitch_hz", "temperature_c",
                   "lowest_note", "highest_note", "target_ratios", "blank", "undercut", "bars",
                   "workshop", "client", "solid_correction", *EXTRA_SECTIONS)


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
    sections: dict[str, Section] = field(default_factory=dict, compare=False)
    tube_lengths: dict[str, float] = field(default_factory=dict, compare=False)
    raw: dict = field(default_factory=dict, compare=False, repr=False)

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

    def section(self, name: str) -> Section | None:
        """One of the extra tables ([tubes], [motor], ...), or None."""
        return self.sections.get(name)


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
    sections: dict[str, Section] = field(default_factory=dict, compare=False)


def _extra_sections(sec: Section, notes: tuple[str, ...] | None,
                    instrument: bool = False) -> dict[str, Section]:
    out = {}
    for name in (*EXTRA_SECTIONS, "solid_correction") if instrument else EXTRA_SECTIONS:
        s = sec.section(name, None)
        if s is not None:
            out[name] = s
    # Read every table once now, so that a bad value stops the load, not a render.
    parse_supports(out.get("supports"))
    parse_calibration(out.get("damping"), notes)
    parse_tubes(out.get("tubes"))
    parse_motor(out.get("motor"))
    parse_sound(out.get("sound"))
    parse_correction(out.get("solid_correction"), notes)
    return out


def load_design(path: str | Path) -> Instrument | BarFile:
    """Read a bar file or an instrument preset, deciding by its keys."""
    return design_from_table(load_toml(path), str(path))


def design_from_table(data: dict, source: str) -> Instrument | BarFile:
    """Check a parsed TOML table as :func:`load_design` does (``source`` names it)."""
    sec = Section(data, source)
    if "lowest_note" in data or "bars" in data or "blank" in data:
        return _instrument(sec, data)
    return _bar_file(sec)


def load_instrument(path: str | Path) -> Instrument:
    """Read an instrument preset (raise if the file is a single-bar file)."""
    design = load_design(path)
    if not isinstance(design, Instrument):
        raise ConfigError("is a single-bar file; this command needs an instrument preset "
                          "(with lowest_note, highest_note and [bars] or [blank])",
                          source=str(path))
    return design


def _reference(sec: Section) -> float:
    return sec.number("reference_pitch_hz", DEFAULT_REFERENCE_HZ, limit="reference_pitch_hz")


def _temperature(sec: Section) -> float:
    return sec.number("temperature_c", 20.0, limit="temperature_c")


def _bar_file(sec: Section) -> BarFile:
    sec.check_keys(BAR_FILE_KEYS)
    material = load_material(sec._get("material", None) or _missing(sec, "material"),
                             source=sec.source, key="material")
    geometry = parse_geometry(sec)
    sec.string("description", "")
    note = sec.string("note", None)
    if note is not None:
        try:
            note = canonical_note(note)
        except ConfigError as exc:
            raise sec.error("note", exc.detail) from None
    return BarFile(sec.source, sec.string("name", Path(sec.source).stem), geometry, material,
                   _reference(sec), _temperature(sec), note,
                   _extra_sections(sec, None if note is None else (note,)))


def _missing(sec: Section, key: str):
    raise ConfigError("missing required key", source=sec.source, key=key)


def _instrument(sec: Section, data: dict) -> Instrument:
    sec.check_keys(INSTRUMENT_KEYS)
    material_spec = sec._get("material", None) or _missing(sec, "material")
    material = load_material(material_spec, source=sec.source, key="material")
    for key in ("lowest_note", "highest_note"):
        try:
            note_to_midi(sec.string(key))
        except ConfigError as exc:
            raise sec.error(key, exc.detail) from None
    try:
        notes = note_range(sec.string("lowest_note"), sec.string("highest_note"))
    except ConfigError as exc:
        raise sec.error("highest_note", exc.detail) from None
    ratios = tuple(sec.numbers("target_ratios", list(DEFAULT_RATIOS), limit="target_ratio",
                               max_len=16))
    if abs(ratios[0] - 1.0) > 1e-12:
        raise sec.error("target_ratios", "the first ratio is the fundamental and must be 1")
    if any(b <= a for a, b in zip(ratios, ratios[1:], strict=False)):
        raise sec.error("target_ratios", "ratios must increase")

    blank = None
    bsec = sec.section("blank", None)
    if bsec is not None:
        bsec.check_keys({"width_m", "thickness_m", "grading", "min_thickness_m"})
        width = bsec.numbers("width_m", limit="bar.width_m", length=2)
        thick = bsec.numbers("thickness_m", limit="bar.thickness_m", length=2)
        blank = Blank(
            (width[0], width[1]),
            (thick[0], thick[1]),
            bsec.string("grading", "geometric", choices=("linear", "geometric")),
            bsec.number("min_thickness_m", DEFAULT_MIN_THICKNESS_M, limit="bar.min_thickness_m"),
        )
        if blank.min_thickness_m >= min(blank.thickness_m):
            raise bsec.error("min_thickness_m", "must be below the blank thickness")

    usec = sec.section("undercut", None)
    family = parse_family(usec) if usec is not None else None
    for key in ("workshop", "client"):   # free text, shown by `barwright demo`
        sec.string(key, "")

    bars: dict[str, BarGeometry] = {}
    tube_lengths: dict[str, float] = {}
    spelt: dict[str, str] = {}
    bsecs = sec.section("bars", None)
    if bsecs is not None:
        for note_key in bsecs.data:
            where = f"bars.{key_text(note_key)}"
            try:
                note = canonical_note(note_key)
            except ConfigError as exc:
                raise ConfigError(f"is not a note name: {exc.detail}", source=sec.source,
                                  key=where) from None
            if note not in notes:
                raise ConfigError(f"not in this instrument's range; allowed: {notes[0]} to "
                                  f"{notes[-1]}", source=sec.source, key=where)
            if note in spelt:
                raise ConfigError(f"the same note as bars.{spelt[note]}; give each bar once",
                                  source=sec.source, key=where)
            spelt[note] = note_key
            bar_sec = bsecs.section(note_key)
            bar_sec.check_keys({"length_m", "width_m", "thickness_m", "min_thickness_m",
                                "undercut", "tube"})
            defaults = {}
            if blank is not None:
                frac = (note_to_midi(note) - note_to_midi(notes[0])) / max(1, len(notes) - 1)
                w, t = blank.at(frac)
                defaults = {"width_m": w, "thickness_m": t,
                            "min_thickness_m": blank.min_thickness_m}
            bars[note] = parse_geometry(bar_sec, defaults)
            tube_sec = bar_sec.section("tube", None)
            if tube_sec is not None:
                tube_lengths[note] = parse_tube_override(tube_sec)

    return Instrument(
        source=sec.source,
        name=sec.string("name", Path(sec.source).stem),
        description=sec.string("description", ""),
        material=material,
        material_spec=material_spec,
        reference_pitch_hz=_reference(sec),
        temperature_c=_temperature(sec),
        notes=tuple(notes),
        target_ratios=ratios,
        blank=blank,
        undercut_family=family,
        bars=bars,
        sections=_extra_sections(sec, tuple(notes), instrument=True),
        tube_lengths=tube_lengths,
        raw=data,
    )
