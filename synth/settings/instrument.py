"""Bar files and instrument presets -> ``Instrument`` and ``BarFile``.

The file formats and the two dataclasses are in :mod:`synth.physics.instrument`.
Every table is read once here, at load, so a bad value is refused before any work
starts.
"""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

from synth.config import Section, key_text, load_toml_digest
from synth.errors import ConfigError
from synth.physics.geometry import DEFAULT_MIN_THICKNESS_M, BarGeometry
from synth.physics.instrument import DEFAULT_RATIOS, BarFile, Blank, Instrument, PresetTables
from synth.pitch import DEFAULT_REFERENCE_HZ, canonical_note, note_range, note_to_midi
from synth.settings.correction import parse_correction
from synth.settings.damping import parse_calibration, parse_supports
from synth.settings.geometry import parse_family, parse_geometry
from synth.settings.mallet import parse_sound
from synth.settings.material import load_material
from synth.settings.motor import parse_motor
from synth.settings.tubes import parse_tube_override, parse_tubes

EXTRA_SECTIONS = ("tubes", "motor", "supports", "damping", "sound")


BAR_FILE_KEYS = ("material", "length_m", "width_m", "thickness_m", "min_thickness_m",
                 "undercut", "reference_pitch_hz", "temperature_c", "name", "note",
                 "description", *EXTRA_SECTIONS)


INSTRUMENT_KEYS = ("name", "description", "material", "reference_pitch_hz", "temperature_c",
                   "lowest_note", "highest_note", "target_ratios", "blank", "undercut", "bars",
                   "workshop", "client", "solid_correction", *EXTRA_SECTIONS)


def _tables(sec: Section, notes: tuple[str, ...] | None,
            instrument: bool = False) -> PresetTables:
    """Read the optional tables once now, so that a bad value stops the load, not a render."""
    names = (*EXTRA_SECTIONS, "solid_correction") if instrument else EXTRA_SECTIONS
    table = {name: sec.section(name, None) for name in names}
    damping = table["damping"]
    factors = damping.data.get("factors") if damping is not None else None
    return PresetTables(
        supports=parse_supports(table["supports"]),
        damping=parse_calibration(damping, notes),
        damping_factors_given=frozenset(factors) if isinstance(factors, dict) else frozenset(),
        tubes=parse_tubes(table["tubes"]),
        motor=parse_motor(table["motor"]),
        sound=parse_sound(table["sound"]),
        solid_correction=parse_correction(table.get("solid_correction"), notes),
    )


def load_design(path: str | Path) -> Instrument | BarFile:
    """Read a bar file or an instrument preset, deciding by its keys."""
    data, digest = load_toml_digest(path)
    return replace(design_from_table(data, str(path)), sha256=digest)


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
                   _tables(sec, None if note is None else (note,)))


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
        tables=_tables(sec, tuple(notes), instrument=True),
        tube_lengths=tube_lengths,
        raw=data,
    )
