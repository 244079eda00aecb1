"""Generic voice types: what the sound engine is asked to render.

The engine knows nothing about bars, tubes, mallets or notes.  A *voice* is a
set of decaying modes that starts at one sample of the output, optionally stops
at another, is panned over the output channels, may be damped harder from given
samples on, may be shaped by a per-sample gain curve, and may carry coupled
oscillator pairs.  The voice plan (the layer above) builds these from a preset
note and a strike; :mod:`synth.engine.render` turns a list of them into samples.

The clock
---------
Every sample number in a voice (``start_sample``, ``stop_sample``, the damping
schedule) counts samples of the *output*, from 0.  Each gain curve, coupling
curve and weight curve is called as ``curve(first_sample, n)`` with
``first_sample`` on the same output clock and must return ``n`` float values,
one per output sample ``first_sample .. first_sample + n - 1``.  The engine
calls a curve once per block and voice, in increasing time order, with blocks
of whatever size the render uses; a curve must therefore be a pure function of
the sample number (never of how it is called) for the render not to depend on
the block size.  The time of a voice's own signals (phases, decays) runs from
its ``start_sample``: ``t = (sample - start_sample) / sample_rate``.

Mode bank
---------
Mode k of a :class:`ModeBank` contributes, at ``t`` seconds after the start,

    amplitude[k] * exp(-decay_per_s[k] * t - E(t)) * sin(2 pi frequency_hz[k] t + phase_rad[k])

where ``E(t)`` is the extra decay (nepers) added so far by the voice's damping
schedule (zero without one).  ``decay_per_s`` is the amplitude decay rate
``1/tau``; with Q = pi f tau and T60 = tau ln 1000 (physics.md, section 6) a
mode of quality factor Q has ``decay_per_s = pi f / Q``.

Damping schedule
----------------
``damping`` holds ``(sample, extra_decay_per_s)`` changes in increasing sample
order: from that output sample on, every mode's decay rate is its own rate plus
``extra_decay_per_s`` (until the next change).  Changes before the voice starts
set the rate it starts with.  Rates are >= 0: a damper, a pedal, a release.

Onset
-----
``onset`` holds samples added to the voice's output from its start on (one
value per output sample, before the channel gains; the gain curve and the
damping schedule leave them alone).  The voice plan uses it for what its modes
in closed form cannot say, such as the first samples while a force is still
acting on the modes; a voice with an onset keeps sounding at least until the
onset ends.

Coupled pair
------------
A :class:`ModePair` is two complex modes in rotating-wave form

    d/dt [a1, a2] = [[s1, i mu(t)], [i mu(t), s2]] [a1, a2],   s_j = i 2 pi f_j - g_j,

with ``a_j(0) = amplitude_j exp(i phase_rad_j)`` at the voice start and
``g_j = decay_per_s_j`` (plus the damping schedule's extra for the members
flagged in ``damped``); ``g2`` may also follow a curve (``decay_2_curve``).
Its output is ``w1 Im(a1) + w2(t) Im(a2)``, so with ``mu = 0`` each member
is exactly a mode of the bank convention above.  With
this sign convention a member that starts silent grows as ``i mu a_other t``,
a quarter period ahead of the member that drives it.  The eigenvalues are
``(s1 + s2)/2 +- sqrt(((s1 - s2)/2)^2 - mu^2)`` (physics.md, section 8).
``mu`` is in rad/s; a curve gives it per *step*, the value for sample ``n``
being applied over the step from ``n`` to ``n + 1`` (evaluate a smooth
coupling at ``n + 1/2`` for second-order accuracy); the same holds for a
``decay_2_curve``.

Rotor-modulated pair
--------------------
A pair may instead follow a rotor (``modulation``, a :class:`PairModulation`):
a shared angle ``theta(t)`` and, per pair, a :class:`RotorLaw` give the factor

    m(t) = max(1 - depth |cos(theta(t) + offset_rad)|, floor)

and from it ``mu = mu_open m`` (taken at ``n + 1/2``: it acts over the step),
``w2 = w2_open sqrt(m)`` and ``g2 = g2_fixed + g2_per_factor m`` (at the sample
``n``, as the curves above).  The angle rests at ``resting_rad`` until
``start_s``, then the rotor spins up to ``rate_rev_per_s``; with ``u = t -
start_s`` and ``tau = spin_up_s`` the turns made are ``f_r (u + tau expm1(-u /
tau))`` (``"exponential"``), ``f_r u^2 / (2 tau)`` up to ``u = tau`` then ``f_r (u
- tau / 2)`` (``"linear"``), or ``f_r u`` (``tau = 0``); ``theta = resting_rad + 2
pi turns`` with ``t = (n + shift_samples) / sample_rate`` for output sample
``n``.  The engine evaluates this law itself, per sample, inside its compiled
loop; the render then ignores ``coupling_rad_s``, ``weight_2`` and
``decay_2_curve`` (which may carry the same law as curves for other readers).

References
----------
.. [1] Fletcher, N. H. and Rossing, T. D., "The Physics of Musical
   Instruments", 2nd ed., Springer, 1998, ISBN 978-0-387-98374-5 (ISBN from
   memory; ch. 2, damped and coupled oscillators).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Union

import numpy as np

from synth.errors import ModelError

Curve = Callable[[int, int], np.ndarray]
"""A per-sample signal: ``curve(first_sample, n) -> float64 array of n values``."""

CurveOrConstant = Union[float, Curve]  # noqa: UP007  (a type alias needs the runtime form)


def _frozen_array(values, name: str, where: str) -> np.ndarray:
    try:
        arr = np.array(values, dtype=np.float64, copy=True).reshape(-1)
    except (TypeError, ValueError):
        raise ModelError(f"{where}: {name} must be a sequence of numbers") from None
    if not np.all(np.isfinite(arr)):
        bad = int(np.flatnonzero(~np.isfinite(arr))[0])
        raise ModelError(f"{where}: {name}[{bad}] = {arr[bad]}: must be finite")
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True)
class ModeBank:
    """Decaying sinusoidal modes (all arrays of one length, float64, read-only).

    Parameters
    ----------
    frequency_hz : array_like
        Frequency of each mode, Hz, ``0 <= f < sample_rate / 2`` at render time.
    decay_per_s : array_like
        Amplitude decay rate ``1/tau`` of each mode, 1/s, >= 0.
    amplitude : array_like
        Initial amplitude of each mode (output units; any sign).
    phase_rad : array_like, optional
        Initial phase of each mode, rad (default 0: every mode starts at zero).
    """

    frequency_hz: np.ndarray
    decay_per_s: np.ndarray
    amplitude: np.ndarray
    phase_rad: np.ndarray | None = None

    def __post_init__(self) -> None:
        f = _frozen_array(self.frequency_hz, "frequency_hz", "mode bank")
        g = _frozen_array(self.decay_per_s, "decay_per_s", "mode bank")
        a = _frozen_array(self.amplitude, "amplitude", "mode bank")
        p = (np.zeros_like(f) if self.phase_rad is None
             else _frozen_array(self.phase_rad, "phase_rad", "mode bank"))
        p.flags.writeable = False
        for name, arr in (("decay_per_s", g), ("amplitude", a), ("phase_rad", p)):
            if arr.shape != f.shape:
                raise ModelError(
                    f"mode bank: {name} has {arr.size} values, frequency_hz has {f.size}: "
                    "give one value per mode"
                )
        if np.any(f < 0):
            k = int(np.flatnonzero(f < 0)[0])
            raise ModelError(f"mode bank: frequency_hz[{k}] = {f[k]:g}: must be >= 0 Hz")
        if np.any(g < 0):
            k = int(np.flatnonzero(g < 0)[0])
            raise ModelError(
                f"mode bank: decay_per_s[{k}] = {g[k]:g}: must be >= 0 /s (a growing mode "
                "would run away)"
            )
        object.__setattr__(self, "frequency_hz", f)
        object.__setattr__(self, "decay_per_s", g)
        object.__setattr__(self, "amplitude", a)
        object.__setattr__(self, "phase_rad", p)

    @property
    def n_modes(self) -> int:
        """Number of modes."""
        return int(self.frequency_hz.size)

    @classmethod
    def empty(cls) -> ModeBank:
        """Return a bank without modes (for a voice made of coupled pairs only)."""
        return cls(np.zeros(0), np.zeros(0), np.zeros(0))


@dataclass(frozen=True)
class RotorLaw:
    """How a rotor modulates one coupled pair (module docstring, "Rotor-modulated pair").

    Parameters
    ----------
    depth, floor : float
        ``m = max(1 - depth |cos(theta + offset_rad)|, floor)``; 0 <= depth, floor <= 1.
    offset_rad : float
        This pair's angle on the rotor, rad.
    coupling_open_rad_s : float
        Coupling at ``m = 1``, rad/s.
    weight_2_open : float
        Member-2 output weight at ``m = 1``.
    decay_2_fixed_per_s, decay_2_per_factor : float
        Member-2 decay ``g2 = decay_2_fixed_per_s + decay_2_per_factor m``, 1/s (>= 0).
    """

    depth: float
    floor: float
    offset_rad: float
    coupling_open_rad_s: float
    weight_2_open: float
    decay_2_fixed_per_s: float
    decay_2_per_factor: float

    def __post_init__(self) -> None:
        for name in ("depth", "floor", "offset_rad", "coupling_open_rad_s", "weight_2_open",
                     "decay_2_fixed_per_s", "decay_2_per_factor"):
            v = float(getattr(self, name))
            if not math.isfinite(v):
                raise ModelError(f"rotor law: {name} = {v}: must be finite")
        if not (0.0 <= self.depth <= 1.0 and 0.0 <= self.floor <= 1.0):
            raise ModelError(f"rotor law: depth = {self.depth}, floor = {self.floor}: must be "
                             "in [0, 1]")
        if self.decay_2_fixed_per_s < 0 or self.decay_2_per_factor < 0:
            raise ModelError("rotor law: member-2 decay parts must be >= 0 /s")


_SPIN_LAWS = ("exponential", "linear")


@dataclass(frozen=True)
class PairModulation:
    """A rotor's angle law and how it modulates one pair (module docstring).

    Parameters
    ----------
    law : RotorLaw
        Depth, floor, offset and the open-rotor coefficients of the pair.
    rate_rev_per_s : float
        Rate the rotor spins up to, rev/s (>= 0; 0 = it stays at rest).
    resting_rad : float, optional
        Angle at rest, rad.
    start_s : float, optional
        Time the rotor starts on the output clock, s (>= 0).
    spin_up_s : float, optional
        Time constant (``"exponential"``) or ramp time (``"linear"``), s (>= 0).
    spin_up_law : str, optional
        ``"exponential"`` or ``"linear"``.
    shift_samples : int, optional
        Samples added to the output clock before the law is read (a voice moved
        to another start keeps its rotor).
    """

    law: RotorLaw
    rate_rev_per_s: float
    resting_rad: float = 0.0
    start_s: float = 0.0
    spin_up_s: float = 0.0
    spin_up_law: str = "exponential"
    shift_samples: int = 0

    def __post_init__(self) -> None:
        if not isinstance(self.law, RotorLaw):
            raise ModelError("pair modulation: law must be a RotorLaw")
        for name in ("rate_rev_per_s", "resting_rad", "start_s", "spin_up_s"):
            v = float(getattr(self, name))
            if not math.isfinite(v) or (name != "resting_rad" and v < 0):
                raise ModelError(f"pair modulation: {name} = {v}: must be finite"
                                 + (" and >= 0" if name != "resting_rad" else ""))
            object.__setattr__(self, name, v)
        if self.spin_up_law not in _SPIN_LAWS:
            raise ModelError(f"pair modulation: spin_up_law = {self.spin_up_law!r}: must be "
                             "exponential or linear")
        object.__setattr__(self, "shift_samples",
                           _as_sample(self.shift_samples, "shift_samples", "pair modulation"))

    @property
    def rotor_key(self) -> tuple[float, float, float, float, float, int]:
        """The rotor's own values (pairs sharing them share its angle)."""
        return (self.rate_rev_per_s, self.resting_rad, self.start_s, self.spin_up_s,
                float(_SPIN_LAWS.index(self.spin_up_law)), self.shift_samples)

    def factor_range(self) -> tuple[float, float]:
        """Smallest and largest value ``m`` can take."""
        law = self.law
        return max(1.0 - law.depth, law.floor), max(1.0, law.floor)


@dataclass(frozen=True)
class ModePair:
    """Two complex modes coupled in rotating-wave form (see the module docstring).

    Parameters
    ----------
    frequency_hz : (float, float)
        Uncoupled frequencies ``f1, f2`` in Hz (``om_j = 2 pi f_j``).
    decay_per_s : (float, float)
        Uncoupled amplitude decay rates ``g1, g2`` in 1/s, >= 0.
    amplitude : (float, float)
        Initial magnitudes of ``a1, a2`` at the voice start.
    phase_rad : (float, float), optional
        Initial phases of ``a1, a2`` (default 0, 0).
    coupling_rad_s : float or curve
        Coupling rate ``mu`` in rad/s, a constant or ``curve(first_sample, n)``.
        ``|mu| / sample_rate`` must stay <= 0.01 (it is about 1e-4 for a bar
        and its tube).
    weight_1 : float, optional
        Output weight of member 1 (default 1).
    weight_2 : float or curve, optional
        Output weight of member 2, a constant or a curve (default 1).
    damped : (bool, bool), optional
        Which members the voice's damping schedule acts on (default both).
    decay_2_curve : curve, optional
        Per-step amplitude decay rate of member 2, 1/s (for example a tube
        whose mouth a spinning disc opens and closes); the value of sample
        ``n`` applies over the step ``n -> n + 1``.  ``decay_per_s[1]`` must then
        be a lower bound of it (it decides when the voice has died away); a
        value below it, or one with ``(g1 + g2) / (2 sample_rate) > 0.005``
        (240 /s at 48 kHz),
        raises ModelError at render time.
    weight_2_max : float, optional
        Bound of ``|weight_2|`` when it is a curve, used to decide when the
        voice may be retired and to bound the peak in advance; a curve value
        above it raises ModelError at render time.  Without it the render takes
        the largest value the curve has given so far, and no advance peak bound
        exists.
    modulation : PairModulation, optional
        A rotor law the engine evaluates per sample (module docstring,
        "Rotor-modulated pair"); the render then ignores ``coupling_rad_s``,
        ``weight_2`` and ``decay_2_curve``.  ``decay_per_s[1]`` must be a lower
        bound of the modulated ``g2``.
    """

    frequency_hz: tuple[float, float]
    decay_per_s: tuple[float, float]
    amplitude: tuple[float, float]
    phase_rad: tuple[float, float] = (0.0, 0.0)
    coupling_rad_s: CurveOrConstant = 0.0
    weight_1: float = 1.0
    weight_2: CurveOrConstant = 1.0
    damped: tuple[bool, bool] = (True, True)
    decay_2_curve: Curve | None = None
    weight_2_max: float | None = None
    modulation: PairModulation | None = None

    def __post_init__(self) -> None:
        if self.modulation is not None and not isinstance(self.modulation, PairModulation):
            raise ModelError("coupled pair: modulation must be a PairModulation")
        if self.decay_2_curve is not None and not callable(self.decay_2_curve):
            raise ModelError("coupled pair: decay_2_curve must be a callable (first_sample, n)")
        object.__setattr__(self, "weight_2_max",
                           _bound_or_none(self.weight_2_max, "weight_2_max", "coupled pair"))
        for name in ("frequency_hz", "decay_per_s", "amplitude", "phase_rad"):
            vals = getattr(self, name)
            try:
                pair = tuple(float(v) for v in vals)
            except (TypeError, ValueError):
                raise ModelError(f"coupled pair: {name} must be two numbers") from None
            if len(pair) != 2 or not all(math.isfinite(v) for v in pair):
                raise ModelError(f"coupled pair: {name} = {vals!r}: must be two finite numbers")
            object.__setattr__(self, name, pair)
        if min(self.frequency_hz) < 0:
            raise ModelError(f"coupled pair: frequency_hz = {self.frequency_hz}: must be >= 0 Hz")
        if min(self.decay_per_s) < 0:
            raise ModelError(f"coupled pair: decay_per_s = {self.decay_per_s}: must be >= 0 /s")
        for name in ("coupling_rad_s", "weight_2"):
            v = getattr(self, name)
            if not callable(v):
                v = float(v)
                if not math.isfinite(v):
                    raise ModelError(f"coupled pair: {name} = {v}: must be finite or a curve")
                object.__setattr__(self, name, v)
        w1 = float(self.weight_1)
        if not math.isfinite(w1):
            raise ModelError(f"coupled pair: weight_1 = {w1}: must be finite")
        object.__setattr__(self, "weight_1", w1)
        damped = tuple(bool(b) for b in self.damped)
        if len(damped) != 2:
            raise ModelError(f"coupled pair: damped = {self.damped!r}: must be two booleans")
        object.__setattr__(self, "damped", damped)


@dataclass(frozen=True)
class Voice:
    """One sounding thing: modes that start at a sample, panned, damped, shaped.

    Parameters
    ----------
    start_sample : int
        Output sample at which the voice starts (its ``t = 0``), >= 0.
    modes : ModeBank
        The decaying modes (may be empty when the voice is made of pairs).
    channel_gains : sequence of float, optional
        Gain into each output channel: ``(1.0,)`` for mono (default), two values
        for stereo (see :func:`constant_power_pan`).
    stop_sample : int, optional
        First output sample at which the voice is silent (a hard stop; use the
        damping schedule for a natural release).  ``None``: rings out.
    damping : sequence of (int, float), optional
        ``(sample, extra_decay_per_s)`` changes, samples strictly increasing,
        rates >= 0 (see the module docstring).
    gain_curve : curve, optional
        Per-sample gain applied to the whole voice, ``curve(first_sample, n)``.
    pairs : sequence of ModePair, optional
        Coupled oscillator pairs sounding with the modes.
    label : str, optional
        Free text used in error messages (the voice plan puts the note here).
    gain_curve_max : float, optional
        Bound of the gain curve's magnitude.  The render uses it to decide when
        the voice may be retired and to bound the peak in advance; a curve
        value above it raises ModelError.  Without it the render takes the
        largest value the curve has given so far (a curve that rises far above
        that late in a voice could be cut off; see
        :mod:`synth.engine.render`), and no advance peak bound exists.
    onset : sequence of float, optional
        Samples added to the voice from ``start_sample`` on, before the channel
        gains (see the module docstring); ``None`` or empty: none.
    """

    start_sample: int
    modes: ModeBank
    channel_gains: tuple[float, ...] = (1.0,)
    stop_sample: int | None = None
    damping: tuple[tuple[int, float], ...] = ()
    gain_curve: Curve | None = None
    pairs: tuple[ModePair, ...] = field(default=())
    label: str = ""
    gain_curve_max: float | None = None
    onset: np.ndarray | None = None

    def __post_init__(self) -> None:
        where = self.where
        if self.onset is not None:
            onset = _frozen_array(self.onset, "onset", where)
            object.__setattr__(self, "onset", onset if onset.size else None)
        start = _as_sample(self.start_sample, "start_sample", where)
        if start < 0:
            raise ModelError(f"{where}: start_sample = {start}: must be >= 0")
        object.__setattr__(self, "start_sample", start)
        if self.stop_sample is not None:
            stop = _as_sample(self.stop_sample, "stop_sample", where)
            if stop < start:
                raise ModelError(
                    f"{where}: stop_sample = {stop}: must be >= start_sample = {start}"
                )
            object.__setattr__(self, "stop_sample", stop)
        if not isinstance(self.modes, ModeBank):
            raise ModelError(f"{where}: modes must be a ModeBank")
        gains = tuple(float(g) for g in self.channel_gains)
        if len(gains) not in (1, 2) or not all(math.isfinite(g) for g in gains):
            raise ModelError(
                f"{where}: channel_gains = {self.channel_gains!r}: must be 1 (mono) or 2 "
                "(stereo) finite numbers"
            )
        object.__setattr__(self, "channel_gains", gains)
        changes: list[tuple[int, float]] = []
        for i, item in enumerate(self.damping):
            try:
                s, e = item
            except (TypeError, ValueError):
                raise ModelError(
                    f"{where}: damping[{i}] = {item!r}: must be (sample, extra_decay_per_s)"
                ) from None
            s = _as_sample(s, f"damping[{i}] sample", where)
            e = float(e)
            if not (math.isfinite(e) and e >= 0):
                raise ModelError(
                    f"{where}: damping[{i}] extra_decay_per_s = {e}: must be finite and >= 0 /s"
                )
            if changes and s <= changes[-1][0]:
                raise ModelError(
                    f"{where}: damping[{i}] sample = {s}: samples must be strictly increasing"
                )
            changes.append((s, e))
        object.__setattr__(self, "damping", tuple(changes))
        if self.gain_curve is not None and not callable(self.gain_curve):
            raise ModelError(f"{where}: gain_curve must be a callable (first_sample, n) -> array")
        object.__setattr__(self, "gain_curve_max",
                           _bound_or_none(self.gain_curve_max, "gain_curve_max", where))
        pairs = tuple(self.pairs)
        if not all(isinstance(p, ModePair) for p in pairs):
            raise ModelError(f"{where}: pairs must be ModePair objects")
        object.__setattr__(self, "pairs", pairs)

    @property
    def where(self) -> str:
        """Name of the voice for error messages."""
        return f"voice {self.label}" if self.label else "voice"

    @property
    def n_channels(self) -> int:
        """Number of output channels this voice is panned over."""
        return len(self.channel_gains)


def _bound_or_none(value, name: str, where: str) -> float | None:
    if value is None:
        return None
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ModelError(f"{where}: {name} = {value!r}: must be a number or None") from None
    if not (math.isfinite(v) and v >= 0):
        raise ModelError(f"{where}: {name} = {v}: must be finite and >= 0")
    return v


def _as_sample(value, name: str, where: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int | np.integer):
        if isinstance(value, float | np.floating) and float(value).is_integer():
            return int(value)
        raise ModelError(f"{where}: {name} = {value!r}: must be a whole number of samples")
    return int(value)


def constant_power_pan(pan: float) -> tuple[float, float]:
    """Return (left, right) gains of the constant-power (sine-cosine) pan law.

    Parameters
    ----------
    pan : float
        -1 (hard left) .. 0 (centre) .. +1 (hard right).

    Returns
    -------
    left, right : float
        ``cos(theta), sin(theta)`` with ``theta = (pan + 1) pi / 4``, so
        ``left^2 + right^2 = 1`` and the centre gives ``1/sqrt(2)`` to each side
        (-3 dB; common practice, no source).
    """
    pan = float(pan)
    if not (-1.0 <= pan <= 1.0):
        raise ModelError(f"pan = {pan:g}: must be between -1 (left) and 1 (right)")
    theta = (pan + 1.0) * math.pi / 4.0
    return math.cos(theta), math.sin(theta)


def seconds_to_sample(time_s: float, sample_rate: float) -> int:
    """Return the output sample nearest to ``time_s`` (halves round up).

    This is the one conversion from event times to the engine's clock; use it
    everywhere so that events land on the same sample whoever converts them.
    """
    x = float(time_s) * float(sample_rate)
    if not math.isfinite(x):
        raise ModelError(f"time {time_s!r} s is not a finite time")
    return int(math.floor(x + 0.5))

