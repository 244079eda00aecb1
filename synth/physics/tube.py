"""Closed (quarter-wave) tube resonators under the bars: pitch, losses, cut length.

A tube of inner radius ``a`` and physical length ``L``, closed at the bottom, rings
at the odd harmonics of a quarter wave,

    f_n = (2n - 1) c / (4 (L + delta)),        n = 1, 2, ...

where ``delta`` is the end correction of the mouth: the air just outside the mouth
that moves with the column.  A tube open at both ends rings at ``n c / (2 (L +
delta_top + delta_bottom))``.

Mouth model
-----------
The free mouth has ``delta_0 = 0.6133 a`` (unflanged, Levine & Schwinger [1]) or
``0.8216 a`` (infinite flange, Norris & Sheng [2]); on request the unflanged value
takes the low-ka correction ``delta_0/a = 0.6133 - 0.1168 (ka)^2`` (Davies et al.
[3], valid for ka < 0.5).

The bar hanging over the mouth at gap ``h`` lowers the tube (tube makers tune with
the bar in place; common practice, no source).  Model used here, an estimate to be
calibrated against a tube measured with its bar in place:

* The outflow from the mouth leaves by two parallel paths.  Path A is the part of
  the mouth that the bar does not cover, area ``(1 - sigma) S``; it radiates like
  the free mouth, inertance ``Z_A = rho delta_0 / ((1 - sigma) S)``.  Path B is the
  covered part, area ``sigma S``: the air is first squeezed sideways through the
  gap under the bar, then radiates, ``Z_B = rho delta_0 / (sigma S) + C_gap M_g``.
* ``M_g = rho / (8 pi h)`` is the kinetic-energy inertance of uniform inflow over a
  disc that leaves radially through a gap ``h`` (the result does not depend on the
  disc radius).  For a wide plate over the whole mouth it gives ``delta = delta_0 +
  a^2 / (8 h)``, which is also what the image of the mouth's monopole in a rigid
  plane at distance ``h`` adds (image at ``2h``: inertance ``rho / (4 pi 2h)``), so
  the formula holds in both the narrow-gap and the wide-gap limits for a plate.
* Total: ``delta = (S / rho) / (1/Z_A + 1/Z_B)``.  It falls back to ``delta_0`` as
  ``h -> inf`` and rises to ``delta_0 / (1 - sigma)`` (a partly blocked mouth) as
  ``h -> 0``; with ``sigma = 1`` it grows without bound as the gap closes.

``C_gap`` (``TubeSpec.gap_calibration``, default 1, uncalibrated) scales the gap
term; fit it so the model reproduces a tube's pitch measured with and without its
bar.  A bar narrower than a wide plate, a curved mouth edge and the bar's own
flanging all move the true value; gaps well below ``a/10`` are outside the model.

Losses
------
Wall losses follow Kirchhoff's viscothermal boundary-layer attenuation (Fletcher &
Rossing [4], section 8.2),

    alpha_w = (1 / (a c)) sqrt(om nu / 2) (1 + (gamma - 1) / sqrt(Pr))   [Np/m],
    Q_wall = k / (2 alpha_w),

and the open end radiates with normalised resistance ``r = (ka)^2 / 4`` (unflanged
[1]) or ``(ka)^2 / 2`` (flanged piston [5]), so ``Q_rad = k L_eff / (2 r)`` with
``k L_eff = (2n - 1) pi / 2``; ``1/Q = 1/Q_wall + 1/Q_rad`` (design notes,
physics.md section 7).  Closed-end boundary-layer loss and the bar's effect on the
radiation resistance are left out.

References
----------
.. [1] Levine, H. and Schwinger, J., "On the radiation of sound from an unflanged
   circular pipe", Phys. Rev. 73(4), 383-406, 1948, doi:10.1103/PhysRev.73.383.
.. [2] Norris, A. N. and Sheng, I. C., "Acoustic radiation from a circular pipe
   with an infinite flange", J. Sound Vib. 135(1), 85-93, 1989 (details from memory).
.. [3] Davies, P. O. A. L., Bento Coelho, J. L. and Bhattacharya, M., "Reflection
   coefficients for an unflanged pipe with flow", J. Sound Vib. 72(4), 543-546, 1980
   (the (ka)^2 coefficient is from memory).
.. [4] Fletcher, N. H. and Rossing, T. D., The Physics of Musical Instruments, 2nd
   ed., Springer, 1998, ISBN 978-0-387-98374-5, sections 8.2-8.3 (wall losses, open
   end) and ch. 19 (tube resonators of mallet instruments).
.. [5] Kinsler, L. E., Frey, A. R., Coppens, A. B. and Sanders, J. V., Fundamentals
   of Acoustics, 4th ed., Wiley, 2000, ISBN 978-0-471-84789-2 (speed of sound in an
   ideal gas; radiation impedance of a baffled piston).
.. [6] White, F. M., Viscous Fluid Flow, 3rd ed., McGraw-Hill, 2006 (Sutherland law).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace

import numpy as np

from synth.config import checked_number
from synth.constants import (
    CENTS_PER_NEPER,
    END_CORRECTION_FLANGED,
    END_CORRECTION_UNFLANGED,
    END_CORRECTION_UNFLANGED_KA2,
    GAS_CONSTANT_DRY_AIR_J_KG_K,
    LN_1000,
    PRANDTL_NUMBER_AIR,
    RADIATION_RESISTANCE_FLANGED,
    RADIATION_RESISTANCE_UNFLANGED,
    RATIO_OF_SPECIFIC_HEATS_AIR,
    SPEED_OF_SOUND_0C_M_S,
    STANDARD_PRESSURE_PA,
    SUTHERLAND_CONSTANT_AIR_K,
    SUTHERLAND_VISCOSITY_0C_PA_S,
    ZERO_CELSIUS_K,
)
from synth.errors import ConfigError, ModelError
from synth.numerics import bracketed_root
from synth.pitch import cents_to_ratio

KA_CORRECTION_LIMIT = 0.5
"""Largest ka for which the (ka)^2 end-correction fit is used without a warning [3]."""


# --------------------------------------------------------------------------- [tubes]


@dataclass(frozen=True)
class TubeSettings:
    """The resonators under the bars (``[tubes]`` table).

    ``ka_correction`` (default on) makes the free end correction depend on
    frequency, ``delta_0/a = 0.6133 - 0.1168 (ka)^2`` (Davies et al. [3]; the
    low-ka limit 0.6133 is Levine & Schwinger's [1], the (ka)^2 coefficient is
    from memory): at the top of a three-octave range (ka near 0.5) the
    constant value puts a tube about 16 cents flat.
    """

    inner_radius_m: tuple[float, float]
    gap_m: float
    offset_cents: float = 0.0
    flanged: bool = False
    coupling_calibration: float = 1.0
    gap_calibration: float = 1.0
    enabled: bool = True
    ka_correction: bool = True
    given: frozenset = frozenset()
    """Keys the preset's [tubes] table set itself (the calibrations among them)."""

    def uncalibrated(self) -> tuple[str, ...]:
        """Return the tube terms still at their derived, uncalibrated value.

        ``gap_calibration`` (the bar over the mouth: every tube length and tube
        pitch) and ``coupling_calibration`` (every tube T60 and gain) count as
        calibrated once the preset sets them (``barwright tubecal`` fits them).
        """
        return tuple(k for k in ("gap_calibration", "coupling_calibration")
                     if k not in self.given)

    def radius_at(self, fraction: float) -> float:
        """Inner radius at ``fraction`` of the range (geometric grading)."""
        lo, hi = self.inner_radius_m
        return lo * (hi / lo) ** fraction


def with_file_calibration(settings: TubeSettings | None, calibration) -> TubeSettings | None:
    """Return the tube settings with a calibration file's ``[tubes]`` values merged in.

    ``calibration`` is a :class:`synth.physics.losses.Calibration` (its ``tubes``
    dict); a key the preset's own ``[tubes]`` table sets wins.  The merged keys
    count as given (calibrated).
    """
    extra = {k: v for k, v in (getattr(calibration, "tubes", None) or {}).items()
             if settings is not None and k not in settings.given}
    if settings is None or not extra:
        return settings
    return replace(settings, **extra, given=settings.given | frozenset(extra))


# --------------------------------------------------------------------------- air


def _check_temperature(temperature_c: float) -> float:
    t = float(temperature_c)
    if not math.isfinite(t) or t <= -ZERO_CELSIUS_K:
        raise ConfigError(f"= {temperature_c!r}: must be a finite temperature above -273.15 C",
                          key="temperature_c")
    return t


def speed_of_sound(temperature_c: float = 20.0) -> float:
    """Return the speed of sound in dry air.

    Parameters
    ----------
    temperature_c : float
        Air temperature in degrees C (> -273.15).

    Returns
    -------
    float
        ``c = 331.3 sqrt(1 + T/273.15)`` in m/s (343.2146 m/s at 20 C).

    References
    ----------
    Kinsler et al. 2000 [5] (ideal-gas speed of sound, c proportional to sqrt(T));
    design notes physics.md section 7.
    """
    t = _check_temperature(temperature_c)
    return SPEED_OF_SOUND_0C_M_S * math.sqrt(1.0 + t / ZERO_CELSIUS_K)


def air_density(temperature_c: float = 20.0, pressure_pa: float = STANDARD_PRESSURE_PA) -> float:
    """Return the density of dry air, ``rho = p / (R T)`` in kg/m^3 (ideal gas [5])."""
    t = _check_temperature(temperature_c)
    if not (pressure_pa > 0 and math.isfinite(pressure_pa)):
        raise ConfigError(f"= {pressure_pa!r}: must be > 0 Pa", key="pressure_pa")
    return pressure_pa / (GAS_CONSTANT_DRY_AIR_J_KG_K * (t + ZERO_CELSIUS_K))


def dynamic_viscosity(temperature_c: float = 20.0) -> float:
    """Return the dynamic viscosity of air by the Sutherland law, Pa s.

    ``mu = mu_0 (T/T_0)^(3/2) (T_0 + S)/(T + S)``, ``T_0 = 273.15 K`` [6].
    """
    tk = _check_temperature(temperature_c) + ZERO_CELSIUS_K
    t0 = ZERO_CELSIUS_K
    s = SUTHERLAND_CONSTANT_AIR_K
    return SUTHERLAND_VISCOSITY_0C_PA_S * (tk / t0) ** 1.5 * (t0 + s) / (tk + s)


def kinematic_viscosity(temperature_c: float = 20.0,
                        pressure_pa: float = STANDARD_PRESSURE_PA) -> float:
    """Return the kinematic viscosity of air ``nu = mu / rho`` in m^2/s (1.506e-5 at 20 C)."""
    return dynamic_viscosity(temperature_c) / air_density(temperature_c, pressure_pa)


# --------------------------------------------------------------------- geometry


def bar_area_over_mouth(bar_width_m: float, inner_radius_m: float) -> float:
    """Return the area of a circular mouth that a bar centred over it covers.

    The bar is a strip of width ``b`` across a disc of radius ``a``; the overlap is
    ``2 [w sqrt(a^2 - w^2) + a^2 asin(w/a)]`` with ``w = min(b/2, a)`` (plane
    geometry, circular segment areas).

    Returns
    -------
    float
        Covered area in m^2 (``pi a^2`` when the bar is at least as wide as the mouth).
    """
    _positive(bar_width_m, "bar_width_m", "m")
    a = _positive(inner_radius_m, "tube.inner_radius_m", "m")
    w = min(0.5 * bar_width_m, a)
    return 2.0 * (w * math.sqrt(max(a * a - w * w, 0.0)) + a * a * math.asin(w / a))


def bar_cover_fraction(bar_width_m: float, inner_radius_m: float) -> float:
    """Return the fraction of the mouth area covered by a centred bar (0 < sigma <= 1)."""
    a = _positive(inner_radius_m, "tube.inner_radius_m", "m")
    return min(1.0, bar_area_over_mouth(bar_width_m, a) / (math.pi * a * a))


def _positive(value: float, key: str, unit: str) -> float:
    return checked_number(value, key, f"> 0 {unit}", lambda v: v > 0)


@dataclass(frozen=True)
class TubeSpec:
    """One resonator tube as built (SI units, dimensions at the reference temperature).

    Attributes
    ----------
    inner_radius_m : float
        Inner radius ``a`` of the tube, m (> 0).
    length_m : float
        Physical length from the inner face of the closed end (stopper) to the mouth
        rim, m (> 0).  For an open tube, rim to rim.
    closed_end : bool
        True for a stopped (quarter-wave) tube, the usual build; False for a tube
        open at both ends (bottom end unflanged, free).
    gap_to_bar_m : float or None
        Distance from the mouth rim to the underside of the bar, m (> 0); None when
        no bar sits over the mouth.
    flanged : bool
        True when the mouth sits in a wide flat plate (infinite-flange end
        correction and radiation); False for a plain tube end.
    bar_cover_fraction : float
        Fraction of the mouth area under the bar, 0 < sigma <= 1 (1 when the bar is
        at least as wide as the mouth); see :func:`bar_cover_fraction`.
    gap_calibration : float
        Factor ``C_gap`` on the gap inertance of the bar-over-mouth model (>= 0;
        default 1, uncalibrated; 0 switches the bar's lowering off).
    """

    inner_radius_m: float
    length_m: float
    closed_end: bool = True
    gap_to_bar_m: float | None = None
    flanged: bool = False
    bar_cover_fraction: float = 1.0
    gap_calibration: float = 1.0

    def __post_init__(self) -> None:
        _positive(self.inner_radius_m, "tube.inner_radius_m", "m")
        _positive(self.length_m, "tube.length_m", "m")
        if self.gap_to_bar_m is not None:
            _positive(self.gap_to_bar_m, "tube.gap_to_bar_m", "m (or leave unset: no bar)")
        c = self.bar_cover_fraction
        if not (isinstance(c, (int, float)) and 0.0 < c <= 1.0):
            raise ConfigError(f"= {c!r}: must be in (0, 1]", key="tube.bar_cover_fraction")
        g = self.gap_calibration
        if not (isinstance(g, (int, float)) and math.isfinite(g) and g >= 0.0):
            raise ConfigError(f"= {g!r}: must be a finite number >= 0",
                              key="tube.gap_calibration")

    @property
    def mouth_area_m2(self) -> float:
        """Inner cross-section ``S = pi a^2`` in m^2."""
        return math.pi * self.inner_radius_m ** 2


# -------------------------------------------------------------- end corrections


def free_end_correction(inner_radius_m: float, *, flanged: bool = False,
                        wavenumber_per_m: float | None = None) -> float:
    """Return the end correction of a free circular mouth, m.

    Parameters
    ----------
    inner_radius_m : float
        Inner radius ``a``, m.
    flanged : bool
        Infinite flange (0.8216 a, Norris & Sheng [2]) instead of a plain unflanged
        end (0.6133 a, Levine & Schwinger [1]).
    wavenumber_per_m : float, optional
        When given for an unflanged end, apply ``delta/a = 0.6133 - 0.1168 (ka)^2``
        (Davies et al. [3]); a warning names ka when it exceeds 0.5, the fit's range.
        Ignored for a flanged end (low-ka value used).

    Returns
    -------
    float
        ``delta_0`` in m.
    """
    a = _positive(inner_radius_m, "tube.inner_radius_m", "m")
    if flanged:
        return END_CORRECTION_FLANGED * a
    if wavenumber_per_m is None:
        return END_CORRECTION_UNFLANGED * a
    ka = float(wavenumber_per_m) * a
    if ka > KA_CORRECTION_LIMIT:
        warnings.warn(
            f"end correction: ka = {ka:.3f} exceeds {KA_CORRECTION_LIMIT}, the range of the "
            "(ka)^2 fit; use a narrower tube or switch ka_correction off",
            stacklevel=2,
        )
    return (END_CORRECTION_UNFLANGED - END_CORRECTION_UNFLANGED_KA2 * ka * ka) * a


def gap_inertance(gap_m: float, density_kg_m3: float) -> float:
    """Return the squeeze-flow inertance of the air under the bar, ``rho / (8 pi h)``.

    Uniform inflow over a disc leaving radially through a gap ``h``: kinetic energy
    ``(1/2) M U^2`` with ``M = rho / (8 pi h)`` in kg/m^4, independent of the disc
    radius (derived here; lumped low-frequency acoustics as in Kinsler et al. [5]).
    """
    h = _positive(gap_m, "tube.gap_to_bar_m", "m")
    return density_kg_m3 / (8.0 * math.pi * h)


def _mouth_paths(spec: TubeSpec, free_end_m: float, density: float) -> tuple[float, float, float]:
    """Return (Z_A, Z_B, M_g) of the bar-over-mouth model; Z_A is inf when sigma = 1."""
    if spec.gap_to_bar_m is None:  # the callers check first
        raise ModelError("tube.gap_to_bar_m is not set: no bar over the mouth")
    s = spec.mouth_area_m2
    sigma = spec.bar_cover_fraction
    m_g = spec.gap_calibration * gap_inertance(spec.gap_to_bar_m, density)
    z_b = density * free_end_m / (sigma * s) + m_g
    z_a = math.inf if sigma >= 1.0 else density * free_end_m / ((1.0 - sigma) * s)
    return z_a, z_b, m_g


def mouth_end_correction(spec: TubeSpec, *, wavenumber_per_m: float | None = None) -> float:
    """Return the end correction of the mouth including the bar over it, m.

    Without a bar (``gap_to_bar_m`` None) this is :func:`free_end_correction`.  With
    a bar it is the parallel-path model of the module docstring,
    ``delta = (S / rho) / (1/Z_A + 1/Z_B)``; the density cancels.

    Parameters
    ----------
    spec : TubeSpec
        The tube.
    wavenumber_per_m : float, optional
        Apply the unflanged ka correction to the free part of the end (see
        :func:`free_end_correction`).
    """
    d0 = free_end_correction(spec.inner_radius_m, flanged=spec.flanged,
                             wavenumber_per_m=wavenumber_per_m)
    if spec.gap_to_bar_m is None:
        return d0
    z_a, z_b, _ = _mouth_paths(spec, d0, 1.0)
    return spec.mouth_area_m2 / (1.0 / z_a + 1.0 / z_b)


def covered_flow_fraction(spec: TubeSpec, *, wavenumber_per_m: float | None = None) -> float:
    """Return the share of the mouth's outflow that passes under the bar.

    Inductive current division of the parallel-path model: ``Z_A / (Z_A + Z_B)``
    (1 when the bar covers the whole mouth).  Used for the bar-tube coupling.
    """
    if spec.gap_to_bar_m is None:
        raise ModelError("tube.gap_to_bar_m is not set: no bar over the mouth, nothing to couple")
    d0 = free_end_correction(spec.inner_radius_m, flanged=spec.flanged,
                             wavenumber_per_m=wavenumber_per_m)
    z_a, z_b, _ = _mouth_paths(spec, d0, 1.0)
    return 1.0 if math.isinf(z_a) else z_a / (z_a + z_b)


def _total_end_correction(spec: TubeSpec, k: float | None) -> float:
    """Mouth plus (for an open tube) the free bottom end."""
    total = mouth_end_correction(spec, wavenumber_per_m=k)
    if not spec.closed_end:
        total += free_end_correction(spec.inner_radius_m, wavenumber_per_m=k)
    return total


def _mode_factor(spec: TubeSpec, mode: int) -> float:
    """Return m with f = m c / (4 L_eff): 2n - 1 closed, 2n open."""
    if not (isinstance(mode, (int, np.integer)) and mode >= 1):
        raise ConfigError(f"= {mode!r}: must be an integer >= 1", key="mode")
    return float(2 * mode - 1) if spec.closed_end else float(2 * mode)


# ------------------------------------------------------------------- resonance


def resonance_frequency(spec: TubeSpec, *, temperature_c: float = 20.0, mode: int = 1,
                        ka_correction: bool = False) -> float:
    """Return the frequency of tube mode ``mode`` in Hz.

    ``f_n = (2n - 1) c / (4 (L + delta))`` for a closed tube, ``n c / (2 (L +
    delta_top + delta_bottom))`` for an open one ([4], ch. 8).  With
    ``ka_correction`` the end correction depends on the frequency itself; the
    equation is then solved by Brent's method (unique root: delta falls slowly
    with k).

    Parameters
    ----------
    spec : TubeSpec
        The tube.
    temperature_c : float
        Air temperature, C.
    mode : int
        Mode number n >= 1 (odd quarter-wave harmonics for a closed tube).
    ka_correction : bool
        Use the (ka)^2 end-correction fit for unflanged ends.

    Returns
    -------
    float
        Frequency in Hz.
    """
    c = speed_of_sound(temperature_c)
    m = _mode_factor(spec, mode)
    f0 = m * c / (4.0 * (spec.length_m + _total_end_correction(spec, None)))
    if not ka_correction:
        return f0

    def residual(f: float) -> float:
        k = 2.0 * math.pi * f / c
        return 4.0 * f * (spec.length_m + _total_end_correction(spec, k)) - m * c

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        hi = m * c / (4.0 * spec.length_m)
        if residual(hi) <= 0.0:   # ka far outside the fit: end correction vanished
            raise ModelError(
                f"tube a = {spec.inner_radius_m:g} m, L = {spec.length_m:g} m: the (ka)^2 "
                "end correction is outside its range at this pitch; switch ka_correction off")
        f = bracketed_root(residual, f0, hi, xtol=1e-12, rtol=1e-14)
    free_end_correction(spec.inner_radius_m, flanged=spec.flanged,
                        wavenumber_per_m=2.0 * math.pi * f / c)   # warn once if ka too large
    return f


def calibrate_gap(spec: TubeSpec, measured_hz: float, *, temperature_c: float = 20.0,
                  ka_correction: bool = False, upper: float = 100.0) -> float:
    """Return the ``gap_calibration`` that gives a tube's pitch measured with its bar in place.

    Solves ``resonance_frequency(spec with C_gap) = measured_hz`` for ``C_gap`` by
    Brent's method on ``[0, upper]`` (the frequency falls monotonically as the gap
    term grows).

    Parameters
    ----------
    spec : TubeSpec
        The tube as cut, with its bar's gap and cover fraction.
    measured_hz : float
        Its first resonance measured with the bar over the mouth, Hz.
    temperature_c : float
        Air temperature during the measurement, C.
    ka_correction : bool
        Use the (ka)^2 end correction.
    upper : float
        Largest factor searched (``tubes.calibration`` allows up to 100).

    Raises
    ------
    ModelError
        When no factor in ``[0, upper]`` reaches the measured pitch: the tube is
        higher than the free tube (length, radius or temperature wrong) or lower
        than the largest factor gives.
    """
    if spec.gap_to_bar_m is None:
        raise ModelError("the tube has no bar over it (gap_to_bar_m is None): nothing to fit")

    def at(c: float) -> float:
        return resonance_frequency(replace(spec, gap_calibration=c),
                                   temperature_c=temperature_c, ka_correction=ka_correction)

    f_free, f_low = at(0.0), at(upper)
    if not f_low <= measured_hz <= f_free:
        raise ModelError(
            f"tube pitch {measured_hz:.2f} Hz with the bar in place lies outside what the gap "
            f"model gives ({f_low:.2f} Hz at gap_calibration {upper:g} to {f_free:.2f} Hz with "
            "no bar effect): check the tube's length and radius, the gap and the temperature")
    return bracketed_root(lambda c: at(c) - measured_hz, 0.0, upper, xtol=1e-10, rtol=1e-12)


def resonance_frequencies(spec: TubeSpec, n_modes: int, *, temperature_c: float = 20.0,
                          ka_correction: bool = False) -> np.ndarray:
    """Return the first ``n_modes`` tube frequencies in Hz, shape ``(n_modes,)``."""
    if not (isinstance(n_modes, (int, np.integer)) and n_modes >= 1):
        raise ConfigError(f"= {n_modes!r}: must be an integer >= 1", key="n_modes")
    return np.array([resonance_frequency(spec, temperature_c=temperature_c, mode=n,
                                         ka_correction=ka_correction)
                     for n in range(1, n_modes + 1)])


def wall_attenuation(frequency_hz: float, inner_radius_m: float, *,
                     temperature_c: float = 20.0) -> float:
    """Return the Kirchhoff viscothermal wall attenuation of a plane wave in a tube.

    ``alpha_w = (1/(a c)) sqrt(om nu / 2) (1 + (gamma - 1)/sqrt(Pr))`` in Np/m
    (Fletcher & Rossing [4], section 8.2; about 2.96e-5 sqrt(f)/a at 20 C).
    """
    f = _positive(frequency_hz, "frequency_hz", "Hz")
    a = _positive(inner_radius_m, "tube.inner_radius_m", "m")
    c = speed_of_sound(temperature_c)
    nu = kinematic_viscosity(temperature_c)
    om = 2.0 * math.pi * f
    g = RATIO_OF_SPECIFIC_HEATS_AIR
    return math.sqrt(om * nu / 2.0) * (1.0 + (g - 1.0) / math.sqrt(PRANDTL_NUMBER_AIR)) / (a * c)


@dataclass(frozen=True)
class TubeMode:
    """One resonance of a tube with its losses (SI units).

    Attributes
    ----------
    mode : int
        Mode number n.
    frequency_hz : float
        Resonance frequency, Hz.
    q_wall, q_radiation, q : float
        Quality factors from wall losses, from mouth radiation, and combined
        (``1/q = 1/q_wall + 1/q_radiation``).
    effective_length_m : float
        Length plus all end corrections, m.
    end_correction_m : float
        End correction of the mouth (bar included), m.
    mouth_area_m2 : float
        Inner cross-section, m^2.
    acoustic_mass_kg_m4 : float
        Modal acoustic mass referred to the mouth volume velocity,
        ``rho L_eff / (2 S)`` in kg/m^4 (kinetic energy ``(1/2) M U^2``).
    density_kg_m3, speed_of_sound_m_s : float
        Air properties used.
    """

    mode: int
    frequency_hz: float
    q_wall: float
    q_radiation: float
    q: float
    effective_length_m: float
    end_correction_m: float
    mouth_area_m2: float
    acoustic_mass_kg_m4: float
    density_kg_m3: float
    speed_of_sound_m_s: float

    @property
    def omega_rad_s(self) -> float:
        """Angular frequency, rad/s."""
        return 2.0 * math.pi * self.frequency_hz

    @property
    def decay_per_s(self) -> float:
        """Amplitude decay rate ``om / (2 Q)``, 1/s."""
        return self.omega_rad_s / (2.0 * self.q)

    @property
    def radiation_decay_per_s(self) -> float:
        """Part of the decay rate due to mouth radiation, ``om / (2 Q_rad)``, 1/s."""
        return self.omega_rad_s / (2.0 * self.q_radiation)

    @property
    def wall_decay_per_s(self) -> float:
        """Part of the decay rate due to wall losses, ``om / (2 Q_wall)``, 1/s."""
        return self.omega_rad_s / (2.0 * self.q_wall)

    @property
    def t60_s(self) -> float:
        """Time for a 60 dB fall, ``ln(1000) / decay``, s."""
        return LN_1000 / self.decay_per_s

    @property
    def bandwidth_hz(self) -> float:
        """Full -3 dB bandwidth ``f / Q``, Hz."""
        return self.frequency_hz / self.q


def tube_mode(spec: TubeSpec, *, temperature_c: float = 20.0, mode: int = 1,
              ka_correction: bool = False) -> TubeMode:
    """Return frequency, Q and modal mass of one tube resonance.

    ``Q_wall = k / (2 alpha_w)`` (Kirchhoff wall loss, [4] section 8.2) and
    ``Q_rad = k L_eff / (2 r)`` with ``r = (ka)^2/4`` unflanged [1] or ``(ka)^2/2``
    flanged [5] per radiating end, ``k L_eff = (2n - 1) pi / 2`` (closed) or
    ``n pi`` (open); ``1/Q`` adds (physics.md section 7).

    Parameters
    ----------
    spec : TubeSpec
        The tube.
    temperature_c : float
        Air temperature, C.
    mode : int
        Mode number n >= 1.
    ka_correction : bool
        Use the (ka)^2 end-correction fit.

    Returns
    -------
    TubeMode
    """
    f = resonance_frequency(spec, temperature_c=temperature_c, mode=mode,
                            ka_correction=ka_correction)
    c = speed_of_sound(temperature_c)
    rho = air_density(temperature_c)
    k = 2.0 * math.pi * f / c
    kk = k if ka_correction else None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")   # resonance_frequency has warned already
        d_mouth = mouth_end_correction(spec, wavenumber_per_m=kk)
        l_eff = spec.length_m + _total_end_correction(spec, kk)
    a = spec.inner_radius_m
    r_coef = RADIATION_RESISTANCE_FLANGED if spec.flanged else RADIATION_RESISTANCE_UNFLANGED
    r = r_coef * (k * a) ** 2
    if not spec.closed_end:
        r += RADIATION_RESISTANCE_UNFLANGED * (k * a) ** 2   # free bottom end
    q_rad = k * l_eff / (2.0 * r)
    q_wall = k / (2.0 * wall_attenuation(f, a, temperature_c=temperature_c))
    q = 1.0 / (1.0 / q_wall + 1.0 / q_rad)
    s = spec.mouth_area_m2
    return TubeMode(mode=mode, frequency_hz=f, q_wall=q_wall, q_radiation=q_rad, q=q,
                    effective_length_m=l_eff, end_correction_m=d_mouth, mouth_area_m2=s,
                    acoustic_mass_kg_m4=rho * l_eff / (2.0 * s), density_kg_m3=rho,
                    speed_of_sound_m_s=c)


# --------------------------------------------------------------- length solver


def tube_length(frequency_hz: float, template: TubeSpec, *, temperature_c: float = 20.0,
                mode: int = 1, ka_correction: bool = False) -> float:
    """Return the cut length that puts tube mode ``mode`` at ``frequency_hz``.

    Inverts :func:`resonance_frequency`: ``L = m c / (4 f) - delta_total``, with
    every end correction (bar over the mouth included) evaluated at the target
    wavenumber, so the inversion is exact (no iteration).

    Parameters
    ----------
    frequency_hz : float
        Target tube frequency, Hz (> 0).
    template : TubeSpec
        Radius, ends, gap, flange and cover fraction; its ``length_m`` is ignored.
    temperature_c : float
        Air temperature at which the tube is to be in tune, C.
    mode : int
        Which tube mode to place (1 = the lowest).
    ka_correction : bool
        Use the (ka)^2 end-correction fit.

    Returns
    -------
    float
        Physical length in m.

    Raises
    ------
    ModelError
        When the end corrections alone exceed the quarter (half) wavelength, i.e.
        the tube would need a length <= 0.

    Notes
    -----
    The bar-over-mouth term is uncalibrated until ``gap_calibration`` has been
    fitted, so cut a first tube a little long and trim it to pitch with its bar in
    place (common practice, no source).

    .. note:: Cutting and deburring tubes: wear eye and hearing protection, clamp
       the tube, use a blade rated for non-ferrous metal, deburr the cut edge, and
       keep fine aluminium dust away from steel grinding sparks (it is combustible;
       physics.md section 14).
    """
    f = _positive(frequency_hz, "frequency_hz", "Hz")
    c = speed_of_sound(temperature_c)
    m = _mode_factor(template, mode)
    k = 2.0 * math.pi * f / c if ka_correction else None
    quarter = m * c / (4.0 * f)
    delta = _total_end_correction(template, k)
    length = quarter - delta
    if not length > 0.0:
        raise ModelError(
            f"tube for {f:g} Hz with inner radius {template.inner_radius_m:g} m: the end "
            f"corrections ({delta * 1e3:.2f} mm) exceed the {quarter * 1e3:.2f} mm the "
            "air column may have; use a narrower tube or a wider gap to the bar")
    return length


def offset_ratio(*, offset_cents: float | None = None,
                 offset_percent: float | None = None) -> float:
    """Return the frequency ratio tube/bar for an offset in cents or in percent.

    Exactly one of the two may be given (neither means 0); ratio ``2^(c/1200)`` or
    ``1 + p/100``.
    """
    if offset_cents is not None and offset_percent is not None:
        raise ConfigError("give the tube offset in cents or in percent, not both",
                          key="offset")
    if offset_percent is not None:
        p = float(offset_percent)
        if not (math.isfinite(p) and p > -100.0):
            raise ConfigError(f"= {offset_percent!r}: must be > -100 %", key="offset_percent")
        return 1.0 + p / 100.0
    c = 0.0 if offset_cents is None else float(offset_cents)
    if not math.isfinite(c):
        raise ConfigError(f"= {offset_cents!r}: must be finite", key="offset_cents")
    return float(cents_to_ratio(c))


def tube_length_for_bar(bar_frequency_hz: float, template: TubeSpec, *,
                        offset_cents: float | None = None, offset_percent: float | None = None,
                        temperature_c: float = 20.0, ka_correction: bool = False) -> float:
    """Return the cut length of a tube tuned an offset above its bar, m.

    The tube's lowest mode (with the bar in place, as described by ``template``)
    lands at ``f_bar * ratio`` at ``temperature_c``; see :func:`offset_ratio` and
    :func:`tube_length`.  Tubes are often tuned a little above their bar (common
    practice, no source; physics.md section 7); the default offset is 0.
    """
    ratio = offset_ratio(offset_cents=offset_cents, offset_percent=offset_percent)
    f = _positive(bar_frequency_hz, "bar_frequency_hz", "Hz")
    return tube_length(f * ratio, template, temperature_c=temperature_c,
                       ka_correction=ka_correction)


def tuned_tube(bar_frequency_hz: float, template: TubeSpec, *,
               offset_cents: float | None = None, offset_percent: float | None = None,
               temperature_c: float = 20.0, ka_correction: bool = False) -> TubeSpec:
    """Return ``template`` with its length cut for :func:`tube_length_for_bar`."""
    length = tube_length_for_bar(bar_frequency_hz, template, offset_cents=offset_cents,
                                 offset_percent=offset_percent, temperature_c=temperature_c,
                                 ka_correction=ka_correction)
    return replace(template, length_m=length)


# ------------------------------------------------------------------ temperature


def temperature_drift_cents_per_k(spec: TubeSpec, *, temperature_c: float = 20.0,
                                  expansion_per_k: float = 0.0,
                                  ka_correction: bool = False) -> float:
    """Return the tube's pitch drift with air temperature, cents per kelvin.

    ``d ln f / dT = 1 / (2 T_K) - alpha`` when every end correction scales with the
    tube (physics.md section 7: +2.953 c/K at 20 C, about +2.91 c/K with an
    aluminium tube's expansion).  Evaluated here as a central difference (+-0.1 K)
    of the full model, so ka and gap effects are included; the tube's radius and
    length expand by ``expansion_per_k`` (the gap to the bar is held fixed).

    Parameters
    ----------
    spec : TubeSpec
        The tube at ``temperature_c``.
    temperature_c : float
        Air and tube temperature, C.
    expansion_per_k : float
        Linear thermal expansion coefficient of the tube wall, 1/K (0 ignores it;
        23.6e-6 for 6061 aluminium, physics.md section 4).
    ka_correction : bool
        Use the (ka)^2 end-correction fit.

    Returns
    -------
    float
        Drift in cents/K (positive: the tube goes sharp when warm).
    """
    step = 0.1
    vals = []
    for dt in (-step, step):
        scale = 1.0 + expansion_per_k * dt
        s = replace(spec, inner_radius_m=spec.inner_radius_m * scale,
                    length_m=spec.length_m * scale)
        vals.append(math.log(resonance_frequency(s, temperature_c=temperature_c + dt,
                                                 ka_correction=ka_correction)))
    return CENTS_PER_NEPER * (vals[1] - vals[0]) / (2.0 * step)
