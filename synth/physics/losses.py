"""Per-mode loss budget of a bar hung on cords: why each partial dies when it does.

Every term is a loss factor eta (= 1/Q) and the terms add:

    1/Q = eta_internal + eta_thermoelastic + eta_radiation + eta_cords + eta_air (+ eta_tube)

* **internal** friction of the alloy: the material's loss factor, the same for
  every mode (a frequency-independent solid loss; fit it to recordings).
* **thermoelastic** (Zener): heat flow across the thickness between the
  compressed and stretched faces.  Per point ``eta = Delta w tau / (1 + (w tau)^2)``
  with ``Delta = E alpha^2 T / (rho c_p)``, ``tau = h^2 / (pi^2 D)``,
  ``D = k / (rho c_p)``, weighted by the mode's bending strain energy along the bar
  (shear and torsion change no volume and give none).
* **radiation** of sound by the bare bar: each thin slice radiates as a compact body
  oscillating in air, i.e. a dipole whose strength is its own volume plus its
  added-mass volume (Lamb 1932; a strip of width b moving broadside carries
  rho0 pi b^2/4 of air per unit length, Blevins 1979 table 14-2); the slices are
  summed with their far-field phase and the power is integrated over all
  directions.  Torsion is two such half-width lines moving in opposition, lateral
  bending one line moving edgewise.  Free-free modes have no net volume or dipole
  moment, so a bar short against the wavelength radiates very little: the reason
  for the tube.  Where a slice is no longer compact (upper partials of wide bars)
  this overestimates; the result is therefore combined harmonically with the
  ceiling of a surface radiating with unit efficiency on both faces,
  ``eta_max = 2 rho0 c b integral(phi^2) / (w M_n)`` (radiation efficiency of a
  plate well above coincidence tends to 1; Cremer, Heckl & Petersson 2005, ch. 7).
* **cords**: each cord is a light dashpot of ``cord_loss_n_s_m`` at its hole;
  ``zeta_n = c_s sum phi_n(x_c)^2 / (2 w_n M_n)``, ``eta = 2 zeta``.  Holes at the
  nodes of mode 1 leave it almost untouched and damp modes 2 and 3: upper
  partials die first.
* **air** viscosity: Stokes boundary layers on the two side faces,
  ``eta = 2 sqrt(rho0 mu / (2 w)) / (rho b)`` (about 1e-6: shown for completeness).
* **tube**: added by :mod:`synth.physics.coupling` for the mode the tube is tuned to.

Each term has a calibration factor (``[damping]`` table of a preset, or a
calibration file written by ``barwright measure``), and any mode's Q can be
overridden outright.

References
----------
Zener, C. (1937). Internal friction in solids I. Phys. Rev. 52, 230-235.
Zener, C. (1938). Internal friction in solids II. Phys. Rev. 53, 90-99.
Lamb, H. (1932). Hydrodynamics, 6th ed., Cambridge Univ. Press, sections 92 and
    290 (added mass; sound of a small oscillating body).
Blevins, R. D. (1979). Formulas for Natural Frequency and Mode Shape, Van Nostrand
    Reinhold, ISBN 0-442-20710-7, table 14-2 (added mass of a flat strip).
Cremer, L., Heckl, M. & Petersson, B. A. T. (2005). Structure-Borne Sound, 3rd ed.,
    Springer, ISBN 3-540-22696-2, chapter 7 (radiation efficiency).
Landau, L. D. & Lifshitz, E. M. (1987). Fluid Mechanics, 2nd ed., section 24
    (oscillatory boundary layer).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from functools import cache

import numpy as np

from synth.constants import LN_1000
from synth.errors import ConfigError
from synth.physics.bar_fe import BarModes, Mode, one_blas_thread
from synth.physics.stiffness import StiffnessCalibration
from synth.physics.tube import air_density, dynamic_viscosity, speed_of_sound

TERMS = ("internal", "thermoelastic", "radiation", "cords", "air", "tube")

DEFAULT_CORD_LOSS_N_S_M = 0.3
"""Dashpot of one cord at its hole, N s/m.  An estimate (from memory) that gives
partials 2-3 of a mid-range bar a cord loss near 2e-4; calibrate from recordings."""


@dataclass(frozen=True)
class Supports:
    """How the bar hangs: cords through holes at given positions."""

    cord_loss_n_s_m: float = DEFAULT_CORD_LOSS_N_S_M
    position: str = "nodes"
    fraction: float = 0.2242
    offset_m: float = 0.0

    def positions(self, modes: BarModes) -> tuple[float, ...]:
        """Cord positions along the bar (m)."""
        L = modes.geometry.length_m
        if self.position == "nodes":
            n = modes.vertical[0].nodes_m
            if len(n) != 2:
                raise ConfigError(f"vertical mode 1 has {len(n)} nodes; give supports.fraction")
            return (n[0] + self.offset_m, n[1] - self.offset_m)
        return (self.fraction * L + self.offset_m, (1 - self.fraction) * L - self.offset_m)


@dataclass(frozen=True)
class Calibration:
    """Scale factors per loss term and per-mode Q overrides.

    ``overrides`` maps (note or "*", kind, order) to a Q that replaces the budget.
    """

    factors: dict[str, float] = field(default_factory=dict)
    overrides: dict[tuple[str, str, int], float] = field(default_factory=dict)
    source: str = ""
    tubes: dict[str, float] = field(default_factory=dict)
    """``gap_calibration`` / ``coupling_calibration`` from a calibration file's
    ``[tubes]`` table (``barwright tubecal --out``); a preset's own ``[tubes]``
    keys win (:func:`synth.physics.tube.with_file_calibration`)."""
    stiffness: StiffnessCalibration | None = None
    """Effective modulus and per-partial factors from a calibration file's
    ``[stiffness]`` table (``barwright measure --calibrate``); ``barwright tune``
    re-tunes the range with them (:mod:`synth.physics.stiffness`)."""

    def factor(self, term: str) -> float:
        """Return the scale of one term (1 when not calibrated)."""
        return self.factors.get(term, 1.0)

    def override(self, note: str | None, kind: str, order: int) -> float | None:
        """Return the Q set outright for this mode, if any."""
        return self.overrides.get((note or "*", kind, order), self.overrides.get(
            ("*", kind, order)))

    def to_table(self) -> dict:
        """TOML table (the format ``barwright measure --calibrate`` writes)."""
        table: dict = {"factors": {k: float(v) for k, v in self.factors.items()}}
        if self.overrides:
            table["override"] = [{"note": n, "kind": k, "order": o, "q": float(q)}
                                 for (n, k, o), q in self.overrides.items()]
        return table


@dataclass(frozen=True)
class ModeLoss:
    """The loss budget of one mode."""

    kind: str
    order: int
    frequency_hz: float
    terms: dict[str, float]  # eta per term, already calibrated
    override_q: float | None = None

    @property
    def eta(self) -> float:
        """Total loss factor (1/Q)."""
        if self.override_q is not None:
            return 1.0 / self.override_q
        return float(sum(self.terms.values()))

    @property
    def q(self) -> float:
        """Quality factor Q = 1/eta."""
        return 1.0 / self.eta

    @property
    def decay_per_s(self) -> float:
        """Amplitude decay rate 1/tau = pi f / Q."""
        return math.pi * self.frequency_hz / self.q

    @property
    def t60_s(self) -> float:
        """Time to fall 60 dB: tau ln 1000."""
        return LN_1000 / self.decay_per_s

    def q_of(self, term: str) -> float:
        """Q of one term alone (inf when the term is zero)."""
        eta = self.terms.get(term, 0.0)
        return math.inf if eta <= 0 else 1.0 / eta


# --------------------------------------------------------------------------------------
# Terms
# --------------------------------------------------------------------------------------


def _bending_strain(mode: Mode, xq: np.ndarray, geometry, material):
    """Bending and total strain energy densities of a bending mode at points xq.

    Vertical modes carry the stretch u of the blank's mid-plane: the strain at
    height z is ``u' - (z - h0/2) psi'``; relative to the section's centroid its
    uniform part ``u' - e psi'`` stretches and ``E I_c psi'^2`` bends.  Only the
    bending part drives heat across the thickness.
    """
    from synth.physics.bar_fe import cowper_shear_coefficient

    E, G = material.youngs_modulus_pa, material.shear_modulus_pa
    k = cowper_shear_coefficient(material.poisson_ratio)
    h = geometry.thickness_at(xq)
    b = geometry.width_m
    dpsi = mode.rotation_at(xq, 1)
    gam = mode.shape_at(xq, 1) - mode.rotation_at(xq)
    if mode.kind == "vertical":
        inertia = b * h**3 / 12.0
        ecc = 0.5 * (geometry.thickness_m - h)
        stretch = E * b * h * (mode.axial_at(xq, 1) - ecc * dpsi) ** 2
    else:
        inertia = h * b**3 / 12.0
        stretch = 0.0
    bend = E * inertia * dpsi**2
    shear = k * G * b * h * gam**2
    return bend, bend + shear + stretch, h


def thermoelastic_eta(mode: Mode, geometry, material, temperature_c: float = 20.0,
                      n_points: int = 400) -> float:
    """Zener thermoelastic loss of a bending mode, weighted by bending strain energy."""
    if mode.kind == "torsional":
        return 0.0
    xq, wq = _quadrature(geometry.length_m, n_points)
    bend, total, h = _bending_strain(mode, xq, geometry, material)
    depth = h if mode.kind == "vertical" else np.full_like(h, geometry.width_m)
    rho, cp = material.density_kg_m3, material.specific_heat_j_kg_k
    t_k = temperature_c + 273.15
    delta = material.youngs_modulus_pa * material.thermal_expansion_per_k**2 * t_k / (rho * cp)
    diffusivity = material.thermal_conductivity_w_m_k / (rho * cp)
    tau = depth**2 / (math.pi**2 * diffusivity)
    wt = mode.angular_frequency * tau
    local = delta * wt / (1.0 + wt**2)
    return float(np.sum(wq * local * bend) / np.sum(wq * total))


def zener_eta(frequency_hz: float, thickness_m: float, material,
              temperature_c: float = 20.0) -> float:
    """Zener's loss factor of a uniform plate of thickness h at frequency f."""
    rho, cp = material.density_kg_m3, material.specific_heat_j_kg_k
    delta = material.youngs_modulus_pa * material.thermal_expansion_per_k**2 * (
        temperature_c + 273.15) / (rho * cp)
    tau = thickness_m**2 / (math.pi**2 * material.thermal_conductivity_w_m_k / (rho * cp))
    wt = 2 * math.pi * frequency_hz * tau
    return float(delta * wt / (1 + wt**2))


@cache
def _gauss_legendre(n: int) -> tuple[np.ndarray, np.ndarray]:
    # numpy finds the nodes by an eigensolve of the companion matrix: once per n.
    x, w = np.polynomial.legendre.leggauss(n)
    x.flags.writeable = False
    w.flags.writeable = False
    return x, w


@cache
def _quadrature(length: float, n: int) -> tuple[np.ndarray, np.ndarray]:
    g, w = _gauss_legendre(8)
    edges = np.linspace(0.0, length, n // 8 + 1)
    a, b = edges[:-1, None], edges[1:, None]
    x = (0.5 * (a + b) + 0.5 * (b - a) * g[None, :]).ravel()
    wt = (0.5 * (b - a) * w[None, :]).ravel()
    x.flags.writeable = False
    wt.flags.writeable = False
    return x, wt


def radiation_eta(mode: Mode, geometry, material, temperature_c: float = 20.0,
                  n_points: int = 240) -> float:
    """Sound radiated by the bare bar, as a loss factor (compact-slice dipole line model)."""
    rho0 = air_density(temperature_c)
    c0 = speed_of_sound(temperature_c)
    om = mode.angular_frequency
    k = om / c0
    xq, wq = _quadrature(float(geometry.length_m), n_points)
    shape = mode.shape_at(xq)  # evaluated once: the line strength and the ceiling share it
    h = geometry.thickness_at(xq)
    b = geometry.width_m
    # Directions: u = cosine of the angle to the bar's axis, phi = azimuth about it.
    # The line's far field depends on u only; the dipole factor n_z (or n_y) squared
    # integrates over phi to pi (1 - u^2), so bending needs a 1-D integral over u.
    u, wu = _gauss_legendre(64)
    phase_x = np.exp(1j * k * np.outer(u, xq))  # (n_u, n_x)
    if mode.kind in ("vertical", "lateral"):
        cross = b**2 if mode.kind == "vertical" else h**2
        strength = (b * h + math.pi * cross / 4.0) * om * shape
        line = phase_x @ (wq * strength)
        directional = np.sum(wu * np.abs(line) ** 2 * math.pi * (1.0 - u**2))
    else:
        half = 0.5 * b
        strength = (half * h + math.pi * half**2 / 4.0) * om * shape * (b / 4.0)
        line = phase_x @ (wq * strength)
        phi = np.linspace(0.0, 2 * math.pi, 48, endpoint=False)
        sin_t = np.sqrt(1.0 - u**2)[:, None]
        ny = sin_t * np.sin(phi)[None, :]
        nz = sin_t * np.cos(phi)[None, :]
        across = 4.0 * np.sin(k * ny * b / 4.0) ** 2  # |e^{ix} - e^{-ix}|^2
        per_u = np.mean(across * nz**2, axis=1) * 2 * math.pi
        directional = np.sum(wu * np.abs(line) ** 2 * per_u)
    # far field p r = rho0 c k^2 (dipole volume x velocity) cos / (4 pi);
    # power = int |p r|^2 /(2 rho0 c)
    power = float((rho0 * c0 * k**2 / (4.0 * math.pi)) ** 2 * directional / (2.0 * rho0 * c0))
    energy = 0.5 * mode.modal_mass * om**2  # unit modal amplitude
    compact = power / (om * energy)
    # ceiling: both faces radiating with unit efficiency, P = rho0 c S <v^2>
    if mode.kind == "vertical":
        surface = b * np.sum(wq * shape**2)
    elif mode.kind == "lateral":
        surface = np.sum(wq * h * shape**2)
    else:
        surface = b**3 / 12.0 * np.sum(wq * shape**2)
    ceiling = 2.0 * rho0 * c0 * surface * om**2 / 2.0 / (om * energy)
    return 1.0 / (1.0 / compact + 1.0 / ceiling) if compact > 0 else 0.0


def cord_eta(mode: Mode, geometry, positions: tuple[float, ...], cord_loss_n_s_m: float) -> float:
    """Loss to the cords: eta = c_s sum phi(x_c)^2 / (w M_n).

    For torsion the cord sees the twist averaged over the width (phi^2 = theta^2 b^2/12).
    """
    x = np.asarray(positions)
    if mode.kind == "torsional":
        phi2 = mode.shape_at(x) ** 2 * geometry.width_m**2 / 12.0
    else:
        phi2 = mode.shape_at(x) ** 2
    return float(cord_loss_n_s_m * np.sum(phi2) / (mode.angular_frequency * mode.modal_mass))


def air_eta(mode: Mode, geometry, material, temperature_c: float = 20.0) -> float:
    """Viscous loss in the Stokes layers on the side faces."""
    rho0 = air_density(temperature_c)
    mu = dynamic_viscosity(temperature_c)
    return float(2.0 * math.sqrt(rho0 * mu / (2.0 * mode.angular_frequency)) / (
        material.density_kg_m3 * geometry.width_m))


# --------------------------------------------------------------------------------------
# Budget
# --------------------------------------------------------------------------------------


def loss_budget(modes: BarModes, *, supports: Supports | None = None,
                calibration: Calibration | None = None, temperature_c: float = 20.0,
                note: str | None = None, tube_eta: dict[tuple[str, int], float] | None = None,
                ) -> list[ModeLoss]:
    """Loss budget of every mode of a solved bar.

    Parameters
    ----------
    modes : BarModes
    supports : how the bar hangs (default: cords at the mode-1 nodes).
    calibration : term factors and Q overrides.
    temperature_c : air and bar temperature.
    note : the bar's note, for note-specific overrides.
    tube_eta : extra loss per (kind, order) from a coupled tube.
    """
    supports = supports or Supports()
    cal = calibration or Calibration()
    geo, mat = modes.geometry, modes.material
    cords = supports.positions(modes)
    with one_blas_thread():  # small products: a second BLAS thread only contends
        out = [_mode_loss(m, geo, mat, cords, supports, cal, temperature_c, note, tube_eta)
               for m in modes.modes]
    return out


def _mode_loss(m: Mode, geo, mat, cords, supports: Supports, cal: Calibration,
               temperature_c: float, note: str | None,
               tube_eta: dict[tuple[str, int], float] | None) -> ModeLoss:
    raw = {
        "internal": mat.loss_factor,
        "thermoelastic": thermoelastic_eta(m, geo, mat, temperature_c),
        "radiation": radiation_eta(m, geo, mat, temperature_c),
        "cords": cord_eta(m, geo, cords, supports.cord_loss_n_s_m),
        "air": air_eta(m, geo, mat, temperature_c),
        "tube": (tube_eta or {}).get((m.kind, m.order), 0.0),
    }
    terms = {k: v * cal.factor(k) for k, v in raw.items()}
    return ModeLoss(m.kind, m.order, m.frequency_hz, terms,
                    cal.override(note, m.kind, m.order))
