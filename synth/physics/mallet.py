"""Mallet heads and their contact with a bar described by its modes.

A mallet is a point mass ``m`` on a nonlinear spring with Hunt & Crossley damping,

    F = K d^p (1 + lambda dd/dt),   d > 0 (compression), F >= 0,

where ``d`` is the head's compression: the mallet's position minus the bar's
displacement at the strike point, both counted positive into the bar.  The bar
enters only through its modes at the strike point: for each mode the angular
frequency ``om_n``, damping, modal mass ``M_n`` and mode-shape value
``phi_n(x_s)``.  The bar's displacement under the head is ``sum_n phi_n q_n`` and
the contact force drives every mode,

    q_n'' + 2 zeta_n om_n q_n' + om_n^2 q_n = phi_n F / M_n,
    m y'' = -F.

:func:`simulate_contact` integrates these equations from the first touch until the
head is clear of the bar for good, and returns the force pulse, the energy budget
and, for every mode, the free vibration that follows, referred to the strike
instant so a renderer can start the mode at the strike time.

Strike position across the width: the caller forms ``phi_n`` at the 2-D strike
point.  Torsional modes, whose shape value at an off-centre point is
``theta_n(x) * y_offset``, are simply more entries in the same arrays, next to the
bending modes (``theta_n`` normalised with the same modal-mass convention).

Mallet presets live in ``presets/mallets/<name>.toml``;
:func:`synth.settings.mallet.load_mallet` reads a name, a TOML path or an inline table.

Assumptions: the head is a free rigid mass during contact (stick, hand and
gravity are left out, as in Chaigne & Doutaut 1997); the contact law holds the
head and the bar's local surface compliance together, so ``K`` belongs to a head
*on* a given bar material (for a Hertz head :func:`hertz_stiffness` takes both).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Final

import numpy as np

from synth.config import LIMITS, Section
from synth.errors import ModelError
from synth.numerics import beta_function, bracketed_root

__all__ = [
    "ContactResult",
    "Mallet",
    "ModeExcitation",
    "force_spectrum",
    "force_transform",
    "free_vibration",
    "hertz_stiffness",
    "mode_excitation",
    "rigid_contact",
    "simulate_contact",
    "SoundSettings",
]

EXPONENT_RANGE: Final[tuple[float, float]] = (LIMITS["mallet.exponent"].lo,
                                              LIMITS["mallet.exponent"].hi)
"""Allowed contact-law exponents p (inclusive): 1 is a linear spring, 3/2 Hertz,
2-3.5 felt and yarn (Stulov 1995, from memory); above 5 is no known head material."""

MASS_LIMIT_KG: Final[float] = LIMITS["mallet.mass_kg"].hi
"""Largest head mass accepted, kg.  Real heads weigh grams to tens of grams; the
limit catches a mass typed in grams where kilograms are asked for."""

HERTZ_CONTACT_TIME_COEFFICIENT: Final[float] = 2.943275
"""t_c v0 / delta_max for Hertz contact (p = 3/2): 2 * int_0^1 (1 - x^(5/2))^(-1/2) dx.
Johnson 1985, Contact Mechanics, section 11.4; value computed for physics.md section 10."""

MALLET_KEYS: Final[tuple[str, ...]] = ("mass_kg", "stiffness", "exponent", "loss_s_per_m")

# Steps per contact and per period of the highest mode.  RK4 with 400 steps per
# contact puts the contact-time error of a rigid Hertz impact near 1e-6 and 40
# steps per period gives a phase error of about 1e-6 rad per step (om dt = 0.157).
_STEPS_PER_CONTACT: Final[int] = 400
_STEPS_PER_PERIOD: Final[int] = 40


# -- the mallet -----------------------------------------------------------------------------


@dataclass(frozen=True)
class Mallet:
    """A mallet head with a Hunt & Crossley power-law contact.

    Attributes
    ----------
    name : str
        Preset name (file stem) or a name the caller chose.
    mass_kg : float
        Head mass m, kg, 0 < m <= 2 (the head moves as a free mass during contact).
    stiffness : float
        K in ``F = K d^p``, unit N/m^p (N/m^1.5 for a Hertz head), > 0.
    exponent : float
        Power-law exponent p, 1 <= p <= 5 (1 linear spring, 3/2 Hertz sphere,
        about 2-3.5 for felt and yarn).
    loss_s_per_m : float
        Hunt & Crossley damping lambda, s/m, >= 0 (0: lossless, perfectly elastic).
    description : str
        Free text for listings.
    source : dict of str
        Where each number comes from (preset ``[source]`` table), not compared.

    References
    ----------
    Hunt, K. H. & Crossley, F. R. E. 1975, "Coefficient of restitution interpreted
    as damping in vibroimpact", J. Appl. Mech. 42, 440-445 (contact law).
    """

    name: str
    mass_kg: float
    stiffness: float
    exponent: float
    loss_s_per_m: float
    description: str = ""
    source: dict[str, str] = field(default_factory=dict, compare=False, hash=False)

    def __post_init__(self) -> None:
        # The same rules as a preset file, worded by Section.
        check_mallet_values(Section({k: getattr(self, k) for k in MALLET_KEYS},
                                    f"mallet {self.name!r}"))

    def force_n(self, compression_m: float, rate_m_s: float = 0.0) -> float:
        """Contact force for a compression and compression rate.

        Parameters
        ----------
        compression_m : float
            d, m; no force for d <= 0.
        rate_m_s : float
            dd/dt, m/s (positive while the head is being compressed).

        Returns
        -------
        float
            F = max(0, K d^p (1 + lambda dd/dt)), N (Hunt & Crossley 1975): the head
            pushes and never pulls.
        """
        if compression_m <= 0.0:
            return 0.0
        force = self.stiffness * compression_m**self.exponent * (1.0 + self.loss_s_per_m * rate_m_s)
        return max(force, 0.0)


def check_mallet_values(sec: Section) -> dict[str, float]:
    # ranges: synth.config.LIMITS["mallet.*"]
    return {k: sec.number(k, limit=f"mallet.{k}") for k in MALLET_KEYS}


@dataclass(frozen=True)
class SoundSettings:
    """How the instrument is played by default (``[sound]`` table)."""

    mallet: str = "medium"
    position: float = 0.45
    across: float = 0.0
    speed_min_m_s: float = 0.3
    speed_max_m_s: float = 3.0
    damper_t60_s: float = 0.25
    pan_width: float = 0.8
    listening_distance_m: float = 1.0

    def speed_of(self, velocity: float) -> float:
        """Mallet speed for a strength 0..1 (geometric between the two limits)."""
        v = min(max(float(velocity), 0.0), 1.0)
        return self.speed_min_m_s * (self.speed_max_m_s / self.speed_min_m_s) ** v


def hertz_stiffness(
    head_modulus_pa: float,
    head_poisson_ratio: float,
    head_radius_m: float,
    *,
    bar_modulus_pa: float,
    bar_poisson_ratio: float,
) -> float:
    """Hertz stiffness of a spherical head on a flat bar surface.

    Parameters
    ----------
    head_modulus_pa, bar_modulus_pa : float
        Young's moduli E1, E2, Pa, > 0.
    head_poisson_ratio, bar_poisson_ratio : float
        Poisson ratios nu1, nu2, -1 < nu < 0.5.
    head_radius_m : float
        Head radius R, m, > 0.

    Returns
    -------
    float
        K = (4/3) E* sqrt(R), N/m^1.5, with 1/E* = (1 - nu1^2)/E1 + (1 - nu2^2)/E2.

    References
    ----------
    Johnson, K. L. 1985, Contact Mechanics, Cambridge University Press,
    ISBN 0-521-25576-7, ch. 4, Eqs. 4.22-4.23 (sphere on a half-space).
    """
    for label, value in (
        ("head_modulus_pa", head_modulus_pa),
        ("bar_modulus_pa", bar_modulus_pa),
        ("head_radius_m", head_radius_m),
    ):
        if not (math.isfinite(value) and value > 0.0):
            raise ModelError(f"{label} = {value!r}: must be a finite number > 0")
    for label, value in (
        ("head_poisson_ratio", head_poisson_ratio),
        ("bar_poisson_ratio", bar_poisson_ratio),
    ):
        if not -1.0 < value < 0.5:
            raise ModelError(f"{label} = {value!r}: must lie in (-1, 0.5)")
    inv_e_star = (1.0 - head_poisson_ratio**2) / head_modulus_pa + (
        1.0 - bar_poisson_ratio**2
    ) / bar_modulus_pa
    return 4.0 / 3.0 * math.sqrt(head_radius_m) / inv_e_star


def rigid_contact(mallet: Mallet, velocity_m_s: float) -> tuple[float, float, float]:
    """Closed-form impact of a lossless power-law head on an immovable target.

    The loss ``lambda`` is ignored (the closed form holds for lambda = 0).

    Parameters
    ----------
    mallet : Mallet
    velocity_m_s : float
        Impact speed v0, m/s, > 0.

    Returns
    -------
    contact_time_s : float
        t_c = 2 (delta_max / v0) int_0^1 (1 - x^(p+1))^(-1/2) dx; the integral is
        B(1/(p+1), 1/2)/(p+1).  p = 1 gives pi sqrt(m/K); p = 3/2 gives
        2.943275 delta_max/v0.
    max_compression_m : float
        delta_max = ((p+1) m v0^2 / (2K))^(1/(p+1)).
    peak_force_n : float
        K delta_max^p.

    References
    ----------
    Johnson, K. L. 1985, Contact Mechanics, section 11.4 (Hertz impact of a sphere);
    the power-law form follows from the same energy integral (physics.md section 10).
    """
    v0 = _check_velocity(velocity_m_s)
    m, k, p = mallet.mass_kg, mallet.stiffness, mallet.exponent
    delta_max = ((p + 1.0) * m * v0**2 / (2.0 * k)) ** (1.0 / (p + 1.0))
    integral = beta_function(1.0 / (p + 1.0), 0.5) / (p + 1.0)
    return 2.0 * delta_max / v0 * integral, delta_max, k * delta_max**p


def _check_velocity(velocity_m_s: float) -> float:
    v0 = float(velocity_m_s)
    if not (math.isfinite(v0) and v0 > 0.0):
        raise ModelError(
            f"velocity_m_s = {velocity_m_s!r}: the impact speed must be a finite number > 0 m/s"
        )
    return v0


# -- contact simulation ---------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class ContactResult:
    """Outcome of one mallet strike on a modal bar.

    Sign convention: displacements and velocities are positive into the bar
    (downward for a bar struck from above).  Arrays are read-only.

    Attributes
    ----------
    mallet : Mallet
    velocity_m_s : float
        Impact speed v0, m/s.
    time_s, force_n : ndarray, shape (n_samples,)
        The force pulse, from the first touch (t = 0) to the end of contact; the
        samples are ``step_s`` apart except the last one, which falls on
        ``contact_time_s`` with zero force.  Gaps with zero force lie between
        contacts when the head bounces more than once.
    step_s : float
        Integration step, s.
    contact_time_s : float
        Time of the final separation, s, counted from the first touch.  The modal
        state below is taken at this time (also available as ``end_time_s``).
    n_contacts : int
        Number of separate contacts (1 for a clean single strike).
    peak_force_n : float
        Largest contact force, N.
    max_compression_m : float
        Largest compression d of the head, m (sampled at the steps).
    impulse_n_s : float
        Momentum given to the bar, int F dt, N s (= m (v0 - v_end)).
    rebound_velocity_m_s : float
        Head speed away from the bar after the strike, m/s (> 0 when it bounces off).
    modal_displacement_m, modal_velocity_m_s : ndarray, shape (n_modes,)
        Modal coordinates q_n and dq_n/dt at ``contact_time_s`` (units of q: metres
        per unit mode-shape value).
    omega_rad_s, modal_mass_kg, shape_value, damping_ratio : ndarray, shape (n_modes,)
        The modal model the strike was computed on.
    amplitude_m, phase_rad : ndarray, shape (n_modes,)
        Free vibration after contact referred to the strike instant:
        q_n(t) = A_n exp(-g_n t) sin(w_n t + phase_n) for t >= contact_time_s, with
        g_n = ``decay_per_s`` and w_n = ``free_omega_rad_s``.
    mallet_energy_in_j, mallet_energy_out_j : float
        Head kinetic energy before and after, J.
    bar_energy_j : float
        Sum of modal energies at the end of contact, J.
    contact_loss_j : float
        Energy dissipated by the Hunt & Crossley term, J (>= 0).
    bar_damping_loss_j : float
        Energy the modal damping took during contact, J.
    """

    mallet: Mallet
    velocity_m_s: float
    time_s: np.ndarray
    force_n: np.ndarray
    step_s: float
    contact_time_s: float
    n_contacts: int
    peak_force_n: float
    max_compression_m: float
    impulse_n_s: float
    rebound_velocity_m_s: float
    modal_displacement_m: np.ndarray
    modal_velocity_m_s: np.ndarray
    omega_rad_s: np.ndarray
    modal_mass_kg: np.ndarray
    shape_value: np.ndarray
    damping_ratio: np.ndarray
    amplitude_m: np.ndarray
    phase_rad: np.ndarray
    mallet_energy_in_j: float
    mallet_energy_out_j: float
    bar_energy_j: float
    contact_loss_j: float
    bar_damping_loss_j: float

    @property
    def end_time_s(self) -> float:
        """Time at which ``modal_displacement_m`` and ``modal_velocity_m_s`` hold, s."""
        return self.contact_time_s

    @property
    def n_modes(self) -> int:
        """Number of bar modes (0 for an immovable target)."""
        return int(self.omega_rad_s.size)

    @property
    def decay_per_s(self) -> np.ndarray:
        """Amplitude decay rates g_n = zeta_n om_n, 1/s."""
        return self.damping_ratio * self.omega_rad_s

    @property
    def free_omega_rad_s(self) -> np.ndarray:
        """Damped angular frequencies om_n sqrt(1 - zeta_n^2) of the free vibration, rad/s."""
        return self.omega_rad_s * np.sqrt(1.0 - self.damping_ratio**2)

    @property
    def complex_amplitude_m(self) -> np.ndarray:
        """A_n exp(i phase_n): q_n(t) = Im(Z_n exp((i w_n - g_n) t)) after contact."""
        return self.amplitude_m * np.exp(1j * self.phase_rad)

    @property
    def mode_energy_j(self) -> np.ndarray:
        """Energy of each mode at the end of contact, (1/2) M_n (q'^2 + om^2 q^2), J."""
        return (
            0.5
            * self.modal_mass_kg
            * (self.modal_velocity_m_s**2 + (self.omega_rad_s * self.modal_displacement_m) ** 2)
        )

    @property
    def restitution(self) -> float:
        """Coefficient of restitution of the head, rebound speed / impact speed."""
        return self.rebound_velocity_m_s / self.velocity_m_s

    @property
    def energy_residual_j(self) -> float:
        """KE_in - KE_out - bar energy - losses, J: integration error (0 when exact)."""
        return (
            self.mallet_energy_in_j
            - self.mallet_energy_out_j
            - self.bar_energy_j
            - self.contact_loss_j
            - self.bar_damping_loss_j
        )


def _modal_arrays(
    omega_rad_s: Any, modal_mass_kg: Any, shape_value: Any, damping_ratio: Any, decay_per_s: Any
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    def as_array(label: str, value: Any) -> np.ndarray:
        try:
            arr = np.array(value, dtype=float).reshape(-1) if np.ndim(value) <= 1 else None
        except (TypeError, ValueError):
            arr = None
        if arr is None:
            raise ModelError(f"{label}: must be a 1-D sequence of numbers, one per mode")
        if not np.all(np.isfinite(arr)):
            raise ModelError(f"{label} = {arr.tolist()!r}: every value must be finite")
        return arr

    om = as_array("omega_rad_s", omega_rad_s)
    mass = as_array("modal_mass_kg", modal_mass_kg)
    phi = as_array("shape_value", shape_value)
    n = om.size
    for label, arr in (("modal_mass_kg", mass), ("shape_value", phi)):
        if arr.size != n:
            raise ModelError(
                f"{label} has {arr.size} values but omega_rad_s has {n}: give one per mode"
            )
    if np.any(om <= 0.0):
        raise ModelError(
            f"omega_rad_s = {om.tolist()!r}: every mode frequency must be > 0 rad/s "
            "(leave rigid-body modes out; the bar hangs on its cords)"
        )
    if np.any(mass <= 0.0):
        raise ModelError(f"modal_mass_kg = {mass.tolist()!r}: every modal mass must be > 0 kg")
    if damping_ratio is not None and decay_per_s is not None:
        raise ModelError("give damping_ratio or decay_per_s, not both")
    if decay_per_s is not None:
        g = as_array("decay_per_s", decay_per_s)
        if g.size != n:
            raise ModelError(f"decay_per_s has {g.size} values but omega_rad_s has {n}")
        if np.any(g < 0.0):
            raise ModelError(f"decay_per_s = {g.tolist()!r}: decay rates must be >= 0 1/s")
        zeta = g / om
    elif damping_ratio is not None:
        zeta = as_array("damping_ratio", damping_ratio)
        if zeta.size != n:
            raise ModelError(f"damping_ratio has {zeta.size} values but omega_rad_s has {n}")
    else:
        zeta = np.zeros(n)
    if np.any((zeta < 0.0) | (zeta >= 1.0)):
        raise ModelError(
            f"damping ratio = {zeta.tolist()!r}: each mode must be underdamped, 0 <= zeta < 1"
        )
    return om, mass, phi, zeta


class _Contact:
    """Right-hand side and RK4 step of the head + modes system.

    State vector: [y, v, e_contact, e_damp, impulse, q_1..q_N, q'_1..q'_N].
    """

    def __init__(
        self, mallet: Mallet, om: np.ndarray, mass: np.ndarray, phi: np.ndarray, zeta: np.ndarray
    ):
        self.k = mallet.stiffness
        self.p = mallet.exponent
        self.lam = mallet.loss_s_per_m
        self.inv_m = 1.0 / mallet.mass_kg
        self.n = om.size
        self.phi = phi
        self.phi_over_mass = phi / mass
        self.om2 = om**2
        self.two_g = 2.0 * zeta * om
        self.two_g_mass = self.two_g * mass

    def compression(self, s: np.ndarray) -> tuple[float, float]:
        n = self.n
        d = s[0] - float(self.phi @ s[5 : 5 + n])
        dd = s[1] - float(self.phi @ s[5 + n :])
        return d, dd

    def force(self, d: float, dd: float) -> tuple[float, float]:
        """Return (F, dissipated power) for compression d and rate dd."""
        if d <= 0.0:
            return 0.0, 0.0
        elastic = self.k * d**self.p
        f = elastic * (1.0 + self.lam * dd)
        if f < 0.0:
            f = 0.0
        # Power into the head minus the elastic part: >= 0 (F dd - K d^p dd).
        return f, (f - elastic) * dd

    def rhs(self, s: np.ndarray) -> tuple[np.ndarray, float]:
        n = self.n
        q = s[5 : 5 + n]
        qd = s[5 + n :]
        d, dd = self.compression(s)
        f, p_contact = self.force(d, dd)
        out = np.empty_like(s)
        out[0] = s[1]
        out[1] = -f * self.inv_m
        out[2] = p_contact
        out[3] = float(self.two_g_mass @ (qd * qd))
        out[4] = f
        out[5 : 5 + n] = qd
        out[5 + n :] = self.phi_over_mass * f - self.two_g * qd - self.om2 * q
        return out, f

    def step(self, s: np.ndarray, h: float) -> tuple[np.ndarray, float]:
        """One classical RK4 step of length h; also returns F at the start."""
        k1, f0 = self.rhs(s)
        k2, _ = self.rhs(s + 0.5 * h * k1)
        k3, _ = self.rhs(s + 0.5 * h * k2)
        k4, _ = self.rhs(s + h * k3)
        return s + (h / 6.0) * (k1 + 2.0 * k2 + 2.0 * k3 + k4), f0


_SEPARATED, _CLEAR, _EXHAUSTED = 1, 2, 3


def _run_steps(s, s_new, work, forces, status, peak, dt, max_steps, coeffs, modal) -> None:
    """Step the head + modes system until an event; the reference of the compiled loop.

    From step ``status[0]`` on, RK4 steps of ``dt`` until the head separates from
    the bar (``status[1] = 1``: ``s`` is the state before that step, ``s_new``
    after it), or, once a separation has been seen (``status[4]``), until the
    head moves away above the highest point the freely vibrating bar can reach
    (2), or until ``max_steps`` (3).  ``forces[i]`` receives the force at the
    start of step ``i``; a re-contact sets ``status[2]`` and counts in
    ``status[3]``; ``peak[0]`` keeps the largest compression.  ``coeffs`` holds
    K, p, lambda and 1/m, ``modal`` the rows phi, phi/M, om^2, 2 g, 2 g M, |phi|,
    damped angular frequency and g.  ``work`` is scratch of shape (5, state size).
    """
    n = modal.shape[1]
    c = _Contact.__new__(_Contact)
    c.k, c.p, c.lam, c.inv_m = (float(x) for x in coeffs)
    c.n = n
    c.phi, c.phi_over_mass, c.om2, c.two_g, c.two_g_mass = modal[:5]
    om_d, g = modal[6], modal[7]
    in_contact, ended, n_contacts = bool(status[2]), bool(status[4]), int(status[3])
    for i in range(int(status[0]), max_steps):
        stepped, forces[i] = c.step(s, dt)
        s_new[:] = stepped
        d_new, _ = c.compression(s_new)
        peak[0] = max(peak[0], d_new)
        if in_contact and d_new <= 0.0:
            status[:4] = (i, _SEPARATED, 1, n_contacts)
            return
        if not in_contact and d_new > 0.0:
            in_contact = True
            n_contacts += 1
        s[:] = s_new
        if not in_contact and ended and s[1] < 0.0 and s[0] < -_envelope_m(s, c, om_d, g):
            status[:4] = (i, _CLEAR, 0, n_contacts)
            return
    status[:4] = (max_steps, _EXHAUSTED, int(in_contact), n_contacts)


def _envelope_m(s: np.ndarray, c: _Contact, om_d: np.ndarray, g: np.ndarray) -> float:
    """Upper bound of the bar's displacement at the strike point from now on, m."""
    n = c.n
    q = s[5 : 5 + n]
    qd = s[5 + n :]
    amp = np.hypot(q, (qd + g * q) / om_d)
    return float(np.abs(c.phi) @ amp)


def simulate_contact(
    mallet: Mallet,
    velocity_m_s: float,
    *,
    omega_rad_s: Any = (),
    modal_mass_kg: Any = (),
    shape_value: Any = (),
    damping_ratio: Any = None,
    decay_per_s: Any = None,
    max_step_s: float | None = None,
    max_time_s: float = 0.05,
    runner: Any = None,
) -> ContactResult:
    """Strike a bar, given by its modes at the strike point, with a mallet.

    Parameters
    ----------
    mallet : Mallet
    velocity_m_s : float
        Impact speed v0 of the head, m/s, > 0.
    omega_rad_s : array_like, shape (n_modes,)
        Undamped angular frequency om_n of each mode, rad/s, > 0.  Empty (the
        default) means an immovable, rigid target.
    modal_mass_kg : array_like, shape (n_modes,)
        Modal mass M_n = int rho A phi_n^2 dx, kg, > 0, in the normalisation of
        ``shape_value``.
    shape_value : array_like, shape (n_modes,)
        Mode-shape value phi_n at the strike point (any sign; 0 at a node).  The
        caller forms it at the 2-D strike point: add torsional modes as more
        entries with value theta_n(x) * y_offset.
    damping_ratio : array_like, shape (n_modes,), optional
        zeta_n, 0 <= zeta < 1.
    decay_per_s : array_like, shape (n_modes,), optional
        Amplitude decay rate g_n = zeta_n om_n, 1/s, >= 0 (instead of
        ``damping_ratio``; neither means no damping).
    max_step_s : float, optional
        Upper bound on the integration step, s.  The step is otherwise the smaller
        of 1/400 of the rigid-target contact time (:func:`rigid_contact`) and 1/40
        of the shortest mode period.
    max_time_s : float
        Give up (ModelError) if the head is not clear of the bar after this long, s.
    runner : callable, optional
        Runs the fixed-step loop (contract of :func:`_run_steps`, which is the
        default); the voice plan passes :func:`synth.engine.contact.run_contact`,
        the same loop compiled.  Physics cannot import the engine, so the compiled
        loop comes in as an argument.

    Returns
    -------
    ContactResult

    Raises
    ------
    ModelError
        Bad arrays or speed, or a head that has not left the bar within
        ``max_time_s``.

    Notes
    -----
    Classical fourth-order Runge-Kutta with a fixed step, vectorised over modes.
    Contact ends when the compression returns to zero while the head separates;
    the crossing is located within its step by root finding on the RK4 step
    length.  If the head still moves towards the bar after separating, it may
    strike again, so the integration runs on with zero force until the head is
    above the highest point the freely vibrating bar can reach (the sum of
    |phi_n| times the modal envelopes) and moving away; every re-contact is
    simulated.  The energy dissipated by the Hunt & Crossley term and by modal
    damping is integrated alongside, so the energy balance can be checked.

    The free vibration after contact follows from the modal state (q, q') at
    ``t_e`` = contact_time_s: with w = om sqrt(1 - zeta^2), g = zeta om,
    A e^(-g t_e) sin(w t_e + phase) = q and A e^(-g t_e) cos(w t_e + phase) =
    (q' + g q)/w.

    References
    ----------
    Hunt, K. H. & Crossley, F. R. E. 1975, J. Appl. Mech. 42, 440-445 (contact law).
    Chaigne, A. & Doutaut, V. 1997, "Numerical simulations of xylophones. I.
    Time-domain modeling of the vibrating bars", J. Acoust. Soc. Am. 101(1),
    539-557 (mallet as a mass on a nonlinear spring driving the bar).
    Johnson, K. L. 1985, Contact Mechanics, section 11.4 (rigid-target contact time
    used to choose the step).
    """
    v0 = _check_velocity(velocity_m_s)
    om, mass, phi, zeta = _modal_arrays(
        omega_rad_s, modal_mass_kg, shape_value, damping_ratio, decay_per_s
    )
    if not (math.isfinite(max_time_s) and max_time_s > 0.0):
        raise ModelError(f"max_time_s = {max_time_s!r}: must be a finite number > 0 s")
    t_rigid, _, _ = rigid_contact(mallet, v0)
    dt = t_rigid / _STEPS_PER_CONTACT
    if om.size:
        dt = min(dt, 2.0 * math.pi / (_STEPS_PER_PERIOD * float(om.max())))
    if max_step_s is not None:
        if not (math.isfinite(max_step_s) and max_step_s > 0.0):
            raise ModelError(f"max_step_s = {max_step_s!r}: must be a finite number > 0 s")
        dt = min(dt, float(max_step_s))
    max_steps = int(math.ceil(max_time_s / dt))

    c = _Contact(mallet, om, mass, phi, zeta)
    om_d = om * np.sqrt(1.0 - zeta**2)
    g = zeta * om
    n = om.size
    s = np.zeros(5 + 2 * n)
    s[1] = v0
    coeffs = np.array([c.k, c.p, c.lam, c.inv_m])
    modal = np.array([c.phi, c.phi_over_mass, c.om2, c.two_g, c.two_g_mass, np.abs(c.phi),
                      om_d, g]).reshape(8, n)
    s_new = np.empty_like(s)
    work = np.empty((5, s.size))
    forces = np.zeros(max_steps)
    status = np.array([0, 0, 1, 1, 0], dtype=np.int64)  # step, event, in contact, contacts, ended
    peak = np.zeros(1)
    run = _run_steps if runner is None else runner
    end_state = None
    end_time = 0.0
    end_index = 0
    while True:
        run(s, s_new, work, forces, status, peak, dt, max_steps, coeffs, modal)
        i, event = int(status[0]), int(status[1])
        if event == _EXHAUSTED:
            raise ModelError(
                f"mallet {mallet.name!r} at {v0:g} m/s has not left the bar after "
                f"{max_time_s:g} s ({int(status[3])} contact(s)): the head is too heavy or too "
                "soft for this bar to throw it back; raise max_time_s or check mass_kg and "
                "stiffness"
            )
        if event == _CLEAR:
            break
        # Separation inside step i: find the step length where d = 0.
        d_new = c.compression(s_new)[0]
        before = s.copy()

        def compression_after(h: float, s0: np.ndarray = before) -> float:
            return c.compression(c.step(s0, h)[0])[0]

        h = (
            dt
            if d_new == 0.0
            else bracketed_root(
                compression_after, 0.0, dt, xtol=1e-14 * dt, rtol=4 * np.finfo(float).eps
            )
        )
        end_state = c.step(s, h)[0]
        end_time = i * dt + h
        end_index = i + 1
        s[:] = s_new
        status[2] = 0
        status[4] = 1
        if s[1] < 0.0 and s[0] < -_envelope_m(s, c, om_d, g):
            break
        status[0] = i + 1
    if end_state is None:  # the kernel reports the mallet clear only after a separation
        raise ModelError(f"mallet {mallet.name!r} at {v0:g} m/s: clear of the bar without "
                         "leaving it (contact model)")
    n_contacts = int(status[3])
    max_compression = float(peak[0])

    time_s = np.array([k * dt for k in range(end_index)] + [end_time])
    force_n = np.array(list(forces[:end_index]) + [0.0])
    q = end_state[5 : 5 + n].copy()
    qd = end_state[5 + n :].copy()
    # Free vibration referred to t = 0 (see Notes).
    decay = np.exp(g * end_time)
    sin_part = q
    cos_part = (qd + g * q) / om_d
    amplitude = np.hypot(sin_part, cos_part) * decay
    phase = np.mod(np.arctan2(sin_part, cos_part) - om_d * end_time + np.pi, 2.0 * np.pi) - np.pi
    v_end = float(end_state[1])
    m = mallet.mass_kg
    arrays = {
        "time_s": time_s,
        "force_n": force_n,
        "modal_displacement_m": q,
        "modal_velocity_m_s": qd,
        "omega_rad_s": om,
        "modal_mass_kg": mass,
        "shape_value": phi,
        "damping_ratio": zeta,
        "amplitude_m": amplitude,
        "phase_rad": phase,
    }
    for arr in arrays.values():
        arr.flags.writeable = False
    return ContactResult(
        mallet=mallet,
        velocity_m_s=v0,
        step_s=dt,
        contact_time_s=float(end_time),
        n_contacts=n_contacts,
        peak_force_n=float(force_n.max()),
        max_compression_m=float(max_compression),
        impulse_n_s=float(end_state[4]),
        rebound_velocity_m_s=-v_end,
        mallet_energy_in_j=0.5 * m * v0**2,
        mallet_energy_out_j=0.5 * m * v_end**2,
        bar_energy_j=float(np.sum(0.5 * mass * (qd**2 + (om * q) ** 2))),
        contact_loss_j=float(end_state[2]),
        bar_damping_loss_j=float(end_state[3]),
        **arrays,
    )


def free_vibration(result: ContactResult, time_s: Any) -> np.ndarray:
    """Modal displacements of the freely vibrating bar after the strike.

    Parameters
    ----------
    result : ContactResult
    time_s : array_like, shape (n_times,)
        Times from the strike instant, s; meaningful for t >= contact_time_s.

    Returns
    -------
    ndarray, shape (n_modes, n_times)
        q_n(t) = A_n exp(-g_n t) sin(w_n t + phase_n), in the units of q.
    """
    t = np.asarray(time_s, dtype=float).reshape(1, -1)
    g = result.decay_per_s[:, None]
    w = result.free_omega_rad_s[:, None]
    return result.amplitude_m[:, None] * np.exp(-g * t) * np.sin(w * t + result.phase_rad[:, None])


# -- spectrum and per-mode excitation ---------------------------------------------------------


def force_spectrum(
    result: ContactResult, *, n_fft: int | None = None
) -> tuple[np.ndarray, np.ndarray]:
    """Fourier transform of the force pulse by FFT.

    Parameters
    ----------
    result : ContactResult
    n_fft : int, optional
        FFT length (zero padding); at least the number of samples of the pulse.
        The default is the next power of two at or above 16 times that number, for a
        resolution of about 1/(16 contact_time_s).

    Returns
    -------
    frequency_hz : ndarray, shape (n_fft // 2 + 1,)
    transform_n_s : ndarray of complex, same shape
        F(f) = int F(t) exp(-2 pi i f t) dt, N s, by the rectangle rule on the
        uniform step grid (the pulse is zero at both ends, so this equals the
        trapezoidal rule).  |F(0)| is the impulse.
    """
    dt = result.step_s
    n_samples = int(math.ceil(result.contact_time_s / dt)) + 1
    grid = np.arange(n_samples) * dt
    force = np.interp(grid, result.time_s, result.force_n, right=0.0)
    if n_fft is None:
        n_fft = 1 << int(math.ceil(math.log2(16 * n_samples)))
    if n_fft < n_samples:
        raise ModelError(f"n_fft = {n_fft}: must be at least the pulse length, {n_samples}")
    spectrum = np.fft.rfft(force, n=n_fft) * dt
    return np.fft.rfftfreq(n_fft, dt), spectrum


def force_transform(result: ContactResult, frequency_hz: Any) -> np.ndarray:
    """Fourier transform of the force pulse at chosen frequencies.

    Parameters
    ----------
    result : ContactResult
    frequency_hz : array_like
        Frequencies, Hz, below the step's Nyquist frequency 1/(2 step_s) (higher ones
        alias).

    Returns
    -------
    ndarray of complex, shape of ``frequency_hz``
        F(f) = int F(t) exp(-2 pi i f t) dt, N s, by the trapezoidal rule on the
        recorded samples.

    Notes
    -----
    The pulse starts and ends at zero force, so the trapezoidal rule behaves like
    the sampled (discrete-time) transform and is accurate for content well below
    the Nyquist frequency: a linear or Filon-type interpolation would instead damp
    the force ripple that the ringing modes put into the pulse at their own
    frequencies by sinc^2(om dt/2).
    """
    f = np.asarray(frequency_hz, dtype=float)
    t = result.time_s
    flat = f.reshape(-1)
    values = np.empty(flat.size, dtype=complex)
    block = 256  # frequencies per pass, to bound the (frequency x sample) work array
    for start in range(0, flat.size, block):
        chunk = flat[start : start + block].reshape(-1, 1)
        phase = np.exp(-2j * np.pi * chunk * t.reshape(1, -1))
        values[start : start + block] = np.trapezoid(phase * result.force_n, t, axis=1)
    return values.reshape(f.shape)


@dataclass(frozen=True, eq=False)
class ModeExcitation:
    """How strongly a strike excites each mode, for reports.

    Attributes
    ----------
    frequency_hz : ndarray, shape (n_modes,)
        om_n / (2 pi).
    energy_j : ndarray
        Modal energy after contact, J.
    energy_fraction : ndarray
        energy_j / total bar energy (sums to 1).
    level_db : ndarray
        10 log10(energy_j / max energy_j), dB re the strongest mode (-inf for a mode
        left silent).
    force_gain : ndarray
        |F(f_n)| / |F(0)|: the contact pulse's low-pass at the mode frequency.
    excitation_ratio : ndarray
        A_n / A_impulse, where A_impulse = |phi_n| J / (M_n w_n) is the amplitude an
        ideal impulse of the same momentum J would give; NaN where phi_n = 0.  Equals
        force_gain for an undamped mode.
    """

    frequency_hz: np.ndarray
    energy_j: np.ndarray
    energy_fraction: np.ndarray
    level_db: np.ndarray
    force_gain: np.ndarray
    excitation_ratio: np.ndarray


def mode_excitation(result: ContactResult) -> ModeExcitation:
    """Per-mode excitation of a strike.

    Parameters
    ----------
    result : ContactResult
        A strike on a bar with at least one mode.

    Returns
    -------
    ModeExcitation

    References
    ----------
    The undamped mode left after a force pulse has amplitude |phi_n F(om_n)|/(M_n
    om_n) by Duhamel's integral (e.g. Thomson & Dahleh 1998, Theory of Vibration
    with Applications, 5th ed., section 4.2), which is why ``excitation_ratio``
    equals the pulse's normalised spectrum at the mode frequency.
    """
    if result.n_modes == 0:
        raise ModelError("the strike was on a rigid target: there are no modes to report")
    energy = result.mode_energy_j
    total = float(energy.sum())
    freq = result.omega_rad_s / (2.0 * math.pi)
    with np.errstate(divide="ignore", invalid="ignore"):
        fraction = energy / total if total > 0 else np.zeros_like(energy)
        level = 10.0 * np.log10(energy / energy.max())
        impulse_amp = (
            np.abs(result.shape_value)
            * result.impulse_n_s
            / (result.modal_mass_kg * result.free_omega_rad_s)
        )
        ratio = np.where(result.shape_value != 0.0, result.amplitude_m / impulse_amp, np.nan)
    gain = np.abs(force_transform(result, freq)) / result.impulse_n_s
    return ModeExcitation(
        frequency_hz=freq,
        energy_j=energy,
        energy_fraction=fraction,
        level_db=level,
        force_gain=gain,
        excitation_ratio=ratio,
    )
