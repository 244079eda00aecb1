"""A uniform free-free aluminium bar's modes from Euler-Bernoulli closed forms.

Used by the mallet tests as a bar that does not need the project's finite-element
code.  Everything here is textbook: the characteristic equation cos(bL) cosh(bL) = 1,
f_n = (b_n L)^2 / (2 pi L^2) * h sqrt(E / (12 rho)) for a b x h rectangle, and the
mode shape phi_n(x) = cosh bx + cos bx - s_n (sinh bx + sin bx) with
s_n = (cosh bL - cos bL)/(sinh bL - sin bL), for which int_0^L phi_n^2 dx = L, so the
modal mass is the bar mass (Blevins 1979, Formulas for Natural Frequency and Mode
Shape, table 8-1; physics.md section 1).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq

# 6061-T6 aluminium, typical handbook values (ASM Handbook Vol. 2, from memory;
# physics.md section 4).
YOUNGS_MODULUS_PA = 68.9e9
DENSITY_KG_M3 = 2700.0


def free_free_roots(n_modes: int) -> np.ndarray:
    """Roots b_n L of cos x cosh x = 1 (x > 0), by bracketing near (2n+1) pi/2."""
    roots = []
    for n in range(1, n_modes + 1):
        guess = (2 * n + 1) * np.pi / 2
        roots.append(
            brentq(lambda x: np.cos(x) * np.cosh(x) - 1.0, guess - 0.3, guess + 0.3, xtol=1e-14)
        )
    return np.array(roots)


def shape(x_over_l: float, bl: np.ndarray) -> np.ndarray:
    """Mode-shape values phi_n at x/L, normalised so int_0^L phi^2 dx = L."""
    bx = bl * x_over_l
    s = (np.cosh(bl) - np.cos(bl)) / (np.sinh(bl) - np.sin(bl))
    return np.cosh(bx) + np.cos(bx) - s * (np.sinh(bx) + np.sin(bx))


@dataclass(frozen=True)
class EBBar:
    """Modes of a uniform rectangular bar at one strike point."""

    omega_rad_s: np.ndarray
    modal_mass_kg: np.ndarray
    shape_value: np.ndarray

    def arrays(self) -> dict[str, np.ndarray]:
        """Return the keyword arguments of ``simulate_contact`` for these modes."""
        return {
            "omega_rad_s": self.omega_rad_s,
            "modal_mass_kg": self.modal_mass_kg,
            "shape_value": self.shape_value,
        }


def eb_bar(
    x_over_l: float = 0.4,
    *,
    length_m: float = 0.3,
    width_m: float = 0.05,
    thickness_m: float = 0.012,
    n_modes: int = 5,
) -> EBBar:
    """Return the modes of a 6061 bar, by default 0.3 x 0.05 x 0.012 m (f1 = 692.35 Hz)."""
    bl = free_free_roots(n_modes)
    root = thickness_m * np.sqrt(YOUNGS_MODULUS_PA / (12.0 * DENSITY_KG_M3))
    omega = bl**2 / length_m**2 * root
    mass = DENSITY_KG_M3 * length_m * width_m * thickness_m
    return EBBar(omega, np.full(n_modes, mass), shape(x_over_l, bl))
