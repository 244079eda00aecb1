"""The bar's fundamental and its tube as two coupled damped modes.

Both members are written as complex modal amplitudes in rotating-wave form
(design notes, physics.md section 8),

    d/dt [a1, a2] = [[s1, i mu], [i mu, s2]] [a1, a2],   s_j = i om_j - g_j,

with ``g_j = om_j / (2 Q_j)`` the amplitude decay rate and ``mu`` the coupling rate
in rad/s.  Member 1 is the bar's first bending mode, member 2 the tube's first
acoustic mode.  The amplitudes are energy-normalised: ``|a_j|^2`` is the energy of
member j in J, and ``Im a_j`` follows the member's displacement (a strike, which
gives velocity and no displacement, starts ``a1`` real).  This is the form the
sound engine integrates, with ``mu`` and the tube's output weight allowed to vary
per sample (see :mod:`synth.physics.motor`).

Coupling rate (derived here; an estimate with a calibration factor)
-------------------------------------------------------------------
The bar mode ``w(x, t) = phi(x) q(t)`` has modal mass ``M_b = integral rho A phi^2
dx`` (whatever normalisation of ``phi`` the caller uses) and, over the mouth, the
mean shape value ``phi_m`` on the area ``S_b`` it covers: it pumps the volume
velocity ``U_b = S_b phi_m q'`` into the air between bar and mouth.  The tube's mode
has volume displacement ``X`` at the mouth and acoustic mass ``M_a = rho L_eff /
(2 S)`` (:class:`synth.physics.tube.TubeMode`).  A share ``f`` of the tube's outflow
passes under the bar (:func:`synth.physics.tube.covered_flow_fraction`), and both
flows squeeze through the same gap, whose inertance is ``M_g = rho / (8 pi h)``
(:func:`synth.physics.tube.gap_inertance`).  The kinetic energy of the gap air,
``(1/2) M_g (U_b + f X')^2``, holds the cross term ``M_12 U_b X'`` with the mutual
inertance ``M_12 = C_mu f M_g``; its self terms are the tube's extra end correction
(already in the tube model) and a negligible added mass on the bar.  Lagrange's
equations give two inertially coupled oscillators,

    M_b q'' + K_b q + M_12 S_b phi_m X'' = 0,   M_a X'' + K_a X + M_12 S_b phi_m q'' = 0,

with coupling coefficient ``kappa = M_12 S_b phi_m / sqrt(M_b M_a)``; reduced to
rotating-wave form the product of the off-diagonal terms is ``-(kappa/2)^2 om1
om2``, hence

    mu = kappa sqrt(om1 om2) / 2                         (physics.md section 8)

``kappa`` does not depend on how ``phi`` is normalised.  ``C_mu`` (default 1,
uncalibrated) is meant to be fitted from a bar's T60 measured with and without its
tube (:func:`calibrate_coupling`).  Writing the rotating-wave form with symmetric
``i mu`` drops a factor ``sqrt(om2/om1)`` in the tube amplitude (and a sign), an
error of order ``|om2 - om1| / om``, a few parts per thousand for offsets of tens
of cents.

Radiation and loudness
----------------------
The tube's mouth is a monopole, ``P = rho c k^2 |U|^2 / (8 pi)`` (physics.md
section 8), equivalent to ``P = 2 g_rad,2 E_2`` with ``g_rad,2 = om2 / (2 Q_rad)``.
The bare bar radiates very little (its net monopole and dipole cancel, physics.md
section 6); the caller gives its radiation loss factor ``eta_rad`` so that ``P = om1
eta_rad E_1``.  Averaged over all directions the cross term between the mouth's
monopole and the bar's higher multipoles vanishes, so radiated powers add.  The
gain of the fundamental is the radiated power (peak, or energy over the whole
decay) with the tube, over the bare bar's, in dB.  If the tube loses mainly by
radiation, the damping it adds is sound leaving, so detuning it trades level for
sustain: tuned exactly gives the most gain and the shortest sustain, tuned a little
above keeps most of the gain and loses less sustain (common practice, no source;
physics.md sections 7-8).

References
----------
.. [1] Fletcher, N. H. and Rossing, T. D., The Physics of Musical Instruments, 2nd
   ed., Springer, 1998, ISBN 978-0-387-98374-5, ch. 19 (bars with tube resonators)
   and ch. 8 (pipes).
.. [2] Doutaut, V., Matignon, D. and Chaigne, A., "Numerical simulations of
   xylophones. II. Time-domain modeling of the resonator and of the radiated sound
   pressure", J. Acoust. Soc. Am. 104(3), 1633-1647, 1998 (volume/pages from
   memory): tube driven by the bar's motion over the mouth, pressure acting back.
.. [3] Haus, H. A., Waves and Fields in Optoelectronics, Prentice-Hall, 1984,
   ISBN 978-0-13-946053-1, ch. 7 (coupled-mode theory in time, rotating-wave
   form; from memory).
.. [4] Kinsler, L. E., Frey, A. R., Coppens, A. B. and Sanders, J. V., Fundamentals
   of Acoustics, 4th ed., Wiley, 2000 (monopole radiation; intensity p^2/(2 rho c)).
.. [5] Golub, G. H. and Van Loan, C. F., Matrix Computations, 4th ed., Johns
   Hopkins, 2013, section 9.1 (exponential of a 2x2 matrix from its eigenvalues);
   Bartels, R. H. and Stewart, G. W., "Solution of the matrix equation AX + XB = C",
   Comm. ACM 15(9), 820-826, 1972 (Lyapunov solver used for radiated energy).
"""

from __future__ import annotations

import cmath
import math
from collections.abc import Iterable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from synth.config import checked_number
from synth.constants import AIR_DENSITY_20C_KG_M3, CENTS_PER_NEPER, LN_1000
from synth.errors import ConfigError, ModelError
from synth.numerics import bracketed_root
from synth.physics.tube import (
    TubeMode,
    TubeSpec,
    air_density,
    covered_flow_fraction,
    gap_inertance,
    speed_of_sound,
    tube_length_for_bar,
    tube_mode,
)
from synth.pitch import cents_to_ratio

_Z0_20C = AIR_DENSITY_20C_KG_M3 * speed_of_sound(20.0)
"""Characteristic impedance of air at 20 C, rho c in Pa s/m (about 413.3)."""


# ------------------------------------------------------------------- the bar


@dataclass(frozen=True)
class BarMode:
    """The bar's first bending mode as the tube sees it (SI units).

    Attributes
    ----------
    frequency_hz : float
        Frequency of the mode on its cords, without tube, Hz (> 0).
    q : float
        Quality factor of the mode without tube (all the bar's own losses), > 0.
    modal_mass_kg : float
        ``M = integral rho A phi^2 dx`` in kg, with ``phi`` normalised as the caller
        chooses (with ``integral phi^2 dx = L`` on a uniform bar it is the bar's
        mass).
    mouth_shape_value : float
        Mean of ``phi`` over the part of the bar above the mouth, same
        normalisation (about -1.22 at the centre of a uniform bar); only its size
        matters.
    area_over_mouth_m2 : float
        Area of the bar's underside above the mouth opening, m^2
        (:func:`synth.physics.tube.bar_area_over_mouth`).
    radiation_loss_factor : float
        Radiation loss factor ``eta_rad`` of the bare bar in this mode (>= 0 and at
        most ``1/q``); physics.md section 6 gives order-of-magnitude values (1e-8 at
        240 Hz to 2e-5 at 1.1 kHz for uniform bars).  Needed for the gain and the
        bar's output weight.
    """

    frequency_hz: float
    q: float
    modal_mass_kg: float
    mouth_shape_value: float
    area_over_mouth_m2: float
    radiation_loss_factor: float = 0.0

    def __post_init__(self) -> None:
        checked_number(self.frequency_hz, "bar.frequency_hz", "> 0 Hz", lambda v: v > 0)
        checked_number(self.q, "bar.q", "> 0", lambda v: v > 0)
        checked_number(self.modal_mass_kg, "bar.modal_mass_kg", "> 0 kg", lambda v: v > 0)
        checked_number(self.mouth_shape_value, "bar.mouth_shape_value", "finite and non-zero",
                       lambda v: v != 0)
        checked_number(self.area_over_mouth_m2, "bar.area_over_mouth_m2", "> 0 m^2",
                       lambda v: v > 0)
        checked_number(self.radiation_loss_factor, "bar.radiation_loss_factor",
                       f"in [0, 1/q = {1.0 / self.q:g}]",
                       lambda v: 0.0 <= v <= 1.0 / self.q * (1.0 + 1e-12))

    @property
    def omega_rad_s(self) -> float:
        """Angular frequency, rad/s."""
        return 2.0 * math.pi * self.frequency_hz

    @property
    def decay_per_s(self) -> float:
        """Amplitude decay rate without tube, ``om / (2 Q)``, 1/s."""
        return self.omega_rad_s / (2.0 * self.q)

    @property
    def radiation_decay_per_s(self) -> float:
        """Radiation part of the decay rate, ``om eta_rad / 2``, 1/s."""
        return 0.5 * self.omega_rad_s * self.radiation_loss_factor

    @property
    def t60_s(self) -> float:
        """T60 without tube, ``ln(1000) / decay``, s."""
        return LN_1000 / self.decay_per_s


# ------------------------------------------------------ exact and weak coupling


def coupled_eigenvalues(s1: complex, s2: complex, mu: float) -> tuple[complex, complex]:
    """Return the exact eigenvalues of ``[[s1, i mu], [i mu, s2]]``.

    ``lambda = (s1 + s2)/2 +- sqrt(((s1 - s2)/2)^2 - mu^2)`` (physics.md section 8),
    evaluated without cancellation as ``s1 + mu^2/(d + r)`` and ``s2 - mu^2/(d +
    r)`` with ``d = (s2 - s1)/2`` and the root ``r`` on the branch nearer ``d``, so
    ``mu = 0`` returns ``s1`` and ``s2`` exactly.

    Parameters
    ----------
    s1, s2 : complex
        Uncoupled poles ``i om - g`` of bar and tube, 1/s.
    mu : float
        Coupling rate, rad/s.

    Returns
    -------
    bar_like, tube_like : complex
        The eigenvalue nearer ``s1`` first (when fully mixed, at ``mu`` above the
        threshold with exact tuning, the split is arbitrary).
    """
    s1 = complex(s1)
    s2 = complex(s2)
    d = 0.5 * (s2 - s1)
    r = cmath.sqrt(d * d - mu * mu)
    if (d.conjugate() * r).real < 0.0:
        r = -r
    den = d + r
    if den == 0:
        return s1, s2
    shift = mu * mu / den
    return s1 + shift, s2 - shift


def weak_coupling_shift(s1: complex, s2: complex, mu: float) -> complex:
    """Return the first-order change of the bar's pole, ``mu^2 / (s2 - s1)``.

    With ``g = g2 - g1`` and ``D = om2 - om1`` the bar gains damping ``mu^2 g / (g^2 +
    D^2)`` (minus the real part) and shifts by ``-mu^2 D / (g^2 + D^2)`` rad/s (the
    imaginary part): a Lorentzian in detuning whose half-width is the tube's
    half-bandwidth (physics.md section 8; second-order perturbation of the 2x2
    eigenproblem).
    """
    return mu * mu / (complex(s2) - complex(s1))


def _two(values: Iterable[float]) -> tuple[float, float]:
    """Return the two values of a coupled pair (bar-like member first) as a pair."""
    first, second = values
    return first, second


@dataclass(frozen=True)
class CoupledModes:
    """Frequencies, Qs and decays of the coupled pair (bar-like member first).

    Attributes
    ----------
    frequency_hz : tuple of float
        Frequencies of the bar-like and tube-like modes, Hz.
    decay_per_s : tuple of float
        Their amplitude decay rates, 1/s.
    q : tuple of float
        Their quality factors ``om / (2 g)``.
    t60_s : tuple of float
        Their T60s, s.
    pitch_pull_cents : float
        Bar-like frequency relative to the bar alone, cents (negative: flat).
    """

    frequency_hz: tuple[float, float]
    decay_per_s: tuple[float, float]
    q: tuple[float, float]
    t60_s: tuple[float, float]
    pitch_pull_cents: float


@dataclass(frozen=True)
class EnginePair:
    """Parameters of one coupled pair in the engine's rotating-wave form.

    ``d/dt [a1, a2] = [[s1, i mu(t)], [i mu(t), s2]] [a1, a2]``, output
    ``w1 Im(a1) + w2(t) Im(a2)``.

    Attributes
    ----------
    s1, s2 : complex
        Poles ``i om - g`` of bar and tube, 1/s.
    omega_rad_s : tuple of float
        ``(om1, om2)``, rad/s.
    decay_per_s : tuple of float
        ``(g1, g2)``, 1/s.
    coupling_rate_rad_s : float
        ``mu`` with the mouth fully open, rad/s.
    initial_amplitudes : tuple of complex
        ``(a1, a2)`` just after a strike that excites only the bar:
        ``(sqrt(E0), 0)`` in sqrt(J).
    weight_bar, weight_tube : float
        Output weights in Pa per sqrt(J): the power-equivalent free-field pressure
        amplitude at ``reference_distance_m``, ``sqrt(rho c g_rad / (pi r^2))``.
        The sign between the bar's direct sound and the tube's depends on the
        listening direction and is not modelled.
    reference_distance_m : float
        Distance at which the weights give the pressure, m.
    """

    s1: complex
    s2: complex
    omega_rad_s: tuple[float, float]
    decay_per_s: tuple[float, float]
    coupling_rate_rad_s: float
    initial_amplitudes: tuple[complex, complex]
    weight_bar: float
    weight_tube: float
    reference_distance_m: float

    @property
    def frequency_hz(self) -> tuple[float, float]:
        """``(f1, f2) = om / (2 pi)``, Hz (the engine's pair takes frequencies)."""
        return (self.omega_rad_s[0] / (2.0 * math.pi), self.omega_rad_s[1] / (2.0 * math.pi))

    @property
    def amplitude(self) -> tuple[float, float]:
        """Initial magnitudes ``(|a1|, |a2|)``, sqrt(J)."""
        return (abs(self.initial_amplitudes[0]), abs(self.initial_amplitudes[1]))

    @property
    def phase_rad(self) -> tuple[float, float]:
        """Initial phases of ``a1, a2``, rad (0 after a strike: displacement starts at 0)."""
        return (cmath.phase(self.initial_amplitudes[0]), cmath.phase(self.initial_amplitudes[1]))


def pressure_weight(radiation_decay_per_s: float, *, reference_distance_m: float = 1.0,
                    impedance_rayl: float = _Z0_20C) -> float:
    """Return the pressure amplitude per sqrt(J) of a mode that radiates ``2 g_rad E``.

    Free-field intensity ``p^2 / (2 rho c)`` over a sphere of radius ``r`` equals the
    radiated power ``2 g_rad E``, so ``p = sqrt(rho c g_rad / (pi r^2)) sqrt(E)``
    (Kinsler et al. [4]; directivity averaged).

    Returns
    -------
    float
        Weight in Pa / sqrt(J).
    """
    g = checked_number(radiation_decay_per_s, "radiation_decay_per_s", ">= 0 1/s", lambda v: v >= 0)
    r = checked_number(reference_distance_m, "reference_distance_m", "> 0 m", lambda v: v > 0)
    return math.sqrt(impedance_rayl * g / math.pi) / r


@dataclass(frozen=True)
class CoupledPair:
    """Bar mode and tube mode with their coupling, in the form of physics.md section 8.

    Attributes
    ----------
    bar_frequency_hz, tube_frequency_hz : float
        Uncoupled frequencies, Hz.
    bar_decay_per_s, tube_decay_per_s : float
        Uncoupled amplitude decay rates ``om / (2 Q)``, 1/s.
    coupling_rate_rad_s : float
        ``mu``, rad/s (>= 0).
    bar_radiation_decay_per_s, tube_radiation_decay_per_s : float
        Parts of the decay rates that leave as sound, 1/s.
    impedance_rayl : float
        ``rho c`` of the air, Pa s/m (for the output weights).
    """

    bar_frequency_hz: float
    bar_decay_per_s: float
    tube_frequency_hz: float
    tube_decay_per_s: float
    coupling_rate_rad_s: float
    bar_radiation_decay_per_s: float = 0.0
    tube_radiation_decay_per_s: float = 0.0
    impedance_rayl: float = _Z0_20C

    def __post_init__(self) -> None:
        checked_number(self.bar_frequency_hz, "bar_frequency_hz", "> 0 Hz", lambda v: v > 0)
        checked_number(self.tube_frequency_hz, "tube_frequency_hz", "> 0 Hz", lambda v: v > 0)
        checked_number(self.bar_decay_per_s, "bar_decay_per_s", ">= 0 1/s", lambda v: v >= 0)
        checked_number(self.tube_decay_per_s, "tube_decay_per_s", ">= 0 1/s", lambda v: v >= 0)
        checked_number(self.coupling_rate_rad_s, "coupling_rate_rad_s", ">= 0 rad/s",
                       lambda v: v >= 0)
        checked_number(self.bar_radiation_decay_per_s, "bar_radiation_decay_per_s",
                       f"in [0, bar decay {self.bar_decay_per_s:g}] 1/s",
                       lambda v: 0 <= v <= self.bar_decay_per_s * (1 + 1e-12))
        checked_number(self.tube_radiation_decay_per_s, "tube_radiation_decay_per_s",
                       f"in [0, tube decay {self.tube_decay_per_s:g}] 1/s",
                       lambda v: 0 <= v <= self.tube_decay_per_s * (1 + 1e-12))

    @classmethod
    def from_q(cls, bar_frequency_hz: float, bar_q: float, tube_frequency_hz: float,
               tube_q: float, coupling_rate_rad_s: float, **kwargs) -> CoupledPair:
        """Build a pair from frequencies and quality factors (``g = om / (2 Q)``)."""
        bq = checked_number(bar_q, "bar_q", "> 0", lambda v: v > 0)
        tq = checked_number(tube_q, "tube_q", "> 0", lambda v: v > 0)
        return cls(bar_frequency_hz, math.pi * bar_frequency_hz / bq, tube_frequency_hz,
                   math.pi * tube_frequency_hz / tq, coupling_rate_rad_s, **kwargs)

    def detuned(self, offset_cents: float) -> CoupledPair:
        """Return the pair with the tube moved to ``offset_cents`` above the bar.

        The tube keeps its Q (decay rates scale with its frequency) and ``mu`` is
        unchanged, as in the physics.md section 8 example.
        """
        ratio = float(cents_to_ratio(float(offset_cents)))
        f2 = self.bar_frequency_hz * ratio
        scale = f2 / self.tube_frequency_hz
        return replace(self, tube_frequency_hz=f2,
                       tube_decay_per_s=self.tube_decay_per_s * scale,
                       tube_radiation_decay_per_s=self.tube_radiation_decay_per_s * scale)

    # -- poles -----------------------------------------------------------------

    @property
    def s1(self) -> complex:
        """Bar pole ``i om1 - g1``, 1/s."""
        return complex(-self.bar_decay_per_s, 2.0 * math.pi * self.bar_frequency_hz)

    @property
    def s2(self) -> complex:
        """Tube pole ``i om2 - g2``, 1/s."""
        return complex(-self.tube_decay_per_s, 2.0 * math.pi * self.tube_frequency_hz)

    @property
    def matrix(self) -> np.ndarray:
        """The 2x2 system matrix ``[[s1, i mu], [i mu, s2]]``."""
        mu = self.coupling_rate_rad_s
        return np.array([[self.s1, 1j * mu], [1j * mu, self.s2]], dtype=complex)

    @property
    def strong_coupling_threshold_rad_s(self) -> float:
        """``|g2 - g1| / 2``: above it a tuned pair splits into two beating modes."""
        return 0.5 * abs(self.tube_decay_per_s - self.bar_decay_per_s)

    @property
    def strongly_coupled(self) -> bool:
        """Whether ``mu`` exceeds :attr:`strong_coupling_threshold_rad_s`."""
        return self.coupling_rate_rad_s > self.strong_coupling_threshold_rad_s

    def eigenvalues(self) -> tuple[complex, complex]:
        """Exact coupled poles (bar-like, tube-like); see :func:`coupled_eigenvalues`."""
        return coupled_eigenvalues(self.s1, self.s2, self.coupling_rate_rad_s)

    def weak_coupling_eigenvalue(self) -> complex:
        """First-order bar-like pole ``s1 + mu^2 / (s2 - s1)``."""
        return self.s1 + weak_coupling_shift(self.s1, self.s2, self.coupling_rate_rad_s)

    def modes(self) -> CoupledModes:
        """Return the coupled frequencies, Qs and T60s."""
        lams = self.eigenvalues()
        f = _two(lam.imag / (2.0 * math.pi) for lam in lams)
        g = _two(-lam.real for lam in lams)
        q = _two(lam.imag / (2.0 * -lam.real) if lam.real < 0 else math.inf for lam in lams)
        t60 = _two(LN_1000 / gg if gg > 0 else math.inf for gg in g)
        pull = CENTS_PER_NEPER * math.log(f[0] / self.bar_frequency_hz)
        return CoupledModes(frequency_hz=f, decay_per_s=g, q=q, t60_s=t60,
                            pitch_pull_cents=pull)

    # -- time response ------------------------------------------------------------

    def amplitudes(self, time_s, initial=(1.0, 0.0)) -> np.ndarray:
        """Return ``a(t) = exp(A t) a(0)`` exactly, shape ``(2, n)`` complex.

        Uses ``exp(A t) = e^(l2 t) I + (A - l2 I) t e^(l2 t) phi((l1 - l2) t)`` with
        ``phi(z) = (e^z - 1)/z`` and ``l2`` the slower pole, which stays accurate
        when the poles nearly coincide (Golub & Van Loan [5]).

        Parameters
        ----------
        time_s : array_like
            Times >= 0, s.
        initial : pair of complex
            ``(a1(0), a2(0))``, sqrt(J).
        """
        t = np.atleast_1d(np.asarray(time_s, dtype=float))
        if np.any(t < 0) or not np.all(np.isfinite(t)):
            raise ModelError("amplitudes: times must be finite and >= 0 s")
        a0 = np.asarray(initial, dtype=complex).reshape(2)
        lb, lt = self.eigenvalues()
        l1, l2 = (lb, lt) if lb.real <= lt.real else (lt, lb)
        z = (l1 - l2) * t
        small = np.abs(z) < 1e-8
        zs = np.where(small, 1.0, z)
        phi = np.where(small, 1.0 + 0.5 * z, np.expm1(zs) / zs)
        e2 = np.exp(l2 * t)
        b = self.matrix - l2 * np.eye(2)
        ba0 = b @ a0
        return e2 * a0[:, None] + (t * e2 * phi) * ba0[:, None]

    def radiated_power(self, time_s, *, strike_energy_j: float = 1.0) -> np.ndarray:
        """Return the radiated power of the fundamental after a strike, W.

        ``P = 2 g_rad,1 |a1|^2 + 2 g_rad,2 |a2|^2`` with ``a(0) = (sqrt(E0), 0)``.
        """
        a = self.amplitudes(time_s, (math.sqrt(strike_energy_j), 0.0))
        return (2.0 * self.bar_radiation_decay_per_s * np.abs(a[0]) ** 2
                + 2.0 * self.tube_radiation_decay_per_s * np.abs(a[1]) ** 2)

    def radiated_energy(self, *, strike_energy_j: float = 1.0) -> float:
        """Return the energy radiated over the whole decay after a strike, J.

        ``integral a a^H dt = X`` solves ``A X + X A^H = -a0 a0^H`` (Lyapunov
        equation, Bartels & Stewart [5]); the energy is ``2 g_rad,1 X11 + 2 g_rad,2
        X22``.  With every loss radiative it equals the strike energy.
        """
        a0 = np.array([math.sqrt(strike_energy_j), 0.0], dtype=complex)
        if self.bar_decay_per_s <= 0 and self.tube_decay_per_s <= 0:
            raise ModelError("radiated energy: a lossless pair rings for ever")
        from scipy.linalg import solve_continuous_lyapunov  # only here: scipy loads slowly

        x = solve_continuous_lyapunov(self.matrix, -np.outer(a0, a0.conj()))
        return float(2.0 * self.bar_radiation_decay_per_s * x[0, 0].real
                     + 2.0 * self.tube_radiation_decay_per_s * x[1, 1].real)

    def peak_radiated_power(self, *, strike_energy_j: float = 1.0) -> tuple[float, float]:
        """Return ``(peak power W, time of the peak s)`` after a strike.

        Dense grids over the tube's build-up and the bar's decay, then a bounded
        scalar refinement around the best grid point.
        """
        lb, lt = self.eigenvalues()
        slow = max(min(-lb.real, -lt.real), 1e-9)
        fast = max(-lb.real, -lt.real, 1e-9)
        grid = np.unique(np.concatenate([np.linspace(0.0, 8.0 / fast, 2001),
                                         np.linspace(0.0, 3.0 / slow, 2001)]))
        p = self.radiated_power(grid, strike_energy_j=strike_energy_j)
        i = int(np.argmax(p))
        lo = grid[max(i - 1, 0)]
        hi = grid[min(i + 1, grid.size - 1)]
        if hi > lo:
            from scipy.optimize import minimize_scalar  # only here: a slow import

            res = minimize_scalar(
                lambda t: -float(self.radiated_power([t], strike_energy_j=strike_energy_j)[0]),
                bounds=(lo, hi), method="bounded", options={"xatol": 1e-9 * max(hi, 1e-3)})
            if -res.fun > p[i]:
                return float(-res.fun), float(res.x)
        return float(p[i]), float(grid[i])

    def _bare_reference(self) -> None:
        if self.bar_radiation_decay_per_s <= 0.0:
            raise ModelError("gain: the bare bar's radiation loss factor is 0, so the gain "
                             "over the bare bar is unbounded; give bar.radiation_loss_factor > 0")

    def peak_gain_db(self) -> float:
        """Peak radiated power with tube over the bare bar's (at the strike), dB."""
        self._bare_reference()
        peak, _ = self.peak_radiated_power()
        return 10.0 * math.log10(peak / (2.0 * self.bar_radiation_decay_per_s))

    def energy_gain_db(self) -> float:
        """Radiated energy of the whole decay with tube over the bare bar's, dB.

        The bare bar radiates ``g_rad,1 E0 / g1`` in total.
        """
        self._bare_reference()
        bare = self.bar_radiation_decay_per_s / self.bar_decay_per_s
        return 10.0 * math.log10(self.radiated_energy() / bare)

    def engine_form(self, *, strike_energy_j: float = 1.0,
                    reference_distance_m: float = 1.0) -> EnginePair:
        """Return the parameters the engine's coupled-pair voice takes.

        Parameters
        ----------
        strike_energy_j : float
            Energy the strike puts into the bar's mode, J (``a1(0) = sqrt(E0)``).
        reference_distance_m : float
            Distance for the pressure weights, m.
        """
        e0 = checked_number(strike_energy_j, "strike_energy_j", ">= 0 J", lambda v: v >= 0)
        kw = {"reference_distance_m": reference_distance_m, "impedance_rayl": self.impedance_rayl}
        return EnginePair(
            s1=self.s1, s2=self.s2,
            omega_rad_s=(self.s1.imag, self.s2.imag),
            decay_per_s=(self.bar_decay_per_s, self.tube_decay_per_s),
            coupling_rate_rad_s=self.coupling_rate_rad_s,
            initial_amplitudes=(complex(math.sqrt(e0)), 0j),
            weight_bar=pressure_weight(self.bar_radiation_decay_per_s, **kw),
            weight_tube=pressure_weight(self.tube_radiation_decay_per_s, **kw),
            reference_distance_m=float(reference_distance_m),
        )


def bar_energy_from_impulse(impulse_n_s: float, shape_value_at_strike: float,
                            modal_mass_kg: float) -> float:
    """Return the energy an impulse puts into one bar mode, J.

    Modal velocity ``q' = J phi(x_s) / M``, energy ``M q'^2 / 2 = (J phi(x_s))^2 /
    (2 M)`` (modal superposition, physics.md section 10: mode n excited in
    proportion to ``phi_n(x_s) / M_n``).
    """
    m = checked_number(modal_mass_kg, "modal_mass_kg", "> 0 kg", lambda v: v > 0)
    return (float(impulse_n_s) * float(shape_value_at_strike)) ** 2 / (2.0 * m)


# ------------------------------------------------------------- bar over tube


def coupling_coefficient(bar: BarMode, tube: TubeSpec, mode: TubeMode, *,
                         calibration: float = 1.0, ka_correction: bool = False) -> float:
    """Return ``kappa = C_mu f M_g S_b |phi_m| / sqrt(M_b M_a)`` (dimensionless).

    See the module docstring for the derivation; ``mode`` is the tube's first mode
    from :func:`synth.physics.tube.tube_mode` for the same spec and temperature.
    """
    cal = checked_number(calibration, "coupling_calibration", ">= 0", lambda v: v >= 0)
    if tube.gap_to_bar_m is None:
        raise ModelError("tube.gap_to_bar_m is not set: the bar must sit over the mouth "
                         "to couple to the tube")
    k = mode.omega_rad_s / mode.speed_of_sound_m_s if ka_correction else None
    share = covered_flow_fraction(tube, wavenumber_per_m=k)
    m12 = cal * share * gap_inertance(tube.gap_to_bar_m, mode.density_kg_m3)
    return (m12 * bar.area_over_mouth_m2 * abs(bar.mouth_shape_value)
            / math.sqrt(bar.modal_mass_kg * mode.acoustic_mass_kg_m4))


@dataclass(frozen=True)
class BarTubeCoupling:
    """A bar mode over its tube: the coupled pair and how it was obtained.

    Attributes
    ----------
    bar : BarMode
    tube : TubeSpec
    tube_mode : TubeMode
        The tube's first mode with the bar in place.
    coupling_coefficient : float
        ``kappa``, dimensionless.
    pair : CoupledPair
        The two members and ``mu``.
    temperature_c : float
        Air temperature, C.
    """

    bar: BarMode
    tube: TubeSpec
    tube_mode: TubeMode
    coupling_coefficient: float
    pair: CoupledPair
    temperature_c: float

    @property
    def coupling_rate_rad_s(self) -> float:
        """``mu``, rad/s."""
        return self.pair.coupling_rate_rad_s

    @property
    def tube_offset_cents(self) -> float:
        """Tube frequency relative to the bar's, cents."""
        return CENTS_PER_NEPER * math.log(self.tube_mode.frequency_hz / self.bar.frequency_hz)


def couple(bar: BarMode, tube: TubeSpec, *, temperature_c: float = 20.0,
           coupling_calibration: float = 1.0, ka_correction: bool = False) -> BarTubeCoupling:
    """Couple a bar mode to the tube under it.

    Parameters
    ----------
    bar : BarMode
        The bar's first mode.
    tube : TubeSpec
        The tube, with ``gap_to_bar_m`` set.
    temperature_c : float
        Air temperature, C.
    coupling_calibration : float
        ``C_mu`` on the mutual inertance (default 1, uncalibrated).
    ka_correction : bool
        Use the (ka)^2 end-correction fit in the tube model.

    Returns
    -------
    BarTubeCoupling
    """
    mode = tube_mode(tube, temperature_c=temperature_c, ka_correction=ka_correction)
    kappa = coupling_coefficient(bar, tube, mode, calibration=coupling_calibration,
                                 ka_correction=ka_correction)
    mu = 0.5 * kappa * math.sqrt(bar.omega_rad_s * mode.omega_rad_s)
    z0 = air_density(temperature_c) * speed_of_sound(temperature_c)
    pair = CoupledPair(bar.frequency_hz, bar.decay_per_s, mode.frequency_hz, mode.decay_per_s,
                       mu, bar.radiation_decay_per_s, mode.radiation_decay_per_s, z0)
    return BarTubeCoupling(bar=bar, tube=tube, tube_mode=mode, coupling_coefficient=kappa,
                           pair=pair, temperature_c=float(temperature_c))


def coupling_rate(bar: BarMode, tube: TubeSpec, *, temperature_c: float = 20.0,
                  coupling_calibration: float = 1.0, ka_correction: bool = False) -> float:
    """Return the coupling rate ``mu = kappa sqrt(om1 om2) / 2`` in rad/s (see :func:`couple`)."""
    return couple(bar, tube, temperature_c=temperature_c,
                  coupling_calibration=coupling_calibration,
                  ka_correction=ka_correction).coupling_rate_rad_s


# ----------------------------------------------------------- calibration


def coupling_rate_from_t60(*, bar_frequency_hz: float, bar_t60_bare_s: float,
                           bar_t60_with_tube_s: float, tube_frequency_hz: float,
                           tube_q: float) -> float:
    """Return the ``mu`` that explains a bar's T60 measured without and with its tube.

    Solves ``-Re lambda_bar(mu) = ln(1000) / T60_with`` on the exact eigenvalue
    (:func:`coupled_eigenvalues`) by Brent's method.

    Raises
    ------
    ModelError
        If the T60 with tube is not shorter than without, or shorter than any
        coupling can make it (the pair's mean decay rate).
    """
    g1 = LN_1000 / checked_number(bar_t60_bare_s, "bar_t60_bare_s", "> 0 s", lambda v: v > 0)
    g_target = LN_1000 / checked_number(bar_t60_with_tube_s, "bar_t60_with_tube_s", "> 0 s",
                                        lambda v: v > 0)
    pair = CoupledPair.from_q(bar_frequency_hz, math.pi * bar_frequency_hz / g1,
                              tube_frequency_hz, tube_q, 0.0)
    if not g_target > g1:
        raise ModelError(f"bar_t60_with_tube_s = {bar_t60_with_tube_s:g}: must be shorter than "
                         f"the T60 without tube ({bar_t60_bare_s:g} s)")
    g_max = 0.5 * (pair.bar_decay_per_s + pair.tube_decay_per_s)
    if not g_target < g_max:
        raise ModelError(f"bar_t60_with_tube_s = {bar_t60_with_tube_s:g}: no coupling shortens "
                         f"this bar below {LN_1000 / g_max:.4g} s with a tube of Q {tube_q:g}")

    def excess(mu: float) -> float:
        return -coupled_eigenvalues(pair.s1, pair.s2, mu)[0].real - g_target

    hi = abs(pair.s2 - pair.s1) / 2.0 + 1.0
    while excess(hi) < 0.0:
        hi *= 2.0
        if hi > 1e9:
            raise ModelError("coupling_rate_from_t60: no coupling rate fits these decays")
    return bracketed_root(excess, 0.0, hi, xtol=1e-12, rtol=1e-12)


def calibrate_coupling(bar: BarMode, tube: TubeSpec, *, bar_t60_with_tube_s: float,
                       temperature_c: float = 20.0, ka_correction: bool = False) -> float:
    """Return the factor ``C_mu`` that makes the model match a measured T60 with tube.

    The bar's own T60 comes from ``bar.q``; the tube mode from the model at
    ``temperature_c``.
    """
    model = couple(bar, tube, temperature_c=temperature_c, ka_correction=ka_correction)
    measured = coupling_rate_from_t60(
        bar_frequency_hz=bar.frequency_hz, bar_t60_bare_s=bar.t60_s,
        bar_t60_with_tube_s=bar_t60_with_tube_s,
        tube_frequency_hz=model.tube_mode.frequency_hz, tube_q=model.tube_mode.q)
    return measured / model.coupling_rate_rad_s


# --------------------------------------------------------- offset trade-off


@dataclass(frozen=True)
class OffsetSweep:
    """Sustain and level of a bar's fundamental against the tube offset.

    Every array has the shape of ``offsets_cents``.  The tube is re-cut for each
    offset (:func:`synth.physics.tube.tube_length_for_bar`), so its Q and ``mu``
    follow its length.

    Attributes
    ----------
    offsets_cents : ndarray
        Tube above bar, cents.
    tube_length_m, tube_frequency_hz, tube_q, coupling_rate_rad_s : ndarray
        The tube as cut and its coupling.
    bar_t60_s, tube_t60_s : ndarray
        T60 of the bar-like and tube-like coupled modes, s.
    pitch_pull_cents : ndarray
        Bar-like frequency relative to the bar alone, cents.
    peak_gain_db, energy_gain_db : ndarray
        Gain of the fundamental over the bare bar (see
        :meth:`CoupledPair.peak_gain_db`, :meth:`CoupledPair.energy_gain_db`), dB.
    bare_t60_s : float
        T60 of the bar without tube, s.
    """

    offsets_cents: np.ndarray
    tube_length_m: np.ndarray
    tube_frequency_hz: np.ndarray
    tube_q: np.ndarray
    coupling_rate_rad_s: np.ndarray
    bar_t60_s: np.ndarray
    tube_t60_s: np.ndarray
    pitch_pull_cents: np.ndarray
    peak_gain_db: np.ndarray
    energy_gain_db: np.ndarray
    bare_t60_s: float


def coupling_at_offset(bar: BarMode, template: TubeSpec, offset_cents: float, *,
                       temperature_c: float = 20.0, coupling_calibration: float = 1.0,
                       ka_correction: bool = False) -> BarTubeCoupling:
    """Cut the tube ``offset_cents`` above the bar and couple it (see :func:`couple`)."""
    length = tube_length_for_bar(bar.frequency_hz, template, offset_cents=offset_cents,
                                 temperature_c=temperature_c, ka_correction=ka_correction)
    return couple(bar, replace(template, length_m=length), temperature_c=temperature_c,
                  coupling_calibration=coupling_calibration, ka_correction=ka_correction)


def sweep_tube_offset(bar: BarMode, template: TubeSpec, offsets_cents, *,
                      temperature_c: float = 20.0, coupling_calibration: float = 1.0,
                      ka_correction: bool = False) -> OffsetSweep:
    """Show the sustain-for-level trade of the tube offset.

    Tuned exactly the tube gives the most gain and the shortest sustain; tuned a
    little above it keeps most of the gain and costs less sustain (common practice,
    no source; the physics is the Lorentzian of physics.md section 8).

    Parameters
    ----------
    bar : BarMode
        The bar's first mode.
    template : TubeSpec
        Tube radius, ends, flange, gap and cover; its length is re-cut per offset.
    offsets_cents : array_like
        Offsets of the tube above the bar, cents.
    temperature_c : float
        Air temperature at which the tube is cut and played, C.
    coupling_calibration : float
        ``C_mu``.
    ka_correction : bool
        Use the (ka)^2 end-correction fit.

    Returns
    -------
    OffsetSweep
    """
    offsets = np.atleast_1d(np.asarray(offsets_cents, dtype=float))
    rows = []
    for c in offsets:
        cpl = coupling_at_offset(bar, template, float(c), temperature_c=temperature_c,
                                 coupling_calibration=coupling_calibration,
                                 ka_correction=ka_correction)
        m = cpl.pair.modes()
        rows.append((cpl.tube.length_m, cpl.tube_mode.frequency_hz, cpl.tube_mode.q,
                     cpl.coupling_rate_rad_s, m.t60_s[0], m.t60_s[1], m.pitch_pull_cents,
                     cpl.pair.peak_gain_db(), cpl.pair.energy_gain_db()))
    (length, tube_hz, tube_q, rate, bar_t60, tube_t60, pull, peak_db,
     energy_db) = np.array(rows, dtype=float).reshape(len(offsets), 9).T
    return OffsetSweep(offsets, length, tube_hz, tube_q, rate, bar_t60, tube_t60, pull,
                       peak_db, energy_db, bare_t60_s=bar.t60_s)


@dataclass(frozen=True)
class OffsetSuggestion:
    """A tube offset that meets a sustain target (see :func:`suggest_tube_offset`).

    Attributes
    ----------
    offset_cents : float
        Tube above the bar, cents.
    tube_length_m : float
        Cut length at the stated temperature, m.
    bar_t60_s : float
        T60 of the bar-like mode at that offset, s (the target).
    gain_db : float
        Gain of the fundamental over the bare bar by ``gain_measure``, dB.
    gain_measure : str
        ``"peak"`` or ``"energy"``.
    pitch_pull_cents : float
        How far the tube pulls the bar's pitch, cents.
    """

    offset_cents: float
    tube_length_m: float
    bar_t60_s: float
    gain_db: float
    gain_measure: str
    pitch_pull_cents: float


def suggest_tube_offset(bar: BarMode, template: TubeSpec, *, target_t60_s: float,
                        min_gain_db: float, temperature_c: float = 20.0,
                        gain_measure: str = "peak", max_offset_cents: float = 600.0,
                        coupling_calibration: float = 1.0,
                        ka_correction: bool = False) -> OffsetSuggestion:
    """Return the offset above the bar that gives a target T60 with enough gain.

    The bar-like T60 grows from its value with the tube tuned exactly towards the
    bare bar's as the tube moves up; Brent's method finds the offset in ``[0,
    max_offset_cents]`` where it equals ``target_t60_s``.  Tubes go above the bar by
    common practice (no source), since a cooler room and the bar over the mouth
    both lower them (physics.md section 7).

    Parameters
    ----------
    bar, template : BarMode, TubeSpec
        As for :func:`sweep_tube_offset`.
    target_t60_s : float
        Wanted T60 of the fundamental, s.
    min_gain_db : float
        Smallest acceptable gain over the bare bar, dB.
    temperature_c : float
        Air temperature, C.
    gain_measure : {"peak", "energy"}
        Peak radiated power (the stricter, default) or energy of the whole decay.
    max_offset_cents : float
        Largest offset searched, cents.
    coupling_calibration : float
        ``C_mu``.
    ka_correction : bool
        Use the (ka)^2 end-correction fit.

    Returns
    -------
    OffsetSuggestion

    Raises
    ------
    ModelError
        When the target lies outside what the tube can do, or the gain at the
        needed offset falls below ``min_gain_db`` (the message gives the longest
        T60 the floor allows).
    """
    if gain_measure not in ("peak", "energy"):
        raise ConfigError(f"= {gain_measure!r}: must be 'peak' or 'energy'", key="gain_measure")
    target = checked_number(target_t60_s, "target_t60_s", "> 0 s", lambda v: v > 0)
    floor = checked_number(min_gain_db, "min_gain_db", "finite dB", lambda v: True)
    cmax = checked_number(max_offset_cents, "max_offset_cents", "> 0 cents", lambda v: v > 0)
    kw: dict[str, Any] = {"temperature_c": temperature_c,
                          "coupling_calibration": coupling_calibration,
                          "ka_correction": ka_correction}

    def at(c: float) -> BarTubeCoupling:
        return coupling_at_offset(bar, template, c, **kw)

    def t60(c: float) -> float:
        return at(c).pair.modes().t60_s[0]

    def gain(c: float) -> float:
        p = at(c).pair
        return p.peak_gain_db() if gain_measure == "peak" else p.energy_gain_db()

    if not target < bar.t60_s:
        raise ModelError(f"target_t60_s = {target:g}: must be shorter than the bar's T60 "
                         f"without tube ({bar.t60_s:.4g} s)")
    t0 = t60(0.0)
    if target < t0:
        raise ModelError(f"target_t60_s = {target:g}: this tube shortens the bar to "
                         f"{t0:.4g} s at most (tuned exactly); narrow the gap or widen the tube")
    if t60(cmax) < target:
        raise ModelError(f"target_t60_s = {target:g}: needs the tube more than "
                         f"{cmax:g} cents above the bar; raise max_offset_cents or widen the gap")
    c = 0.0 if target == t0 else bracketed_root(lambda x: t60(x) - target, 0.0, cmax,
                                                xtol=1e-6)
    g = gain(c)
    if g < floor:
        g0 = gain(0.0)
        if g0 < floor:
            raise ModelError(f"min_gain_db = {floor:g}: even tuned exactly this tube gives only "
                             f"{g0:.3g} dB ({gain_measure}); lower the floor or narrow the gap")
        cf = bracketed_root(lambda x: gain(x) - floor, 0.0, c, xtol=1e-6)
        raise ModelError(f"target_t60_s = {target:g}: needs +{c:.1f} cents where the "
                         f"{gain_measure} gain is {g:.3g} dB < {floor:g} dB; the floor allows "
                         f"at most +{cf:.1f} cents (T60 {t60(cf):.4g} s)")
    best = at(c)
    return OffsetSuggestion(offset_cents=float(c), tube_length_m=best.tube.length_m,
                            bar_t60_s=best.pair.modes().t60_s[0], gain_db=float(g),
                            gain_measure=gain_measure,
                            pitch_pull_cents=best.pair.modes().pitch_pull_cents)
