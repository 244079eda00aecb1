"""``[solid_correction]`` -> :class:`~synth.physics.solid_correction.CorrectionTable`."""

from __future__ import annotations

from synth.config import Section
from synth.errors import ConfigError
from synth.physics.solid_correction import CORRECTED, CorrectionTable, mode_key
from synth.pitch import canonical_note, note_to_midi


def parse_correction(sec: Section | None,
                     notes: tuple[str, ...] | None) -> CorrectionTable | None:
    """Read a preset's ``[solid_correction]`` table (None without one).

    Anchors must be notes of the instrument's range (when known), strictly increasing;
    every factor list holds one value per anchor, each in ``solid.factor``.
    """
    if sec is None:
        return None
    sec.check_keys({"anchors", "mesh_level", "estimated_error", "factors"})
    raw = sec.data.get("anchors")
    if not isinstance(raw, list) or len(raw) < 2 or not all(isinstance(a, str) for a in raw):
        raise sec.error("anchors", "must be a list of at least two notes, e.g. "
                                   "[\"F3\", \"F6\"]")
    try:
        anchors = tuple(canonical_note(a) for a in raw)
    except ConfigError as exc:
        raise sec.error("anchors", str(exc)) from None
    if notes is not None:
        outside = [a for a in anchors if a not in notes]
        if outside:
            raise sec.error("anchors", f"{outside[0]} is not a note of the instrument's "
                                       f"range {notes[0]}..{notes[-1]}")
    midi = [note_to_midi(a) for a in anchors]
    if any(b <= a for a, b in zip(midi, midi[1:], strict=False)):
        raise sec.error("anchors", "must rise in pitch, each note once")
    level = sec.integer("mesh_level", limit="solid.mesh_level")
    error = sec.number("estimated_error", limit="solid.estimated_error")
    fsec = sec.section("factors")
    allowed = [mode_key(k, o) for k, o in CORRECTED]
    fsec.check_keys(allowed)
    factors = {key: tuple(fsec.numbers(key, limit="solid.factor", length=len(anchors)))
               for key in allowed if key in fsec}
    if not factors:
        raise sec.error("factors", "holds no factors; allowed keys: " + ", ".join(allowed))
    return CorrectionTable(anchors, level, error, factors)
