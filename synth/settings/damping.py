"""``[supports]``, ``[damping]`` and calibration files.

They become :class:`~synth.physics.losses.Supports` and
:class:`~synth.physics.losses.Calibration`.
"""

from __future__ import annotations

from synth.config import Section, parse_toml
from synth.errors import ConfigError
from synth.physics.losses import DEFAULT_CORD_LOSS_N_S_M, TERMS, Calibration, Supports
from synth.pitch import canonical_note

MAX_OVERRIDES = 1000
"""Most ``[[damping.override]]`` tables in one file (a few per note of a full range)."""


def parse_supports(sec: Section | None) -> Supports:
    """Read a preset's ``[supports]`` table (all keys optional)."""
    if sec is None:
        return Supports()
    sec.check_keys({"cord_loss_n_s_m", "position", "fraction", "offset_m"})
    return Supports(
        cord_loss_n_s_m=sec.number("cord_loss_n_s_m", DEFAULT_CORD_LOSS_N_S_M,
                                   limit="supports.cord_loss_n_s_m"),
        position=sec.string("position", "nodes", choices=("nodes", "fraction")),
        fraction=sec.number("fraction", 0.2242, limit="supports.fraction"),
        offset_m=sec.number("offset_m", 0.0, limit="supports.offset_m"),
    )


def parse_calibration(sec: Section | None, notes: tuple[str, ...] | None = None) -> Calibration:
    """Read a ``[damping]`` table or a calibration file.

    Keys: ``factors = {internal = 1.0, thermoelastic = 1.0, radiation = 1.0, cords = 1.0,
    air = 1.0, tube = 1.0}`` (any subset) and ``[[damping.override]]`` tables with
    ``note`` (or "*"), ``kind``, ``order`` and ``q``.

    ``calibration_file`` (a preset's ``[damping]`` only) names a calibration file,
    relative to the preset, whose own ``[damping]`` table is merged in: a factor or
    an override the preset gives explicitly wins over the file's.

    Override notes may be spelt either way (``Bb4`` is ``A#4``) and are kept in the
    sharp spelling; with ``notes`` (the instrument's range) a note outside it is
    refused.
    """
    if sec is None:
        return Calibration()
    sec.check_keys({"factors", "override", "calibration_file"})
    own = _parse_damping(sec, notes)
    name = sec.string("calibration_file", None)
    if name is None:
        return own
    base = _calibration_file(sec, name, notes)
    return Calibration({**base.factors, **own.factors}, {**base.overrides, **own.overrides},
                       f"{sec.source} (with {base.source})", dict(base.tubes))


def _calibration_file(sec: Section, name: str, notes: tuple[str, ...] | None) -> Calibration:
    """Read the ``[damping]`` table of a calibration file named by a preset."""
    from pathlib import Path

    from synth.config import load_toml

    if not name.endswith(".toml") or len(name) > 4096:
        raise sec.error("calibration_file", "must be the path of a .toml file")
    path = Path(name)
    if not path.is_absolute():
        path = Path(sec.source).parent / path
    try:
        data = load_toml(path)
    except ConfigError as exc:
        raise sec.error("calibration_file", f"cannot be used: {exc} (the path is relative "
                        "to the preset)") from None
    top = Section(data, str(path))
    top.check_keys({"damping", "tubes"})
    table = top.section("damping", None)
    tsec = top.section("tubes", None)
    if table is None and tsec is None:
        raise ConfigError("has no [damping] or [tubes] table; a calibration file holds "
                          "[damping] with factors and [[damping.override]] tables, and/or "
                          "[tubes] with gap_calibration and coupling_calibration",
                          source=str(path))
    tubes = {}
    if tsec is not None:
        tsec.check_keys({"gap_calibration", "coupling_calibration"})
        for k in tsec.data:
            tubes[k] = tsec.number(k, limit="tubes.calibration")
    if table is None:
        return Calibration(source=str(path), tubes=tubes)
    table.check_keys({"factors", "override"})
    cal = _parse_damping(table, notes)
    return Calibration(cal.factors, cal.overrides, cal.source, tubes)


def _override_note(osec: Section, notes: tuple[str, ...] | None) -> str:
    name = osec.string("note", "*")
    if name == "*":
        return name
    try:
        note = canonical_note(name)
    except ConfigError as exc:
        raise osec.error("note", exc.detail) from None
    if notes is not None and note not in notes:
        raise osec.error("note", f"not in this instrument's range; allowed: {notes[0]} to "
                                 f"{notes[-1]}, or \"*\" for every note")
    return note


def _parse_damping(sec: Section, notes: tuple[str, ...] | None = None) -> Calibration:
    factors = {}
    fsec = sec.section("factors", None)
    if fsec is not None:
        fsec.check_keys(TERMS)
        for k in fsec.data:
            factors[k] = fsec.number(k, limit="damping.factor")
    overrides = {}
    raw = sec.data.get("override", [])
    if not isinstance(raw, list):
        raise sec.error("override", "must be a list of tables [[override]]")
    if len(raw) > MAX_OVERRIDES:
        raise sec.error("override", f"holds {len(raw)} tables; allowed: up to {MAX_OVERRIDES}")
    for i, item in enumerate(raw):
        osec = Section(item, sec.source, sec.key(f"override[{i}]"))
        osec.check_keys({"note", "kind", "order", "q"})
        overrides[(_override_note(osec, notes),
                   osec.string("kind", "vertical", choices=("vertical", "lateral", "torsional")),
                   osec.integer("order", limit="damping.order"))] = osec.number(
                       "q", limit="damping.q")
    return Calibration(factors, overrides, sec.source)


def check_calibration_text(text: str, source: str) -> None:
    """Check that a calibration file about to be written reads back as TOML.

    Raises
    ------
    ConfigError
        One line naming ``source`` when the text is not TOML that this reader takes.
    """
    parse_toml(text, source)
