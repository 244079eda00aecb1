"""Bar alloys: elastic, thermal and loss properties.

Presets live in ``presets/materials/<name>.toml``; each property has a matching
entry in the file's ``[source]`` table saying where the number comes from.  A bar
file may instead give an inline table with at least ``youngs_modulus_pa``,
``density_kg_m3`` and ``poisson_ratio``; the thermal and loss properties then take
the values of 6061-T6 aluminium and say so in ``source``.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from typing import Any

from synth.config import Section, find_preset, load_toml, one_line, presets_dir
from synth.errors import ConfigError

REQUIRED = ("youngs_modulus_pa", "density_kg_m3", "poisson_ratio")
OPTIONAL = (
    "thermal_expansion_per_k",
    "thermal_conductivity_w_m_k",
    "specific_heat_j_kg_k",
    "modulus_temperature_coefficient_per_k",
    "loss_factor",
)
_FALLBACK = "aluminium-6061-t6"


@dataclass(frozen=True)
class Material:
    """An isotropic bar alloy at its reference temperature (SI units).

    Attributes
    ----------
    name : str
        Preset name or ``"inline"``.
    youngs_modulus_pa, density_kg_m3, poisson_ratio : float
        Elastic constants.
    thermal_expansion_per_k : float
        Linear expansion coefficient alpha, 1/K.
    thermal_conductivity_w_m_k, specific_heat_j_kg_k : float
        For thermoelastic (Zener) damping.
    modulus_temperature_coefficient_per_k : float
        d ln E / dT in 1/K (negative: metals soften when warm).
    loss_factor : float
        Internal friction eta = 1/Q of the alloy, dimensionless.
    reference_temperature_c : float
        Temperature at which the values hold (20 C).
    """

    name: str
    youngs_modulus_pa: float
    density_kg_m3: float
    poisson_ratio: float
    thermal_expansion_per_k: float
    thermal_conductivity_w_m_k: float
    specific_heat_j_kg_k: float
    modulus_temperature_coefficient_per_k: float
    loss_factor: float
    description: str = ""
    reference_temperature_c: float = 20.0
    source: dict[str, str] = field(default_factory=dict, compare=False, hash=False)

    @property
    def shear_modulus_pa(self) -> float:
        """G = E / (2 (1 + nu)) for an isotropic solid."""
        return self.youngs_modulus_pa / (2.0 * (1.0 + self.poisson_ratio))

    @property
    def bar_wave_speed_m_s(self) -> float:
        """sqrt(E / rho), the longitudinal wave speed of a thin rod."""
        return math.sqrt(self.youngs_modulus_pa / self.density_kg_m3)

    def at_temperature(self, temperature_c: float) -> Material:
        """Return the material at another temperature (modulus and density).

        E scales by ``1 + (dlnE/dT) dT``; uniform expansion lowers the density by
        ``1 - 3 alpha dT``.  Geometry expansion is applied by the caller
        (:meth:`synth.physics.geometry.BarGeometry.scaled`).
        """
        dt = temperature_c - self.reference_temperature_c
        return replace(
            self,
            youngs_modulus_pa=self.youngs_modulus_pa
            * (1.0 + self.modulus_temperature_coefficient_per_k * dt),
            density_kg_m3=self.density_kg_m3 * (1.0 - 3.0 * self.thermal_expansion_per_k * dt),
            reference_temperature_c=temperature_c,
        )


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
        missing = [k for k in (*REQUIRED, *OPTIONAL) if k not in source]
        if missing:
            raise ConfigError(
                "every property needs its source; missing for " + ", ".join(missing),
                source=sec.source,
                key=sec.key("source"),
            )
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

