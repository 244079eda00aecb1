"""Alloy presets and inline material tables -> :class:`~synth.physics.materials.Material`.

The file format is described in :mod:`synth.physics.materials`.
"""

from __future__ import annotations

import os
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
from synth.physics.materials import OPTIONAL, REQUIRED, Material

_FALLBACK = "aluminium-6061-t6"


def material_names() -> list[str]:
    """Return the names of the bundled material presets."""
    return sorted(p.stem for p in (presets_dir() / "materials").glob("*.toml"))


def _from_section(sec: Section, name: str, *, inline: bool) -> Material:
    sec.check_keys({*REQUIRED, *OPTIONAL, "description", "source", "name"})
    # ranges: synth.config.LIMITS["material.*"]
    values: dict[str, Any] = {k: sec.number(k, limit=f"material.{k}") for k in REQUIRED}
    source: dict[str, str] = {}
    src = sec.section("source", None)
    if src is not None:
        src.check_keys({*REQUIRED, *OPTIONAL})
        for key in src.data:
            source[key] = src.string(key)
    fallback = None
    for key in OPTIONAL:
        if key in sec:
            values[key] = sec.number(key, limit=f"material.{key}")
        elif inline:
            fallback = fallback or load_material(_FALLBACK)
            values[key] = getattr(fallback, key)
            source[key] = f"not given; value of {_FALLBACK} used"
        else:
            raise ConfigError("missing required key", source=sec.source, key=sec.key(key))
    if not inline:
        require_sources(sec, source, (*REQUIRED, *OPTIONAL), "every property")
    return Material(
        name=sec.string("name", name),
        description=sec.string("description", ""),
        source=source,
        **values,
    )


def load_material(spec: str | os.PathLike[str] | dict, *, source: str = "",
                  key: str = "material") -> Material:
    """Return a Material from a preset name, a TOML path or an inline table.

    Parameters
    ----------
    spec : str or dict
        Preset name (``"aluminium-6061-t6"``), path of a material TOML file, or
        an inline table with at least ``youngs_modulus_pa``, ``density_kg_m3``
        and ``poisson_ratio``.
    source, key : str
        Where ``spec`` came from, for error messages.
    """
    if isinstance(spec, dict):
        return _from_section(Section(spec, source or "<inline>", key), "inline", inline=True)
    if isinstance(spec, os.PathLike):
        spec = os.fspath(spec)
    if not isinstance(spec, str):
        raise ConfigError(
            f"= {spec!r}: must be a material name or an inline table", source=source or None,
            key=key,
        )
    path = find_preset(spec, "materials")
    if path is None:
        raise ConfigError(
            f"= {one_line(repr(spec), 60)}: unknown material; available: "
            + ", ".join(material_names()) + " (or the path of a .toml file)",
            source=source or None,
            key=key,
        )
    data = load_toml(path)
    return _from_section(Section(data, str(path)), path.stem, inline=False)
