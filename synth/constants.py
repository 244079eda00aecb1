"""Physical constants and published model coefficients, each with its source.

Every constant is a ``Final[float]`` in SI units; the docstring under it gives the
value, the unit and where the number comes from.  Labels follow the design notes:
a value marked "from memory" has not been checked against the cited page and is a
default, not a fact.  Temperature-dependent air properties are computed from these
constants in :mod:`synth.physics.tube`.

References
----------
.. [1] ISO 2533:1975, Standard Atmosphere (sea-level pressure, gas constant of
   dry air).
.. [2] BIPM, The International System of Units (SI), 9th ed., 2019 (definition of
   the kelvin scale offset).
.. [3] Kinsler, L. E., Frey, A. R., Coppens, A. B. and Sanders, J. V.,
   Fundamentals of Acoustics, 4th ed., Wiley, 2000, ISBN 978-0-471-84789-2
   (speed of sound in dry air, ideal-gas form; baffled-piston radiation).
.. [4] Levine, H. and Schwinger, J., "On the radiation of sound from an unflanged
   circular pipe", Phys. Rev. 73(4), 383-406, 1948, doi:10.1103/PhysRev.73.383.
.. [5] Norris, A. N. and Sheng, I. C., "Acoustic radiation from a circular pipe
   with an infinite flange", J. Sound Vib. 135(1), 85-93, 1989 (volume/pages from
   memory).
.. [6] Davies, P. O. A. L., Bento Coelho, J. L. and Bhattacharya, M., "Reflection
   coefficients for an unflanged pipe with flow", J. Sound Vib. 72(4), 543-546,
   1980 (low-ka fit of the end correction; coefficient from memory).
.. [7] White, F. M., Viscous Fluid Flow, 3rd ed., McGraw-Hill, 2006,
   ISBN 978-0-07-240231-5 (Sutherland law constants for air, from memory).
.. [8] Fletcher, N. H. and Rossing, T. D., The Physics of Musical Instruments,
   2nd ed., Springer, 1998, ISBN 978-0-387-98374-5, section 8.2 (air properties
   used for wall losses in pipes).
"""

from __future__ import annotations

import math
from typing import Final

# --- temperature and pressure -------------------------------------------------

ZERO_CELSIUS_K: Final[float] = 273.15
"""0 degrees Celsius in kelvin: 273.15 K, exact by definition of the Celsius scale [2]."""

STANDARD_PRESSURE_PA: Final[float] = 101325.0
"""Standard sea-level atmospheric pressure: 101325 Pa, exact by definition [1]."""

GAS_CONSTANT_DRY_AIR_J_KG_K: Final[float] = 287.05287
"""Specific gas constant of dry air: 287.05287 J/(kg K) [1]."""

# --- air properties -------------------------------------------------------------

SPEED_OF_SOUND_0C_M_S: Final[float] = 331.3
"""Speed of sound in dry air at 0 C: 331.3 m/s, the constant of the dry-air formula
``c = 331.3 sqrt(1 + T/273.15)`` [3] (design notes, physics.md section 7).  Cramer's
humidity and CO2 terms give about 331.45 m/s; humidity adds a few tenths of a percent."""

RATIO_OF_SPECIFIC_HEATS_AIR: Final[float] = 1.4
"""Ratio of specific heats gamma = c_p/c_v of dry air near room temperature: 1.4,
dimensionless [3], [8]."""

PRANDTL_NUMBER_AIR: Final[float] = 0.71
"""Prandtl number of air near room temperature: 0.71, dimensionless [8]."""

KINEMATIC_VISCOSITY_AIR_20C_M2_S: Final[float] = 1.506e-5
"""Kinematic viscosity of dry air at 20 C and 101325 Pa: 1.506e-5 m^2/s (handbook
value, physics.md section 7).  :func:`synth.physics.tube.kinematic_viscosity`
reproduces it from the Sutherland law and the ideal-gas density."""

AIR_DENSITY_20C_KG_M3: Final[float] = 1.2041
"""Density of dry air at 20 C and 101325 Pa: 1.2041 kg/m^3, ideal gas
``p/(R T)`` with the constants above [1]."""

SUTHERLAND_VISCOSITY_0C_PA_S: Final[float] = 1.716e-5
"""Dynamic viscosity of air at 273.15 K, reference value of the Sutherland law:
1.716e-5 Pa s [7] (from memory)."""

SUTHERLAND_CONSTANT_AIR_K: Final[float] = 110.4
"""Sutherland temperature of air: 110.4 K [7] (from memory)."""

# --- open-end radiation of a circular pipe ------------------------------------------

END_CORRECTION_UNFLANGED: Final[float] = 0.6133
"""End correction of an unflanged thin-walled circular pipe, low-ka limit, divided by
the inner radius: 0.6133, dimensionless [4]."""

END_CORRECTION_UNFLANGED_KA2: Final[float] = 0.1168
"""Coefficient of (ka)^2 in the low-frequency fit ``delta/a = 0.6133 - 0.1168 (ka)^2``
for an unflanged pipe, ka < 0.5: 0.1168, dimensionless [6] (from memory)."""

END_CORRECTION_FLANGED: Final[float] = 0.8216
"""End correction of a circular pipe in an infinite flange, low-ka limit, divided by
the inner radius: 0.8216, dimensionless [5].  The classical piston estimate is
8/(3 pi) = 0.8488."""

RADIATION_RESISTANCE_UNFLANGED: Final[float] = 0.25
"""Mouth radiation resistance of an unflanged pipe, normalised by rho c/S, divided by
(ka)^2: 1/4, dimensionless, low-ka limit [4]."""

RADIATION_RESISTANCE_FLANGED: Final[float] = 0.5
"""Mouth radiation resistance of a pipe in an infinite flange (baffled piston),
normalised by rho c/S, divided by (ka)^2: 1/2, dimensionless, low-ka limit [3]."""

# --- conversions --------------------------------------------------------------------

CENTS_PER_NEPER: Final[float] = 1200.0 / math.log(2.0)
"""Cents per unit change of the natural logarithm of frequency: 1200/ln 2 =
1731.234 cents, exact."""

LN_1000: Final[float] = math.log(1000.0)
"""ln 1000 = 6.907755, exact: T60 = ln(1000) / (amplitude decay rate)."""
