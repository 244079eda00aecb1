"""Bar alloys: elastic, thermal and loss properties.

Presets live in ``presets/materials/<name>.toml``; each property has a matching
entry in the file's ``[source]`` table saying where the number comes from.  A bar
file may instead give an inline table with at least ``youngs_modulus_pa``,
``density_kg_m3`` and ``poisson_ratio``; the thermal and loss properties then take
the values of 6061-T6 aluminium and say so in ``source``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

REQUIRED = ("youngs_modulus_pa", "density_kg_m3", "poisson_ratio")
OPTIONAL = (
    "thermal_expansion_per_k",
    "thermal_conductivity_w_m_k",
    "specific_heat_j_kg_k",
    "modulus_temperature_coefficient_per_k",
    "loss_factor",
)


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


