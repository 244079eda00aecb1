"""``[supports]``, ``[damping]`` and calibration files.

They become :class:`~synth.physics.losses.Supports` and
:class:`~synth.physics.losses.Calibration`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

from synth.config import Section, load_toml, parse_toml
from synth.errors import ConfigError
from synth.physics.losses import DEFAULT_CORD_LOSS_N_S_M, TERMS, Calibration, Supports
from synth.physics.stiffness import N_PARTIALS, STIFFNESS_KEYS, StiffnessCalibration
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
                       f"{sec.source} (with {base.source})", dict(base.tubes), base.stiffness)


def _calibration_file(sec: Section, name: str, notes: tuple[str, ...] | None) -> Calibration:
    """Read the calibration file named by a preset's ``[damping]`` table."""
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
    return calibration_from_table(data, str(path), notes)


CALIBRATION_TABLES = ("damping", "stiffness", "tubes")
"""The tables a calibration file may hold."""


def calibration_from_table(data: dict, source: str,
                           notes: tuple[str, ...] | None = None) -> Calibration:
    """Read a parsed calibration file: ``[damping]``, ``[stiffness]`` and/or ``[tubes]``."""
    top = Section(data, source)
    top.check_keys(set(CALIBRATION_TABLES))
    table = top.section("damping", None)
    tsec = top.section("tubes", None)
    ssec = top.section("stiffness", None)
    if table is None and tsec is None and ssec is None:
        raise ConfigError("has no [damping], [stiffness] or [tubes] table; a calibration file "
                          "holds [damping] with factors and [[damping.override]] tables, "
                          "[stiffness] with youngs_modulus_scale and factors, and/or [tubes] "
                          "with gap_calibration and coupling_calibration", source=source)
    tubes = {}
    if tsec is not None:
        tsec.check_keys({"gap_calibration", "coupling_calibration"})
        for k in tsec.data:
            tubes[k] = tsec.number(k, limit="tubes.calibration")
    stiffness = parse_stiffness(ssec)
    if table is None:
        return Calibration(source=source, tubes=tubes, stiffness=stiffness)
    table.check_keys({"factors", "override"})
    cal = _parse_damping(table, notes)
    return Calibration(cal.factors, cal.overrides, cal.source, tubes, stiffness)


def parse_stiffness(sec: Section | None) -> StiffnessCalibration | None:
    """Read a calibration file's ``[stiffness]`` table (None without one)."""
    if sec is None:
        return None
    sec.check_keys(set(STIFFNESS_KEYS))
    scale = sec.number("youngs_modulus_scale", limit="stiffness.scale")
    factors = tuple(sec.numbers("factors", limit="stiffness.factor", length=N_PARTIALS))
    # the record of the measurement: checked, not used by the model
    sec.number("youngs_modulus_pa", None, limit="material.youngs_modulus_pa")
    sec.number("scale_uncertainty", None, limit="stiffness.uncertainty")
    sec.string("note", None)
    sec.string("recording", None)
    for key in ("model_hz", "measured_hz"):
        sec.numbers(key, None, limit="stiffness.frequency_hz", length=N_PARTIALS)
    sec.numbers("tolerance_hz", None, limit="stiffness.tolerance_hz", length=N_PARTIALS)
    sec.numbers("residual_cents", None, limit="stiffness.residual_cents", length=N_PARTIALS)
    return StiffnessCalibration(float(scale), tuple(float(c) for c in factors), sec.source)


def stiffness_of(instrument, path=None) -> StiffnessCalibration | None:
    """Return the stiffness calibration to tune ``instrument`` with.

    Parameters
    ----------
    instrument : Instrument
        The preset; without ``path`` its ``[damping] calibration_file`` is used
        (None when it names none or the file has no ``[stiffness]`` table).
    path : str or Path, optional
        A calibration file given explicitly; it must hold ``[stiffness]``.

    Raises
    ------
    ConfigError
        ``path`` cannot be read or holds no ``[stiffness]`` table.
    """
    if path is None:
        return instrument.tables.damping.stiffness
    cal = calibration_from_table(load_toml(path), str(path), tuple(instrument.notes))
    if cal.stiffness is None:
        raise ConfigError("has no [stiffness] table: write one with `barwright measure "
                          "RECORDING --calibrate PRESET --note N --out FILE`",
                          source=str(path))
    return cal.stiffness


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


@dataclass(frozen=True)
class CalibrationTarget:
    """An existing calibration file that a command writes its tables into.

    Attributes
    ----------
    path : Path
    kept : dict
        The file's tables this command does not write (kept as they are).
    header : list of str
        The file's comment lines (kept with those tables).
    replaced : tuple of str
        Tables of the file this command replaces (only with ``force``).
    """

    path: Path
    kept: dict
    header: list[str]
    replaced: tuple[str, ...]


def calibration_target(path, writes: tuple[str, ...], *,
                       force: bool = False) -> CalibrationTarget | None:
    """Check a calibration file about to be written; None when it does not exist yet.

    One calibration file holds ``[damping]``, ``[stiffness]`` (``measure --calibrate``)
    and ``[tubes]`` (``tubecal``): a command writing some of them into an existing
    file keeps the others.  A table the file already holds is replaced only with
    ``force``.  A file that is not a calibration file gives None too: the output
    plan then refuses it as an existing file unless ``force`` (and replaces it
    whole with ``force``).

    Raises
    ------
    ConfigError
        The file holds one of ``writes`` and ``force`` is not given.
    """
    import tomllib

    p = Path(path)
    try:
        if not p.is_file():
            return None
        text = p.read_text(encoding="utf-8")
        data = tomllib.loads(text)
    except (OSError, UnicodeDecodeError, tomllib.TOMLDecodeError):
        return None
    if not data or any(k not in CALIBRATION_TABLES or not isinstance(v, dict)
                       for k, v in data.items()):
        return None
    replaced = tuple(k for k in writes if k in data)
    if replaced and not force:
        raise ConfigError("exists and already holds [" + "], [".join(replaced)
                          + "]; use --force to replace " + ("it" if len(replaced) == 1 else
                                                              "them")
                          + " (the file's other tables are kept)", source=str(p))
    kept = {k: v for k, v in data.items() if k not in writes}
    header = [ln for ln in text.splitlines() if ln.startswith("#")] if kept else []
    return CalibrationTarget(p, kept, header, replaced)


def repoint_calibration_file(table: dict, preset: Path, out: Path,
                             calibration: Path | None = None) -> dict:
    """Return a preset table, about to be written to ``out``, naming the right calibration file.

    ``[damping] calibration_file`` is relative to the preset that names it: written
    to another folder, it is re-pointed from ``out``'s folder to the same file.  An
    explicit ``calibration`` (what ``tune --calibration`` designed with) replaces it,
    so that a preset designed for calibrated metal also predicts with that metal.
    """
    damping = dict(table.get("damping", {}))
    if calibration is not None:
        target = Path(calibration)
    elif "calibration_file" in damping:
        target = Path(damping["calibration_file"])
        if not target.is_absolute():
            target = Path(preset).parent / target
    else:
        return table
    base = Path(out).parent.resolve()
    try:
        name = os.path.relpath(target.resolve(), base)
    except ValueError:  # another drive: no relative path
        name = str(target.resolve())
    damping["calibration_file"] = Path(name).as_posix()
    return {**table, "damping": damping}
