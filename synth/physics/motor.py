"""Motor-driven discs in the tube mouths: opening, coupling and radiation over time.

A flat disc on a common shaft spans each tube mouth.  Seen along the tube axis it
covers ``beta |cos theta|`` of the mouth, where ``theta`` is the disc's angle from
lying flat and ``beta < 1`` is the share of the mouth a flat disc covers (it is
smaller than the mouth, which leaves a rim gap).  The open fraction is

    o(theta) = 1 - beta |cos theta|,   theta = theta_shaft(t) + theta_bar,

largest edge-on (``o = 1``) and smallest flat (``o = 1 - beta``).  ``|cos|`` repeats
twice per turn, so the mouths pulse at twice the shaft's rotation rate (geometric,
physics.md section 9).  ``beta = (r_disc / a)^2`` for a disc of radius ``r_disc``
in a mouth of radius ``a`` (projected area of a tilted disc; disc thickness and
shaft ignored), see :func:`block_fraction`.

Shaft motion
------------
The shaft rests at a resting angle until the motor starts at ``start_time_s``, then
spins up to ``rate_rev_per_s``:

* ``"exponential"``: ``f(u) = f_r (1 - exp(-u/tau))`` (a first-order motor and
  belt), angle ``2 pi f_r (u - tau (1 - exp(-u/tau)))``;
* ``"linear"``: ``f(u) = f_r u / T`` up to ``u = T``, then ``f_r``; angle ``2 pi
  f_r u^2 / (2T)`` then ``2 pi f_r (u - T/2)``;

with ``u = t - start_time_s`` and ``tau`` or ``T`` = ``spin_up_s`` (0: full speed at
once).  Each bar's disc is mounted at its own phase offset on the shaft; discs on one
shaft share the phase unless mounted offset.

Modulation model (physics.md section 9, option 2)
-------------------------------------------------
The coupling rate and the mouth's radiation resistance follow the opening:

    mu(t) = mu_open m(t),   R_rad(t) = R_rad,open m(t),   m = max(o, m_floor),

so the tube's radiated power scales with ``m`` and its pressure weight with
``sqrt(m)``; the tube's radiation decay rate scales with ``m`` too (its wall decay
does not).  ``m_floor`` (default 0.02, a modelling guard, not a measured value)
keeps some coupling when ``beta`` is set near 1: air still reaches the tube round
the disc.  Not modelled: the orifice inertance of the part-closed mouth, which
lowers the tube as the disc closes (physics.md section 9), and the disc's own
vibration.  The tube's time constant (about 38 ms at 440 Hz) lags the modulation
above ~5 Hz, so the engine integrates the coupled modes with these per-sample
coefficients rather than switching gains per block.

The functions return plain float64 arrays for a block of samples; the
:class:`DiscModulation` methods have the signature ``(start_sample, n) -> ndarray``
the engine streams from.

.. note:: Spinning discs, shafts, belts and pulleys can catch fingers, hair and
   sleeves: guard them, and have mains wiring done by a qualified person to local
   code (physics.md section 14).

References
----------
.. [1] Design notes, physics.md section 9 (geometry of the flat disc, modulation
   models) and section 8 (coupled modes).
.. [2] Fletcher, N. H. and Rossing, T. D., The Physics of Musical Instruments, 2nd
   ed., Springer, 1998, ISBN 978-0-387-98374-5, ch. 19 (vibraphone: rotating discs
   in the resonator tubes give the tremolo; details from memory).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from synth.errors import ConfigError
from synth.physics.coupling import CoupledPair, pressure_weight

DEFAULT_FLOOR = 0.02
"""Default lower bound of the modulation factor m (a modelling guard, not measured)."""

_LAWS = ("exponential", "linear")


def block_fraction(disc_radius_m: float, mouth_radius_m: float) -> float:
    """Return ``beta = (r_disc / a)^2``, the share of the mouth a flat disc covers.

    Raises
    ------
    ConfigError
        If the disc would not fit inside the mouth (``r_disc >= a``).
    """
    rd = float(disc_radius_m)
    a = float(mouth_radius_m)
    if not (a > 0 and math.isfinite(a)):
        raise ConfigError(f"= {mouth_radius_m!r}: must be > 0 m", key="tube.inner_radius_m")
    if not (0 <= rd < a):
        raise ConfigError(f"= {disc_radius_m!r}: must be >= 0 m and smaller than the mouth "
                          f"radius {a:g} m (a rim gap is needed)", key="motor.disc_radius_m")
    return (rd / a) ** 2


def _resting_angle_rad(resting: str | float) -> float:
    if isinstance(resting, str):
        key = resting.strip().lower()
        if key == "open":
            return 0.5 * math.pi
        if key == "closed":
            return 0.0
        raise ConfigError(f"= {resting!r}: must be 'open', 'closed' or an angle in degrees",
                          key="motor.resting")
    if isinstance(resting, bool) or not isinstance(resting, (int, float)) \
            or not math.isfinite(resting):
        raise ConfigError(f"= {resting!r}: must be 'open', 'closed' or an angle in degrees",
                          key="motor.resting")
    return math.radians(float(resting))


@dataclass(frozen=True)
class MotorSpec:
    """The disc shaft and its motor (SI units; angles in degrees where named).

    Attributes
    ----------
    rate_rev_per_s : float
        Steady rotation rate of the shaft, rev/s (>= 0; 0 = stopped).  The mouths
        pulse at twice this rate.  Typical 0.5-6 rev/s (from memory, physics.md
        section 9).
    block_fraction : float
        ``beta``, the share of the mouth a flat disc covers, 0 <= beta < 1 (default
        0.85, a disc of 0.92 times the mouth radius; a default, not a fact).
    resting : str or float
        Shaft angle while stopped and at the start: ``"open"`` (discs edge-on),
        ``"closed"`` (discs flat) or an angle in degrees from flat.
    spin_up_s : float
        Time constant (exponential) or ramp time (linear) of the spin-up, s (>= 0).
    spin_up_law : str
        ``"exponential"`` or ``"linear"``.
    start_time_s : float
        When the motor is switched on, s from the start of the render (>= 0).
    """

    rate_rev_per_s: float = 0.0
    block_fraction: float = 0.85
    resting: str | float = "open"
    spin_up_s: float = 0.0
    spin_up_law: str = "exponential"
    start_time_s: float = 0.0

    def __post_init__(self) -> None:
        r = self.rate_rev_per_s
        if isinstance(r, bool) or not isinstance(r, (int, float)) or not math.isfinite(r) \
                or r < 0:
            raise ConfigError(f"= {r!r}: must be >= 0 rev/s (0 = stopped)",
                              key="motor.rate_rev_per_s")
        b = self.block_fraction
        if not (isinstance(b, (int, float)) and 0.0 <= b < 1.0):
            raise ConfigError(f"= {b!r}: must be in [0, 1) (a flat disc leaves a rim gap)",
                              key="motor.block_fraction")
        _resting_angle_rad(self.resting)
        s = self.spin_up_s
        if not (isinstance(s, (int, float)) and math.isfinite(s) and s >= 0):
            raise ConfigError(f"= {s!r}: must be >= 0 s", key="motor.spin_up_s")
        if self.spin_up_law not in _LAWS:
            raise ConfigError(f"= {self.spin_up_law!r}: must be one of {', '.join(_LAWS)}",
                              key="motor.spin_up_law")
        t0 = self.start_time_s
        if not (isinstance(t0, (int, float)) and math.isfinite(t0) and t0 >= 0):
            raise ConfigError(f"= {t0!r}: must be >= 0 s", key="motor.start_time_s")

    @property
    def resting_angle_rad(self) -> float:
        """Shaft angle at rest, rad from flat."""
        return _resting_angle_rad(self.resting)

    @property
    def pulse_rate_hz(self) -> float:
        """Opening pulses per second at full speed, ``2 f_rot`` (flat disc)."""
        return 2.0 * self.rate_rev_per_s


def _times(time_s) -> np.ndarray:
    t = np.asarray(time_s, dtype=float)
    if not np.all(np.isfinite(t)):
        raise ConfigError("times must be finite", key="time_s")
    return t


def rotation_rate(motor: MotorSpec, time_s) -> np.ndarray:
    """Return the shaft's rotation rate at the given times, rev/s (same shape)."""
    t = _times(time_s)
    u = np.maximum(t - motor.start_time_s, 0.0)
    fr = motor.rate_rev_per_s
    tau = motor.spin_up_s
    if fr == 0.0:
        return np.zeros_like(u)
    if tau == 0.0:
        return np.where(t >= motor.start_time_s, fr, 0.0)
    if motor.spin_up_law == "exponential":
        return fr * -np.expm1(-u / tau)
    return fr * np.minimum(u / tau, 1.0)


def shaft_angle(motor: MotorSpec, time_s) -> np.ndarray:
    """Return the shaft angle from flat at the given times, rad (same shape).

    The integral of :func:`rotation_rate` from the start time, added to the resting
    angle (closed forms in the module docstring).
    """
    t = _times(time_s)
    u = np.maximum(t - motor.start_time_s, 0.0)
    fr = motor.rate_rev_per_s
    tau = motor.spin_up_s
    if fr == 0.0:
        turns = np.zeros_like(u)
    elif tau == 0.0:
        turns = fr * u
    elif motor.spin_up_law == "exponential":
        turns = fr * (u + tau * np.expm1(-u / tau))
    else:
        turns = fr * np.where(u < tau, u * u / (2.0 * tau), u - 0.5 * tau)
    return motor.resting_angle_rad + 2.0 * math.pi * turns


def opening_fraction(motor: MotorSpec, time_s, *, phase_offset_deg: float = 0.0) -> np.ndarray:
    """Return the open fraction ``o = 1 - beta |cos theta|`` of one mouth (same shape).

    Parameters
    ----------
    motor : MotorSpec
        Shaft and motor.
    time_s : array_like
        Times, s.
    phase_offset_deg : float
        This bar's disc angle on the shaft relative to the reference disc, degrees.
    """
    theta = shaft_angle(motor, time_s) + math.radians(float(phase_offset_deg))
    return 1.0 - motor.block_fraction * np.abs(np.cos(theta))


def block_times(start_sample: int, n: int, sample_rate: float, *,
                offset_samples: float = 0.0) -> np.ndarray:
    """Return the times ``(start_sample + arange(n) + offset_samples) / sample_rate``, s.

    ``offset_samples = 0.5`` gives the middle of each sample step.
    """
    if not (isinstance(start_sample, (int, np.integer)) and start_sample >= 0):
        raise ConfigError(f"= {start_sample!r}: must be an integer >= 0", key="start_sample")
    if not (isinstance(n, (int, np.integer)) and n >= 0):
        raise ConfigError(f"= {n!r}: must be an integer >= 0", key="n")
    if not (sample_rate > 0 and math.isfinite(sample_rate)):
        raise ConfigError(f"= {sample_rate!r}: must be > 0 Hz", key="sample_rate")
    return (np.arange(n, dtype=float) + (float(start_sample) + float(offset_samples))) \
        / float(sample_rate)


def opening_block(motor: MotorSpec, start_sample: int, n: int, sample_rate: float, *,
                  phase_offset_deg: float = 0.0, offset_samples: float = 0.0) -> np.ndarray:
    """Return the open fraction for samples ``start_sample .. start_sample + n - 1``.

    Sample numbers count on the render's output clock (sample 0 = time 0, when
    ``MotorSpec.start_time_s`` is counted from); ``offset_samples`` shifts the
    evaluation times (0.5: mid-step).

    Returns
    -------
    ndarray
        float64, shape ``(n,)``, values in ``[1 - beta, 1]``.
    """
    return opening_fraction(motor, block_times(start_sample, n, sample_rate,
                                               offset_samples=offset_samples),
                            phase_offset_deg=phase_offset_deg)


def modulation_factor(opening, floor: float = DEFAULT_FLOOR) -> np.ndarray:
    """Return ``m = max(o, floor)``, the factor on ``mu`` and on the radiation resistance."""
    if not (0.0 <= floor <= 1.0):
        raise ConfigError(f"= {floor!r}: must be in [0, 1]", key="motor.floor")
    return np.maximum(np.asarray(opening, dtype=float), floor)


@dataclass(frozen=True)
class DiscModulation:
    """Per-sample coefficients of one bar's tube under a spinning disc.

    Every method takes ``(start_sample, n)`` and returns a float64 array of length
    ``n``, so the bound methods can be handed to the engine as streams.

    Attributes
    ----------
    motor : MotorSpec
        The shaft.
    sample_rate : float
        Samples per second, Hz.
    coupling_open_rad_s : float
        ``mu`` with the mouth fully open, rad/s.
    tube_weight_open : float
        Tube output weight with the mouth fully open, Pa per sqrt(J).
    tube_wall_decay_per_s, tube_radiation_decay_per_s : float
        Parts of the tube's decay rate with the mouth open, 1/s.
    phase_offset_deg : float
        This bar's disc angle on the shaft, degrees.
    floor : float
        Lower bound of the modulation factor.
    coupling_at_midstep : bool
        Evaluate ``mu`` at the middle of each sample step (the engine applies it
        over the step); opening, weight and decay are taken at the sample itself.
    """

    motor: MotorSpec
    sample_rate: float
    coupling_open_rad_s: float
    tube_weight_open: float = 1.0
    tube_wall_decay_per_s: float = 0.0
    tube_radiation_decay_per_s: float = 0.0
    phase_offset_deg: float = 0.0
    floor: float = DEFAULT_FLOOR
    coupling_at_midstep: bool = True

    def __post_init__(self) -> None:
        for name in ("sample_rate",):
            v = getattr(self, name)
            if not (v > 0 and math.isfinite(v)):
                raise ConfigError(f"= {v!r}: must be > 0 Hz", key=name)
        for name in ("coupling_open_rad_s", "tube_weight_open", "tube_wall_decay_per_s",
                     "tube_radiation_decay_per_s"):
            v = getattr(self, name)
            if not (isinstance(v, (int, float)) and math.isfinite(v) and v >= 0):
                raise ConfigError(f"= {v!r}: must be a finite number >= 0", key=name)
        if not (0.0 <= self.floor <= 1.0):
            raise ConfigError(f"= {self.floor!r}: must be in [0, 1]", key="motor.floor")

    def opening(self, start_sample: int, n: int) -> np.ndarray:
        """Open fraction ``o`` per sample."""
        return opening_block(self.motor, start_sample, n, self.sample_rate,
                             phase_offset_deg=self.phase_offset_deg)

    def factor(self, start_sample: int, n: int) -> np.ndarray:
        """Modulation factor ``m = max(o, floor)`` per sample."""
        return modulation_factor(self.opening(start_sample, n), self.floor)

    def coupling_rate(self, start_sample: int, n: int) -> np.ndarray:
        """Coupling rate ``mu = mu_open m`` per sample step, rad/s.

        The engine applies the value of sample ``j`` over the step ``j -> j + 1``, so
        it is evaluated at ``j + 1/2`` (the midpoint rule, second-order accurate)
        unless ``coupling_at_midstep`` is False.
        """
        off = 0.5 if self.coupling_at_midstep else 0.0
        o = opening_block(self.motor, start_sample, n, self.sample_rate,
                          phase_offset_deg=self.phase_offset_deg, offset_samples=off)
        return self.coupling_open_rad_s * modulation_factor(o, self.floor)

    def tube_weight(self, start_sample: int, n: int) -> np.ndarray:
        """Tube output weight ``w_open sqrt(m(t))`` per sample, Pa per sqrt(J)."""
        return self.tube_weight_open * np.sqrt(self.factor(start_sample, n))

    def tube_decay(self, start_sample: int, n: int) -> np.ndarray:
        """Tube amplitude decay rate ``g_wall + g_rad m(t)`` per sample, 1/s."""
        return self.tube_wall_decay_per_s + self.tube_radiation_decay_per_s * self.factor(
            start_sample, n)

    def mean_factor(self) -> float:
        """Mean of ``m`` over a turn at full speed, in closed form.

        Over a quarter turn, with ``theta_0 = arccos(min(1, (1 - floor) / beta))``
        the angle below which the floor holds, the mean is ``(2/pi) [floor theta_0 +
        pi/2 - theta_0 - beta (1 - sin theta_0)]``; ``1 - 2 beta / pi`` when the floor
        is inactive (integral of ``|cos|``).
        """
        beta = self.motor.block_fraction
        if beta == 0.0:
            return max(1.0, self.floor)
        x0 = min(1.0, (1.0 - self.floor) / beta)
        th0 = math.acos(x0)
        return (2.0 / math.pi) * (self.floor * th0 + 0.5 * math.pi - th0
                                  - beta * (1.0 - math.sin(th0)))

    def mean_tube_decay_per_s(self) -> float:
        """Tube decay rate at the mean modulation factor, 1/s (for a fixed ``s2``)."""
        return self.tube_wall_decay_per_s + self.tube_radiation_decay_per_s * self.mean_factor()


def opening_stream(motor: MotorSpec, sample_rate: float, *,
                   phase_offset_deg: float = 0.0) -> Callable[[int, int], np.ndarray]:
    """Return ``(start_sample, n) -> open fraction`` for one bar's mouth."""
    return DiscModulation(motor, sample_rate, 0.0, phase_offset_deg=phase_offset_deg).opening


def coupling_stream(motor: MotorSpec, coupling_open_rad_s: float, sample_rate: float, *,
                    phase_offset_deg: float = 0.0,
                    floor: float = DEFAULT_FLOOR) -> Callable[[int, int], np.ndarray]:
    """Return ``(start_sample, n) -> mu(t)`` in rad/s for one bar's tube."""
    return DiscModulation(motor, sample_rate, coupling_open_rad_s,
                          phase_offset_deg=phase_offset_deg, floor=floor).coupling_rate


def tube_weight_stream(motor: MotorSpec, tube_weight_open: float, sample_rate: float, *,
                       phase_offset_deg: float = 0.0,
                       floor: float = DEFAULT_FLOOR) -> Callable[[int, int], np.ndarray]:
    """Return ``(start_sample, n) -> tube output weight`` in Pa per sqrt(J)."""
    return DiscModulation(motor, sample_rate, 0.0, tube_weight_open=tube_weight_open,
                          phase_offset_deg=phase_offset_deg, floor=floor).tube_weight


def disc_modulation(pair: CoupledPair, motor: MotorSpec, sample_rate: float, *,
                    phase_offset_deg: float = 0.0, floor: float = DEFAULT_FLOOR,
                    reference_distance_m: float = 1.0) -> DiscModulation:
    """Return the per-sample streams for a coupled bar and tube under a disc.

    ``mu_open`` and the open-mouth tube weight and decay rates come from ``pair``
    (:class:`synth.physics.coupling.CoupledPair`, mouth fully open).
    """
    g_rad = pair.tube_radiation_decay_per_s
    return DiscModulation(
        motor, sample_rate, pair.coupling_rate_rad_s,
        tube_weight_open=pressure_weight(g_rad, reference_distance_m=reference_distance_m,
                                         impedance_rayl=pair.impedance_rayl),
        tube_wall_decay_per_s=max(pair.tube_decay_per_s - g_rad, 0.0),
        tube_radiation_decay_per_s=g_rad, phase_offset_deg=phase_offset_deg, floor=floor)


def _step_matrices(s1: complex, om2: float, g2: np.ndarray, mu: np.ndarray,
                   dt: float) -> np.ndarray:
    """Exact ``exp(A dt)`` of ``A = [[s1, i mu], [i mu, i om2 - g2]]`` per sample, (n, 2, 2)."""
    s2 = 1j * om2 - g2
    m = 0.5 * (s1 + s2)
    d = 0.5 * (s1 - s2)
    r = np.sqrt(d * d - mu * mu + 0j)
    rd = r * dt
    small = np.abs(rd) < 1e-6
    sinh_over_r = np.where(small, dt * (1 + rd * rd / 6.0), np.sinh(rd) / np.where(small, 1, r))
    c = np.cosh(rd)
    e = np.exp(m * dt)
    out = np.empty((len(mu), 2, 2), dtype=complex)
    out[:, 0, 0] = e * (c + sinh_over_r * d)
    out[:, 1, 1] = e * (c - sinh_over_r * d)
    out[:, 0, 1] = e * sinh_over_r * 1j * mu
    out[:, 1, 0] = out[:, 0, 1]
    return out


def steady_bar_decay_per_s(pair: CoupledPair, modulation: DiscModulation, *,
                           start_s: float | None = None) -> float:
    """Decay rate of the bar-like mode under the spinning discs, exactly (Floquet).

    The per-sample coefficients of one modulation period at full speed (the same
    the engine integrates, mu and the tube's decay rate) are multiplied into the
    period's transfer matrix; its larger eigenvalue (Floquet multiplier) rho gives
    the bar-like decay ``-ln|rho| / T``.  With the motor stopped the coefficients are
    constant and this is the coupled pole of the resting opening.

    References
    ----------
    Floquet, G. (1883). Sur les equations differentielles lineaires a coefficients
        periodiques. Ann. Sci. Ec. Norm. Super. 12, 47-88.
    """
    fs = modulation.sample_rate
    motor = modulation.motor
    dt = 1.0 / fs
    if motor.rate_rev_per_s > 0:
        period = int(round(fs / (2.0 * motor.rate_rev_per_s)))
        if start_s is None:
            start_s = motor.start_time_s + 10.0 * motor.spin_up_s + 1.0
    else:
        period, start_s = 1, 0.0 if start_s is None else start_s
    first = int(round(start_s * fs))
    mu = modulation.coupling_rate(first, period)
    g2 = modulation.tube_decay(first, period)
    mats = _step_matrices(pair.s1, pair.s2.imag, g2, mu, dt)
    while len(mats) > 1:  # ordered product, later steps on the left
        if len(mats) % 2:  # pad with an identity step at the end
            mats = np.concatenate([mats, np.eye(2, dtype=complex)[None]])
        mats = np.einsum("nij,njk->nik", mats[1::2], mats[0::2])
    rho = np.linalg.eigvals(mats[0])
    return float(-math.log(np.max(np.abs(rho))) / (period * dt))
