"""Mallet presets and the ``[sound]`` table.

Mallet presets -> :class:`~synth.physics.mallet.Mallet`; ``[sound]`` ->
:class:`~synth.physics.mallet.SoundSettings`.
Mallet presets live in ``presets/mallets/<name>.toml``; :func:`load_mallet` reads a
name, a TOML path or an inline table.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

from synth.config import (
    Section,
    find_preset,
    load_toml,
    one_line,
    presets_dir,
    require_sources,
)
from synth.errors import ConfigError
from synth.physics.mallet import MALLET_KEYS, Mallet, SoundSettings, check_mallet_values


def parse_sound(sec: Section | None) -> SoundSettings:
    """Read a preset's ``[sound]`` table (every key optional)."""
    if sec is None:
        return SoundSettings()
    sec.check_keys({"mallet", "position", "across", "speed_min_m_s", "speed_max_m_s",
                    "damper_t60_s", "pan_width", "listening_distance_m"})
    lo = sec.number("speed_min_m_s", 0.3, limit="mallet.speed_m_s")
    hi = sec.number("speed_max_m_s", 3.0, limit="mallet.speed_m_s")
    if hi < lo:
        raise sec.error("speed_max_m_s", "must be >= speed_min_m_s")
    return SoundSettings(
        mallet=_mallet_name(sec),
        position=sec.number("position", 0.45, limit="strike.position"),
        across=sec.number("across", 0.0, limit="strike.across"),
        speed_min_m_s=lo, speed_max_m_s=hi,
        damper_t60_s=sec.number("damper_t60_s", 0.25, limit="sound.damper_t60_s"),
        pan_width=sec.number("pan_width", 0.8, limit="sound.pan_width"),
        listening_distance_m=sec.number("listening_distance_m", 1.0,
                                        limit="sound.listening_distance_m"),
    )


def _mallet_name(sec: Section) -> str:
    """Return the ``mallet`` key of a table: a preset name or a .toml path."""
    name = sec.string("mallet", "medium")
    if find_preset(name, "mallets") is None:
        raise sec.error("mallet", "unknown mallet; available: " + ", ".join(mallet_names())
                        + " (or the path of a .toml file)")
    return name


def mallet_names() -> list[str]:
    """Return the names of the bundled mallet presets, sorted.

    Returns
    -------
    list of str
        File stems of ``presets/mallets/*.toml`` (see :func:`synth.config.presets_dir`).
    """
    return sorted(p.stem for p in (presets_dir() / "mallets").glob("*.toml"))


def _from_section(sec: Section, name: str, *, preset: bool) -> Mallet:
    sec.check_keys({*MALLET_KEYS, "name", "description", "source"})
    values = check_mallet_values(sec)
    source: dict[str, str] = {}
    src = sec.section("source", None)
    if src is not None:
        src.check_keys(MALLET_KEYS)
        for key, text in src.data.items():
            if not isinstance(text, str) or not src.string(key).strip():
                raise src.error(key, "must be a non-empty string naming the source")
            source[key] = text
    if preset:
        require_sources(sec, source, MALLET_KEYS, "every value")
    return Mallet(
        name=sec.string("name", name),
        description=sec.string("description", ""),
        source=source,
        **values,
    )


def load_mallet(
    spec: str | os.PathLike[str] | dict[str, Any], *, source: str = "", key: str = "mallet"
) -> Mallet:
    """Return a Mallet from a preset name, a TOML path or an inline table.

    Parameters
    ----------
    spec : str, path or dict
        Preset name (one of :func:`mallet_names`), path of a mallet TOML file, or an
        inline table with ``mass_kg``, ``stiffness``, ``exponent`` and
        ``loss_s_per_m`` (optional ``name``, ``description``, ``source``).
    source, key : str
        Where ``spec`` came from, for error messages.

    Returns
    -------
    Mallet

    Raises
    ------
    ConfigError
        Unknown name, unreadable file, unknown or missing key, or a value out of
        range; the message names the file, the key, the value and the rule.
        Bundled presets must also give a ``[source]`` entry for every value.
    """
    if isinstance(spec, dict):
        return _from_section(Section(spec, source or "<inline>", key), "inline", preset=False)
    if not isinstance(spec, str | os.PathLike):
        raise ConfigError(
            f"= {spec!r}: must be a mallet name, a TOML path or an inline table",
            source=source or None,
            key=key,
        )
    text = os.fspath(spec)
    folder = presets_dir() / "mallets"
    path = find_preset(text, "mallets") if isinstance(spec, str) else Path(text)
    if path is None or path.suffix != ".toml" or not path.is_file():
        raise ConfigError(
            f"= {one_line(repr(text), 60)}: unknown mallet; available: "
            + ", ".join(mallet_names())
            + " (or the path of a .toml file)",
            source=source or None,
            key=key,
        )
    bundled = path.resolve().parent == folder.resolve()
    data = load_toml(path)
    return _from_section(Section(data, str(path)), path.stem, preset=bundled)
